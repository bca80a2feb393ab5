"""The verification pass over a dataset's files: checksums plus content checks, in one read.

Holds:
    verify_files -- read every array file once in blocks (plain reads, no memory map), compare
        its SHA-256 with the manifest, and check contents: no NaN/Inf, actions inside the
        declared space, episode numbering, done flags only at episode ends, and per-episode
        arrays equal to what the per-step arrays imply.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np

from qadapt.data.format.episodes import (
    check_done_flags,
    episode_lengths_from_index,
    episode_returns,
    episode_success,
)
from qadapt.data.format.manifest import Manifest
from qadapt.data.format.npy_files import NpyHeader, scan_blocks
from qadapt.data.format.validation import action_bound_problem, non_finite_problem
from qadapt.errors import BadInput

# Fields kept whole in memory during the pass for the cross-field checks (all 1-D and small:
# about 30 bytes per transition).
_KEPT = (
    "rewards",
    "terminated",
    "truncated",
    "episode_index",
    "success",
    "episode_lengths",
    "episode_returns",
    "episode_success",
    "parent_episodes",
)
_FINITE = ("observations", "actions", "rewards", "next_observations", "episode_returns")


def _content_problem(name: str, rows: np.ndarray, first: int, manifest: Manifest) -> str | None:
    if name in _FINITE:
        problem = non_finite_problem(rows, first_row=first)
        if problem:
            return problem
    if name == "actions":
        return action_bound_problem(rows, manifest.action_space, first_row=first)
    return None


def verify_files(
    directory: Path, manifest: Manifest, paths: dict[str, Path], headers: dict[str, NpyHeader]
) -> None:
    """Raise BadInput (naming file, field and problem) unless every file checks out."""
    kept: dict[str, np.ndarray] = {}
    for name, entry in manifest.fields.items():
        path, header = paths[name], headers[name]
        digest = hashlib.sha256()
        problem = None
        whole = np.empty(header.shape, header.dtype) if name in _KEPT else None
        for first, rows in scan_blocks(path, header, digest):
            if problem is None:
                problem = _content_problem(name, rows, first, manifest)
            if whole is not None:
                whole[first : first + rows.shape[0]] = rows
        actual = digest.hexdigest()
        if actual != entry.sha256:
            # A checksum failure explains any content problem in the same file, so it wins.
            raise BadInput(
                f"{path}: field {name!r}: checksum mismatch (SHA-256 of the file is "
                f"{actual[:16]}..., the manifest records {entry.sha256[:16]}...); the file was "
                "changed or is corrupt"
            )
        if problem is not None:
            raise BadInput(f"{path}: field {name!r} {problem}")
        if whole is not None:
            kept[name] = whole
    _check_episodes(directory, manifest, paths, kept)


def _check_episodes(
    directory: Path, manifest: Manifest, paths: dict[str, Path], kept: dict[str, np.ndarray]
) -> None:
    index = kept["episode_index"]
    lengths = episode_lengths_from_index(index, where=f"{paths['episode_index']}")
    if lengths.size != manifest.episode_count:
        raise BadInput(
            f"{paths['episode_index']}: field 'episode_index' numbers {lengths.size} episodes "
            f"but the manifest's episode_count is {manifest.episode_count}"
        )
    if not np.array_equal(lengths, kept["episode_lengths"]):
        row = int(np.argmax(lengths != kept["episode_lengths"]))
        raise BadInput(
            f"{paths['episode_lengths']}: field 'episode_lengths' says episode {row} has "
            f"{int(kept['episode_lengths'][row])} steps; episode_index gives {int(lengths[row])}"
        )
    check_done_flags(kept["terminated"], kept["truncated"], lengths, where=str(directory))
    returns = episode_returns(kept["rewards"], index, manifest.episode_count)
    if not np.array_equal(returns, kept["episode_returns"]):
        row = int(np.argmax(returns != kept["episode_returns"]))
        raise BadInput(
            f"{paths['episode_returns']}: field 'episode_returns' differs from the sum of "
            f"rewards at episode {row}"
        )
    if manifest.has_success:
        expected = episode_success(kept["success"], index, manifest.episode_count)
        if not np.array_equal(expected, kept["episode_success"]):
            row = int(np.argmax(expected != kept["episode_success"]))
            raise BadInput(
                f"{paths['episode_success']}: field 'episode_success' disagrees with the "
                f"per-step success flags at episode {row}"
            )
    if manifest.split is not None:
        parents = kept["parent_episodes"]
        limit = manifest.split.parent_episode_count
        if (parents < 0).any() or (parents >= limit).any() or (np.diff(parents) <= 0).any():
            raise BadInput(
                f"{paths['parent_episodes']}: field 'parent_episodes' must be strictly "
                f"increasing episode numbers in [0, {limit})"
            )
