"""Monte-Carlo discounted return-to-go of every transition of a replay dataset.

Holds:
    episode_ends -- where episodes end: a terminated or truncated step, a new episode number,
        or the last row.
    discounted_return_to_go -- G_t = r_t + gamma * G_{t+1} within an episode, 0 past its end.
    dataset_return_to_go -- the same for a ReplayDataset (docs/datasets.md field names).

A truncated (or cut-off) episode is summed to its last recorded step like a terminated one:
the return-to-go is a Monte-Carlo figure, with nothing bootstrapped past the data.
"""

from __future__ import annotations

import numpy as np


def episode_ends(terminated: np.ndarray, truncated: np.ndarray,
                 episode_index: np.ndarray | None = None) -> np.ndarray:
    """Bool [T]: True on the last row of each episode.

    Example:
        >>> episode_ends(np.array([0, 1, 0, 0], bool), np.array([0, 0, 0, 0], bool),
        ...              np.array([0, 0, 1, 2])).tolist()
        [False, True, True, True]
    """
    ends = np.asarray(terminated, dtype=bool) | np.asarray(truncated, dtype=bool)
    if ends.ndim != 1 or ends.size == 0:
        raise ValueError(f"terminated: got shape {ends.shape}, expected a non-empty [T] array")
    if episode_index is not None:
        index = np.asarray(episode_index)
        if index.shape != ends.shape:
            raise ValueError(f"episode_index: got shape {index.shape}, expected {ends.shape}")
        ends[:-1] |= index[1:] != index[:-1]
    ends[-1] = True
    return ends


def discounted_return_to_go(rewards: np.ndarray, ends: np.ndarray, gamma: float) -> np.ndarray:
    """Float64 [T]: sum over k >= t, inside t's episode, of gamma^(k - t) * r_k.

    ``ends`` [T] marks each episode's last row (see ``episode_ends``). Computed backwards
    from the episodes' ends one step at a time for all episodes at once (a loop over the
    longest episode's length, not over rows or episodes), in float64, exactly the recursion
    G_t = r_t + gamma * G_{t+1}.

    Example:
        >>> discounted_return_to_go(np.array([1.0, 0.0, 2.0]), np.array([0, 0, 1], bool), 0.5)
        array([1.5, 1. , 2. ])
    """
    if not 0.0 <= gamma <= 1.0:
        raise ValueError(f"gamma: got {gamma!r}, expected a number in [0, 1]")
    r = np.asarray(rewards, dtype=np.float64)
    ends = np.asarray(ends, dtype=bool)
    if r.ndim != 1 or r.shape != ends.shape:
        raise ValueError(f"rewards: got shape {r.shape}, expected one value per row of ends "
                         f"{ends.shape}")
    if not ends[-1]:
        raise ValueError("ends: the last row must end an episode")
    last = np.flatnonzero(ends)
    lengths = np.diff(np.concatenate(([-1], last)))
    order = np.argsort(-lengths, kind="stable")
    last, lengths = last[order], lengths[order]  # longest episodes first
    out = np.empty_like(r)
    out[last] = r[last]
    for back in range(1, int(lengths[0])):
        alive = int(np.searchsorted(-lengths, -back, side="left"))  # episodes longer than back
        rows = last[:alive] - back
        out[rows] = r[rows] + gamma * out[rows + 1]
    return out


def dataset_return_to_go(dataset, gamma: float) -> np.ndarray:
    """Float64 [T] return-to-go of every row of a ``ReplayDataset`` (its own episodes)."""
    ends = episode_ends(dataset.array("terminated"), dataset.array("truncated"),
                        dataset.array("episode_index"))
    return discounted_return_to_go(dataset.array("rewards"), ends, gamma)
