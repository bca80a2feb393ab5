"""Invented datasets of a chosen size, for benchmarks, examples and tests (not for training).

Holds:
    write_synthetic_dataset -- write a dataset of random episodes with the pick cell's sizes
        (61-dimensional observations, 4-dimensional actions in [-1, 1]) by default.
"""

from __future__ import annotations

from pathlib import Path

import gymnasium
import numpy as np

from qadapt.data.writing.writer import DatasetWriter


def write_synthetic_dataset(
    out: str | Path,
    *,
    transitions: int,
    obs_dim: int = 61,
    act_dim: int = 4,
    episode_length: int = 100,
    seed: int = 0,
    chunk_transitions: int = 1 << 17,
    overwrite: bool = False,
) -> Path:
    """Write ``transitions`` random transitions in episodes of ``episode_length`` steps.

    Within an episode ``next_observations[t] == observations[t + 1]``; every other episode ends
    ``terminated`` (with ``success`` on its last step), the rest ``truncated``. Values are
    standard-normal noise: this is stand-in data for measuring speed and memory only.

    Example:
        >>> import tempfile
        >>> path = write_synthetic_dataset(Path(tempfile.mkdtemp()) / "s", transitions=250,
        ...                                episode_length=100)
        >>> from qadapt.data.format.dataset import open_dataset
        >>> open_dataset(path).episode_count
        3
    """
    if transitions < 1:
        raise ValueError(f"transitions: got {transitions}, expected a positive integer")
    if episode_length < 1:
        raise ValueError(f"episode_length: got {episode_length}, expected a positive integer")
    rng = np.random.default_rng(seed)
    writer = DatasetWriter(
        out,
        environment={
            "id": "synthetic",
            "kwargs": {"obs_dim": obs_dim, "act_dim": act_dim},
            "wrappers": [],
        },
        observation_space=gymnasium.spaces.Box(-np.inf, np.inf, (obs_dim,), np.float32),
        action_space=gymnasium.spaces.Box(-1.0, 1.0, (act_dim,), np.float32),
        collected_by={"kind": "synthetic", "note": "random numbers for benchmarks and tests"},
        seed=seed,
        overwrite=overwrite,
    )
    episodes_per_chunk = max(1, chunk_transitions // episode_length)
    written, episode = 0, 0
    while written < transitions:
        lengths = np.full(episodes_per_chunk, episode_length, dtype=np.int64)
        ends = np.cumsum(lengths)
        keep = int(np.searchsorted(ends, transitions - written, side="left")) + 1
        lengths = lengths[:keep]
        lengths[-1] -= max(0, int(lengths.sum()) - (transitions - written))
        rows = int(lengths.sum())
        ends = np.cumsum(lengths) - 1
        # One more observation per episode than steps: next_observations[t] = observations[t+1].
        trajectory = rng.standard_normal((rows + lengths.size, obs_dim), dtype=np.float32)
        keep_rows = np.ones(rows + lengths.size, dtype=bool)
        keep_rows[ends + np.arange(1, lengths.size + 1)] = False
        observations = trajectory[keep_rows]
        next_rows = np.roll(keep_rows, 1)
        next_rows[0] = False
        next_observations = trajectory[next_rows]
        numbers = np.arange(episode, episode + lengths.size)
        terminated = np.zeros(rows, dtype=bool)
        truncated = np.zeros(rows, dtype=bool)
        terminated[ends[numbers % 2 == 0]] = True
        truncated[ends[numbers % 2 == 1]] = True
        actions = rng.uniform(-1.0, 1.0, (rows, act_dim)).astype(np.float32)
        writer.add_episodes(
            observations=observations,
            actions=actions,
            rewards=-np.square(actions).sum(axis=1) + terminated,
            next_observations=next_observations,
            terminated=terminated,
            truncated=truncated,
            success=terminated.copy(),
            episode_lengths=lengths,
        )
        writer.commit_chunk()
        written += rows
        episode += lengths.size
    return writer.finish()
