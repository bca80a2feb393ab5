"""The fields a replay dataset holds, with their dtypes and shapes.

Holds:
    FORMAT_VERSION -- the manifest format version this code writes and reads.
    MANIFEST_NAME -- the manifest's file name inside a dataset directory.
    FieldSpec -- one field: name, dtype, whether it has one row per transition or per episode.
    FIELDS -- every field the format knows, by name.
    STEP_FIELDS_REQUIRED / EPISODE_FIELDS_REQUIRED -- fields every dataset has.
    expected_fields -- the exact field set a dataset with given options must have.
    expected_shape -- the shape a field must have, given the counts and dimensions.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

FORMAT_VERSION = 1
MANIFEST_NAME = "manifest.json"


@dataclass(frozen=True)
class FieldSpec:
    """One array of a dataset.

    ``per`` is ``"transition"`` (T rows) or ``"episode"`` (E rows); ``width`` names the
    dimension of the second axis (``"obs_dim"``, ``"act_dim"``) or is ``None`` for a 1-D array.

    Example:
        >>> FIELDS["actions"].dtype, FIELDS["actions"].per, FIELDS["actions"].width
        (dtype('float32'), 'transition', 'act_dim')
    """

    name: str
    dtype: np.dtype
    per: str
    width: str | None
    meaning: str


def _spec(name: str, dtype: type, per: str, width: str | None, meaning: str) -> FieldSpec:
    return FieldSpec(name, np.dtype(dtype), per, width, meaning)


FIELDS: dict[str, FieldSpec] = {
    spec.name: spec
    for spec in (
        _spec("observations", np.float32, "transition", "obs_dim", "observation before the step"),
        _spec("actions", np.float32, "transition", "act_dim", "action taken"),
        _spec("rewards", np.float32, "transition", None, "reward received"),
        _spec("next_observations", np.float32, "transition", "obs_dim", "observation after it"),
        _spec("terminated", np.bool_, "transition", None, "the step ended the episode (MDP end)"),
        _spec("truncated", np.bool_, "transition", None, "the episode was cut (time limit)"),
        _spec("episode_index", np.int64, "transition", None, "episode number, 0..E-1, in order"),
        _spec("success", np.bool_, "transition", None, "the env reported success at this step"),
        _spec("episode_lengths", np.int64, "episode", None, "transitions in each episode"),
        _spec("episode_returns", np.float64, "episode", None, "sum of each episode's rewards"),
        _spec("episode_success", np.bool_, "episode", None, "some step of the episode succeeded"),
        _spec("parent_episodes", np.int64, "episode", None, "episode number in the split parent"),
    )
}

STEP_FIELDS_REQUIRED = (
    "observations",
    "actions",
    "rewards",
    "next_observations",
    "terminated",
    "truncated",
    "episode_index",
)
EPISODE_FIELDS_REQUIRED = ("episode_lengths", "episode_returns")


def expected_fields(*, has_success: bool, is_split_part: bool) -> tuple[str, ...]:
    """The exact set of fields (in canonical order) a dataset with these options holds.

    Example:
        >>> expected_fields(has_success=False, is_split_part=False)[-2:]
        ('episode_lengths', 'episode_returns')
    """
    names = list(STEP_FIELDS_REQUIRED)
    if has_success:
        names.append("success")
    names += EPISODE_FIELDS_REQUIRED
    if has_success:
        names.append("episode_success")
    if is_split_part:
        names.append("parent_episodes")
    return tuple(names)


def expected_shape(
    name: str, *, transitions: int, episodes: int, obs_dim: int, act_dim: int
) -> tuple[int, ...]:
    """Shape field ``name`` must have for the given counts and dimensions.

    Example:
        >>> expected_shape("observations", transitions=10, episodes=2, obs_dim=3, act_dim=1)
        (10, 3)
    """
    spec = FIELDS[name]
    rows = transitions if spec.per == "transition" else episodes
    if spec.width is None:
        return (rows,)
    return (rows, {"obs_dim": obs_dim, "act_dim": act_dim}[spec.width])
