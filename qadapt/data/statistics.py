"""Summary figures of a dataset: counts, episode lengths, returns, success, action ranges.

Holds:
    DatasetStatistics -- the figures, with ``to_json()``.
    dataset_statistics -- compute them from a (verified) dataset, reading in blocks.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from qadapt.data.format.episodes import finished_episodes

_ACTION_BLOCK_ROWS = 1 << 18


@dataclass(frozen=True)
class DatasetStatistics:
    """What a dataset holds, in figures.

    ``finished_episodes`` end with terminated or truncated; the rest were cut off by the end of
    the collection. Return and success figures are over finished episodes. ``success_rate`` is
    None when the environment reported no success flag (success is then unknown: a positive
    return is not taken to mean success).
    """

    transitions: int
    episodes: int
    finished_episodes: int
    terminated_episodes: int
    truncated_episodes: int
    episode_length_min: int
    episode_length_mean: float
    episode_length_max: int
    return_mean: float | None
    return_std: float | None
    return_min: float | None
    return_max: float | None
    success_rate: float | None
    successful_episodes: int | None
    action_min: list[float]
    action_max: list[float]

    def to_json(self) -> dict[str, Any]:
        return asdict(self)


def dataset_statistics(dataset) -> DatasetStatistics:
    """Figures for ``dataset`` (a ReplayDataset; verified first if it was not yet).

    Example:
        >>> import tempfile
        >>> from pathlib import Path
        >>> from qadapt.data.writing.synthetic import write_synthetic_dataset
        >>> from qadapt.data.format.dataset import open_dataset
        >>> ds = open_dataset(write_synthetic_dataset(Path(tempfile.mkdtemp()) / "s",
        ...                                           transitions=400, episode_length=100))
        >>> s = dataset_statistics(ds)
        >>> s.episodes, s.success_rate
        (4, 0.5)
    """
    lengths = np.asarray(dataset.array("episode_lengths"))
    returns = np.asarray(dataset.array("episode_returns"))
    terminated = np.asarray(dataset.array("terminated"))
    truncated = np.asarray(dataset.array("truncated"))
    ends = np.cumsum(lengths) - 1
    finished = finished_episodes(terminated, truncated, lengths)
    done_returns = returns[finished]
    success_rate = successful = None
    if dataset.has_success and finished.any():
        flags = np.asarray(dataset.array("episode_success"))[finished]
        successful = int(flags.sum())
        success_rate = float(flags.mean())
    action_min = np.full(dataset.act_dim, np.inf)
    action_max = np.full(dataset.act_dim, -np.inf)
    for start in range(0, dataset.transition_count, _ACTION_BLOCK_ROWS):
        stop = min(start + _ACTION_BLOCK_ROWS, dataset.transition_count)
        block = dataset.rows("actions", start, stop)
        action_min = np.minimum(action_min, block.min(axis=0))
        action_max = np.maximum(action_max, block.max(axis=0))

    def figure(function) -> float | None:
        return float(function(done_returns)) if done_returns.size else None

    return DatasetStatistics(
        transitions=dataset.transition_count,
        episodes=dataset.episode_count,
        finished_episodes=int(finished.sum()),
        terminated_episodes=int(terminated[ends].sum()),
        truncated_episodes=int((truncated[ends] & ~terminated[ends]).sum()),
        episode_length_min=int(lengths.min()),
        episode_length_mean=float(lengths.mean()),
        episode_length_max=int(lengths.max()),
        return_mean=figure(np.mean),
        return_std=figure(np.std),
        return_min=figure(np.min),
        return_max=figure(np.max),
        success_rate=success_rate,
        successful_episodes=successful,
        action_min=[float(v) for v in action_min],
        action_max=[float(v) for v in action_max],
    )
