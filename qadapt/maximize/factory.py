"""Building a maximiser by kind for a gymnasium action space.

Holds:
    MaximizerBuilder -- the signature of one registry entry: (action_space, **settings).
    MAXIMIZERS -- the registry: kind name -> builder.
    build_maximizer -- look a kind up in the registry and build it for an action space.
    KINDS -- what a config may name: "auto" and the registry's kinds.
    resolve_kind -- "auto" made concrete for a space: exhaustive for Discrete, CEM for a Box.
    maximizer_for_space -- the maximiser a job's settings (kind plus CEM settings) ask for.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable

import gymnasium as gym
import numpy as np

from qadapt.maximize.base import ActionMaximizer
from qadapt.maximize.cem import CrossEntropyMaximizer
from qadapt.maximize.exhaustive import ExhaustiveMaximizer

MaximizerBuilder = Callable[..., ActionMaximizer]


def _check_setting_names(
    kind: str, settings: dict, maximizer: type, exclude: tuple[str, ...]
) -> None:
    """Unknown setting names become a ValueError listing the accepted ones."""
    accepted = [p for p in inspect.signature(maximizer).parameters if p not in exclude]
    unknown = sorted(set(settings) - set(accepted))
    if unknown:
        raise ValueError(
            f"settings: got unknown {unknown} for kind {kind!r}, expected some of {accepted}"
        )


def _flat_box(action_space: gym.spaces.Box, kind: str) -> gym.spaces.Box:
    if len(action_space.shape) != 1:
        raise ValueError(
            f"action_space: got a Box of shape {action_space.shape}, expected a 1-D Box "
            f"for kind {kind!r}"
        )
    return action_space


def _build_cem(action_space: gym.spaces.Space, **settings) -> CrossEntropyMaximizer:
    """CEM over a 1-D Box with finite bounds; settings go to CrossEntropyMaximizer."""
    if not isinstance(action_space, gym.spaces.Box):
        raise ValueError(
            f"action_space: got {action_space}, expected a gymnasium Box for kind 'cem' "
            "(use kind 'exhaustive' for Discrete spaces)"
        )
    box = _flat_box(action_space, "cem")
    if not (np.all(np.isfinite(box.low)) and np.all(np.isfinite(box.high))):
        raise ValueError(
            f"action_space: got {box} with unbounded dimensions, expected finite bounds for CEM"
        )
    _check_setting_names("cem", settings, CrossEntropyMaximizer, exclude=("low", "high"))
    return CrossEntropyMaximizer(low=box.low, high=box.high, **settings)


def _build_exhaustive(
    action_space: gym.spaces.Space, candidates: object = None, **settings
) -> ExhaustiveMaximizer:
    """Every choice of a Discrete space, in the one-column form datasets store it in; a Box
    needs an explicit candidate list inside it."""
    if isinstance(action_space, gym.spaces.Discrete):
        if candidates is not None:
            raise ValueError(
                "candidates: got a value, expected none for a Discrete space "
                "(its one-hot candidates are used)"
            )
        _check_setting_names("exhaustive", settings, ExhaustiveMaximizer, exclude=("candidates",))
        return ExhaustiveMaximizer.for_choices(int(action_space.n), int(action_space.start),
                                                **settings)
    if isinstance(action_space, gym.spaces.Box):
        box = _flat_box(action_space, "exhaustive")
        if candidates is None:
            raise ValueError(
                f"candidates: got None, expected a [C, {box.shape[0]}] array of actions inside "
                "the Box (a Box has no finite action set of its own)"
            )
        _check_setting_names("exhaustive", settings, ExhaustiveMaximizer, exclude=("candidates",))
        maximizer = ExhaustiveMaximizer(candidates, **settings)
        chosen = maximizer.candidates.numpy()
        if chosen.shape[1] != box.shape[0]:
            raise ValueError(
                f"candidates: got dimension {chosen.shape[1]}, expected the Box's {box.shape[0]}"
            )
        # Compare in float32, the dtype the candidates are kept in.
        low, high = box.low.astype(np.float32), box.high.astype(np.float32)
        if not bool(np.all((chosen >= low) & (chosen <= high))):
            raise ValueError("candidates: got actions outside the Box, expected all inside it")
        return maximizer
    raise ValueError(
        f"action_space: got {action_space}, expected Discrete or a 1-D Box for kind 'exhaustive'"
    )


MAXIMIZERS: dict[str, MaximizerBuilder] = {
    "cem": _build_cem,
    "exhaustive": _build_exhaustive,
}


def build_maximizer(kind: str, action_space: gym.spaces.Space, **settings) -> ActionMaximizer:
    """Build the maximiser of ``kind`` (a key of MAXIMIZERS) for ``action_space``.

    "cem" takes a 1-D Box and the CrossEntropyMaximizer settings (not low/high);
    "exhaustive" takes a Discrete space, or a 1-D Box with ``candidates`` [C, A] inside it.

    Example:
        >>> import gymnasium as gym
        >>> build_maximizer("cem", gym.spaces.Box(-1.0, 1.0, (4,)), samples=32).samples
        32
        >>> build_maximizer("exhaustive", gym.spaces.Discrete(5)).action_dim
        1
    """
    if kind not in MAXIMIZERS:
        raise ValueError(f"kind: got {kind!r}, expected one of {sorted(MAXIMIZERS)}")
    if not isinstance(action_space, gym.spaces.Space):
        raise ValueError(
            f"action_space: got {type(action_space).__name__}, expected a gymnasium Space"
        )
    return MAXIMIZERS[kind](action_space, **settings)


KINDS = ("auto", *MAXIMIZERS)


def resolve_kind(kind: str, action_space: gym.spaces.Space) -> str:
    """The concrete kind for ``action_space``: "auto" is "exhaustive" for a Discrete space
    (every choice scored: exact, and cheap for the small spaces of control tasks) and "cem" for
    a Box; an explicit kind is returned as given (its builder checks the space).

    Example:
        >>> resolve_kind("auto", gym.spaces.Discrete(2)), resolve_kind("auto", gym.spaces.Box(0, 1))
        ('exhaustive', 'cem')
    """
    if kind not in KINDS:
        raise ValueError(f"kind: got {kind!r}, expected one of {', '.join(KINDS)}")
    if kind != "auto":
        return kind
    return "exhaustive" if isinstance(action_space, gym.spaces.Discrete) else "cem"


def maximizer_for_space(
    kind: str, action_space: gym.spaces.Space, cem_settings: dict | None = None
) -> ActionMaximizer:
    """The maximiser a job's settings ask for: ``kind`` (one of KINDS) resolved for the space;
    ``cem_settings`` (CrossEntropyMaximizer's, without the bounds) apply to CEM only, since
    the exhaustive search has none. A Box with kind "exhaustive" is refused: a job has no
    candidate list to give it.

    Example:
        >>> type(maximizer_for_space("auto", gym.spaces.Discrete(3), {"samples": 8})).__name__
        'ExhaustiveMaximizer'
    """
    chosen = resolve_kind(kind, action_space)
    if chosen == "exhaustive" and isinstance(action_space, gym.spaces.Box):
        raise ValueError(
            f"kind: got 'exhaustive' for {action_space}, expected a Discrete action space "
            "(a Box has no finite action set; use 'cem' or 'auto')"
        )
    settings = (cem_settings or {}) if chosen == "cem" else {}
    return build_maximizer(chosen, action_space, **settings)
