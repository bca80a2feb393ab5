"""Splitting a dataset by episode into a training part and a held-out part.

Holds:
    split_dataset -- choose a seeded random set of episodes to hold out; write both parts as
        datasets whose manifests record the split and whose ``parent_episodes`` arrays say
        which parent episode each of their episodes is.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from qadapt.data.format.dataset import open_dataset
from qadapt.data.format.manifest import SplitRecord
from qadapt.data.writing.writer import DatasetWriter
from qadapt.errors import BadInput

_BLOCK_ROWS = 1 << 17
_STEP_FIELDS = (
    "observations",
    "actions",
    "rewards",
    "next_observations",
    "terminated",
    "truncated",
)


def split_dataset(
    path: str | Path,
    held_out_fraction: float,
    seed: int,
    out_train: str | Path,
    out_held_out: str | Path,
    *,
    overwrite: bool = False,
) -> tuple[Path, Path]:
    """Write the episodes of ``path`` into two new datasets; return ``(train, held_out)``.

    ``round(held_out_fraction * episodes)`` episodes, chosen uniformly at random with a
    numpy Generator seeded by ``seed``, go to ``out_held_out``; the rest to ``out_train``.
    Both keep the parent's episode order, environment, spaces and provenance. Both parts
    must end up non-empty.

    Example:
        >>> import tempfile
        >>> from qadapt.data.writing.synthetic import write_synthetic_dataset
        >>> root = Path(tempfile.mkdtemp())
        >>> whole = write_synthetic_dataset(root / "all", transitions=1000, episode_length=100)
        >>> train, held = split_dataset(whole, 0.2, 0, root / "train", root / "held")
        >>> open_dataset(train).episode_count, open_dataset(held).episode_count
        (8, 2)
    """
    if isinstance(held_out_fraction, bool) or not isinstance(held_out_fraction, int | float):
        raise BadInput(f"held_out_fraction: got {held_out_fraction!r}, expected a number")
    if not (0.0 < float(held_out_fraction) < 1.0) or math.isnan(held_out_fraction):
        raise BadInput(
            f"held_out_fraction: got {held_out_fraction!r}, expected a number between 0 and 1"
        )
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise BadInput(f"seed: got {seed!r}, expected a non-negative integer")
    places = [os.path.abspath(p) for p in (path, out_train, out_held_out)]
    if len(set(places)) != 3:
        raise BadInput(
            f"split_dataset: the source {path}, out_train {out_train} and out_held_out "
            f"{out_held_out} must be three different paths"
        )
    dataset = open_dataset(path)
    episodes = dataset.episode_count
    held_count = round(float(held_out_fraction) * episodes)
    if not 1 <= held_count <= episodes - 1:
        raise BadInput(
            f"held_out_fraction: {held_out_fraction} of {episodes} episodes holds out "
            f"{held_count}; both parts need at least one episode"
        )
    held = np.zeros(episodes, dtype=bool)
    held[np.random.default_rng(seed).permutation(episodes)[:held_count]] = True
    manifest = dataset.manifest
    writers = {}
    try:
        for part, out in (("train", out_train), ("held_out", out_held_out)):
            writers[part] = DatasetWriter(
                out,
                environment=manifest.environment,
                observation_space=manifest.observation_space,
                action_space=manifest.action_space,
                collected_by=manifest.collected_by,
                seed=manifest.seed,
                split=SplitRecord(
                    part=part,
                    held_out_fraction=float(held_out_fraction),
                    seed=seed,
                    parent_path=str(path),
                    parent_manifest_sha256=dataset.fingerprint,
                    parent_episode_count=episodes,
                    parent_split=manifest.split,
                ),
                overwrite=overwrite,
            )
        lengths = np.asarray(dataset.array("episode_lengths"))
        ends = np.cumsum(lengths)
        first_episode, first_row = 0, 0
        while first_episode < episodes:
            last = int(np.searchsorted(ends, first_row + _BLOCK_ROWS, side="right"))
            last = max(last, first_episode + 1)
            stop_row = int(ends[last - 1])
            names = _STEP_FIELDS + (("success",) if dataset.has_success else ())
            block = {name: dataset.rows(name, first_row, stop_row) for name in names}
            block_lengths = lengths[first_episode:last]
            block_held = held[first_episode:last]
            row_held = np.repeat(block_held, block_lengths)
            for part, chosen, rows in (
                ("train", ~block_held, ~row_held),
                ("held_out", block_held, row_held),
            ):
                if chosen.any():
                    writers[part].add_episodes(
                        **{name: array[rows] for name, array in block.items()},
                        episode_lengths=block_lengths[chosen],
                        parent_episodes=np.arange(first_episode, last)[chosen],
                        where=f"{path} (split)",
                    )
                    writers[part].commit_chunk()
            first_episode, first_row = last, stop_row
        return writers["train"].finish(), writers["held_out"].finish()
    except BaseException:
        for writer in writers.values():
            writer.discard()
        raise
