"""Refusing a checkpoint whose observation or action space differs from the one at hand.

Holds:
    check_checkpoint_spaces -- BadInput naming both shapes unless the recorded spaces match.

Compared by ``qadapt.spaces.space_difference``, the one comparison datasets use too: the kind
(Box or Discrete), the shape, the choices of a Discrete and the bounds of a Box (to a relative
1e-6). Dtypes are not compared.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import gymnasium

from qadapt.errors import BadInput
from qadapt.spaces import BoxDescription, DiscreteDescription, describe_space, space_difference


def _described(space: Any, role: str) -> BoxDescription | DiscreteDescription:
    if isinstance(space, BoxDescription | DiscreteDescription):
        return space
    if isinstance(space, gymnasium.Space):
        return describe_space(space, role=role)
    raise BadInput(
        f"{role}: got {type(space).__name__}, expected a gymnasium space or a dataset's "
        "space description"
    )


def _kind_text(space: BoxDescription | DiscreteDescription) -> str:
    if isinstance(space, BoxDescription):
        return f"a Box of shape {space.shape}"
    return f"a Discrete space of {space.n} choices from {space.start} (shape ())"


def _mismatch(
    trained: BoxDescription | DiscreteDescription,
    other: BoxDescription | DiscreteDescription,
    noun: str,
    where: str,
    what: str,
) -> str | None:
    difference = space_difference(trained, other)
    if difference is None:
        return None
    kind, i = difference
    if kind in ("kind", "choices"):
        return (
            f"{where} was trained for {noun} in {_kind_text(trained)}, "
            f"the {what} has {_kind_text(other)}"
        )
    if kind == "shape":
        return (
            f"{where} was trained for {noun} of shape {trained.shape}, "
            f"the {what} has {other.shape}"
        )
    return (
        f"{where} was trained for {noun} of shape {trained.shape} with bounds "
        f"{[trained.low[i], trained.high[i]]} in dimension {i}, the {what} has shape "
        f"{other.shape} with bounds {[other.low[i], other.high[i]]} there"
    )


def check_checkpoint_spaces(
    path: Path | str,
    observation_space: gymnasium.Space,
    action_space: gymnasium.Space,
    *,
    expect_observation_space: Any = None,
    expect_action_space: Any = None,
    what: str = "dataset",
) -> None:
    """BadInput unless the checkpoint's spaces match the expected ones (None: not checked).

    ``expect_*`` are gymnasium spaces or a dataset's recorded descriptions; ``what`` names
    their owner in the message ("dataset", "env").

    Example:
        >>> box = gymnasium.spaces.Box(-1.0, 1.0, (61,))
        >>> try:
        ...     check_checkpoint_spaces("ckpt", box, box,
        ...                             expect_observation_space=gymnasium.spaces.Box(-1, 1, (63,)))
        ... except BadInput as err:
        ...     print(err)
        checkpoint ckpt was trained for observations of shape (61,), the dataset has (63,)
    """
    where = f"checkpoint {path}"
    for noun, role, trained, expected in (
        ("observations", "expect_observation_space", observation_space, expect_observation_space),
        ("actions", "expect_action_space", action_space, expect_action_space),
    ):
        if expected is None:
            continue
        problem = _mismatch(
            _described(trained, role), _described(expected, role), noun, where, what
        )
        if problem:
            raise BadInput(problem)
