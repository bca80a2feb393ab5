"""Building a maximiser by kind for a gymnasium action space.

Holds:
    MaximizerBuilder -- the signature of one registry entry: (action_space, **settings).
    MAXIMIZERS -- the registry: kind name -> builder.
    build_maximizer -- look a kind up in the registry and build it for an action space.
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
    """One-hot candidates for Discrete(n); a Box needs an explicit candidate list inside it."""
    if isinstance(action_space, gym.spaces.Discrete):
        if candidates is not None:
            raise ValueError(
                "candidates: got a value, expected none for a Discrete space "
                "(its one-hot candidates are used)"
            )
        _check_setting_names("exhaustive", settings, ExhaustiveMaximizer, exclude=("candidates",))
        return ExhaustiveMaximizer.for_discrete(int(action_space.n), **settings)
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
        5
    """
    if kind not in MAXIMIZERS:
        raise ValueError(f"kind: got {kind!r}, expected one of {sorted(MAXIMIZERS)}")
    if not isinstance(action_space, gym.spaces.Space):
        raise ValueError(
            f"action_space: got {type(action_space).__name__}, expected a gymnasium Space"
        )
    return MAXIMIZERS[kind](action_space, **settings)
