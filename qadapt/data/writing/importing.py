"""Building a dataset from a user's own arrays (an ``.npz`` file or ``.npy`` files).

Holds:
    import_arrays -- map the user's array names to our fields, check everything the writer
        checks, derive what can be derived unambiguously, and write a dataset.
"""

from __future__ import annotations

import hashlib
import zipfile
import zlib
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import gymnasium
import numpy as np

from qadapt.data.format.episodes import check_done_flags, episode_lengths_from_index
from qadapt.data.format.npy_files import read_npy_header
from qadapt.data.format.schema import FIELDS
from qadapt.data.format.validation import (
    as_bool,
    as_float32,
    as_int64,
    check_actions,
    check_finite,
    check_row_counts,
)
from qadapt.data.writing.writer import DatasetWriter, check_collector_record
from qadapt.errors import BadInput
from qadapt.files import sha256_of_file
from qadapt.spaces import describe_space

REQUIRED = ("observations", "actions", "rewards", "next_observations", "terminated", "truncated")
OPTIONAL = ("episode_index", "success")
_CHUNK_EPISODES_ROWS = 1 << 17


def _load_source(source: str | Path | Sequence[str | Path]) -> tuple[dict[str, Any], dict, str]:
    """``(arrays by their name, {file name: sha256}, text naming the source)``; no pickles."""
    if isinstance(source, str | Path):
        path = Path(source)
        if path.is_file() and path.suffix == ".npz":
            try:
                archive = np.load(path, allow_pickle=False)
            except (OSError, ValueError, zipfile.BadZipFile) as err:
                raise BadInput(f"{path}: not a readable .npz archive ({err})") from None
            return (
                dict(archive.items()) if False else {k: archive for k in archive.files},
                {path.name: sha256_of_file(path)},
                str(path),
            )
        if path.is_dir():
            files = sorted(path.glob("*.npy"))
            if not files:
                raise BadInput(f"{path}: directory holds no .npy files")
        elif path.is_file() and path.suffix == ".npy":
            files = [path]
        elif not path.exists():
            raise BadInput(f"{path}: no such file or directory")
        else:
            raise BadInput(f"{path}: expected an .npz file, a .npy file or a directory of them")
        text = str(path)
    else:
        files = [Path(p) for p in source]
        if not files:
            raise BadInput("source: empty list of .npy files")
        text = ", ".join(str(p) for p in files)
    arrays: dict[str, Any] = {}
    digests: dict[str, str] = {}
    for file in files:
        if file.suffix != ".npy":
            raise BadInput(f"{file}: expected a .npy file")
        if file.stem in arrays:
            raise BadInput(f"{file}: two source files are both named {file.stem!r}")
        read_npy_header(file, field=file.stem)  # refuses object arrays and truncated files
        arrays[file.stem] = file
        digests[file.name] = sha256_of_file(file)
    return arrays, digests, text


def _fetch(arrays: dict[str, Any], name: str, origin: str) -> np.ndarray:
    holder = arrays[name]
    if isinstance(holder, Path):
        try:
            return np.load(holder, mmap_mode="r", allow_pickle=False)
        except ValueError as err:
            raise BadInput(f"{holder}: cannot be read without unpickling ({err})") from None
    try:
        return holder[name]
    except ValueError as err:  # an object array inside the archive
        raise BadInput(
            f"{origin}: array {name!r} cannot be read without unpickling ({err})"
        ) from None
    except (OSError, EOFError, zipfile.BadZipFile, zlib.error) as err:  # a damaged member
        raise BadInput(f"{origin}: array {name!r} is damaged in the archive ({err})") from None


def import_arrays(
    source: str | Path | Sequence[str | Path],
    field_mapping: dict[str, str],
    out: str | Path,
    *,
    env_record: dict[str, Any],
    observation_space: gymnasium.Space,
    action_space: gymnasium.Space,
    collector_record: dict[str, Any] | None = None,
    seed: int | None = None,
    overwrite: bool = False,
) -> Path:
    """Write a dataset at ``out`` from the arrays in ``source``; return its path.

    ``source`` is an ``.npz`` file, a directory of ``.npy`` files, or a list of ``.npy``
    files (an array is named by its ``.npz`` key or its file name without ``.npy``).
    ``field_mapping`` maps our field names to those names; it must cover observations,
    actions, rewards, next_observations, terminated and truncated, and may cover
    episode_index and success. Arrays must be one row per transition, in episode order.

    Derived, because it is unambiguous: ``episode_index`` (when absent) from the done flags,
    an episode ending at each terminated/truncated step or at the last row; this is refused
    if some row without a done flag is followed by an observation other than its
    next_observation (an unflagged episode boundary). Never derived: ``next_observations``,
    since the last step of every episode has no following row to take it from.

    Every check of the writer applies (dtype, shapes, NaN/Inf, action bounds, flags only at
    episode ends); errors name the source and the field. ``collector_record`` may describe
    how the original data was collected; it is kept inside the ``"imported"`` record.

    Example:
        >>> import tempfile
        >>> root = Path(tempfile.mkdtemp())
        >>> states = np.arange(8, dtype=np.float32).reshape(4, 2)  # one episode, 3 steps
        >>> np.savez(root / "mine.npz", s=states[:3], a=np.zeros((3, 1), np.float32),
        ...          r=np.ones(3, np.float32), s2=states[1:], done=np.array([0, 0, 1], bool),
        ...          timeout=np.zeros(3, bool))
        >>> path = import_arrays(root / "mine.npz",
        ...     {"observations": "s", "actions": "a", "rewards": "r", "next_observations": "s2",
        ...      "terminated": "done", "truncated": "timeout"}, root / "imported",
        ...     env_record={"id": "mine", "kwargs": {}, "wrappers": []},
        ...     observation_space=gymnasium.spaces.Box(-10, 10, (2,)),
        ...     action_space=gymnasium.spaces.Box(-1, 1, (1,)))
        >>> path.name
        'imported'
    """
    if not isinstance(field_mapping, dict):
        raise BadInput(f"field_mapping: got {type(field_mapping).__name__}, expected a dict")
    for ours in field_mapping:
        if ours not in REQUIRED + OPTIONAL:
            raise BadInput(
                f"field_mapping: unknown (extra) field {ours!r}; map only "
                f"{list(REQUIRED + OPTIONAL)}"
            )
    for ours in REQUIRED:
        if ours not in field_mapping:
            hint = (
                " (it cannot be derived: the last step of each episode has no next row)"
                if ours == "next_observations"
                else ""
            )
            raise BadInput(f"field_mapping: missing field {ours!r}{hint}")
    arrays, digests, origin = _load_source(source)
    for ours, theirs in field_mapping.items():
        if theirs not in arrays:
            raise BadInput(
                f"{origin}: field {ours!r} is mapped to {theirs!r}, which is not in the source "
                f"(it has {sorted(arrays)})"
            )
    unused = sorted(set(arrays) - set(field_mapping.values()))
    if unused:
        raise BadInput(
            f"{origin}: array {unused[0]!r} is not mapped to any field (an extra field?); map "
            "it or remove it from the source"
        )
    obs_space = describe_space(observation_space, role="observation_space")
    act_space = describe_space(action_space, role="action_space")
    data: dict[str, np.ndarray] = {}
    for ours, theirs in field_mapping.items():
        array = _fetch(arrays, theirs, origin)
        where = f"{origin} [{theirs}]"
        spec = FIELDS[ours]
        if spec.dtype == np.float32:
            array = as_float32(array, field=ours, where=where)
        elif spec.dtype == np.bool_:
            array = as_bool(array, field=ours, where=where)
        else:
            array = as_int64(array, field=ours, where=where)
        data[ours] = array
    rows = check_row_counts(data, where=origin)
    if rows == 0:
        raise BadInput(f"{origin}: the arrays have no rows; an empty dataset is refused")
    widths = {
        "observations": obs_space.width,
        "next_observations": obs_space.width,
        "actions": act_space.width,
    }
    for ours, array in data.items():
        want = widths.get(ours)
        where = f"{origin} [{field_mapping[ours]}]"
        if want is None and array.ndim != 1:
            raise BadInput(f"{where}: field {ours!r} has shape {array.shape}, expected [{rows}]")
        if want is not None and (array.ndim != 2 or array.shape[1] != want):
            raise BadInput(
                f"{where}: shape mismatch: field {ours!r} has shape {array.shape}, expected "
                f"[{rows}, {want}] from the given space"
            )
    _check_values(data, field_mapping, act_space, origin)
    lengths = _episode_lengths(data, field_mapping, origin)
    check_done_flags(data["terminated"], data["truncated"], lengths, where=origin)
    source_hash = hashlib.sha256(
        "".join(f"{name} {digest}\n" for name, digest in sorted(digests.items())).encode()
    ).hexdigest()
    collected_by: dict[str, Any] = {
        "kind": "imported",
        "source": origin,
        "source_sha256": source_hash,
        "source_files": digests,
        "field_mapping": dict(field_mapping),
    }
    if collector_record is not None:
        collected_by["original_collector"] = check_collector_record(
            collector_record, where="collector_record"
        )
    writer = DatasetWriter(
        out,
        environment=env_record,
        observation_space=obs_space,
        action_space=act_space,
        collected_by=collected_by,
        seed=seed,
        overwrite=overwrite,
    )
    ends = np.cumsum(lengths)
    first_episode, first_row = 0, 0
    try:
        while first_episode < lengths.size:
            # Whole episodes, about _CHUNK_EPISODES_ROWS rows at a time.
            last = int(np.searchsorted(ends, first_row + _CHUNK_EPISODES_ROWS, side="right"))
            last = max(last, first_episode + 1)
            stop_row = int(ends[last - 1])
            block = {name: np.asarray(array[first_row:stop_row]) for name, array in data.items()}
            block.pop("episode_index", None)
            writer.add_episodes(**block, episode_lengths=lengths[first_episode:last], where=origin)
            writer.commit_chunk()
            first_episode, first_row = last, stop_row
        return writer.finish()
    except BaseException:
        writer.discard()
        raise


def _check_values(data: dict[str, np.ndarray], mapping: dict[str, str], act_space, origin: str):
    """NaN/Inf and action bounds, block by block, with row numbers of the whole source."""
    rows = data["rewards"].shape[0]
    for start in range(0, rows, _CHUNK_EPISODES_ROWS):
        stop = min(start + _CHUNK_EPISODES_ROWS, rows)
        for ours in ("observations", "actions", "rewards", "next_observations"):
            check_finite(
                np.asarray(data[ours][start:stop]),
                field=ours,
                first_row=start,
                where=f"{origin} [{mapping[ours]}]",
            )
        check_actions(
            np.asarray(data["actions"][start:stop]),
            act_space,
            first_row=start,
            where=f"{origin} [{mapping['actions']}]",
        )


def _episode_lengths(data: dict[str, np.ndarray], mapping: dict[str, str], origin: str):
    if "episode_index" in data:
        index = np.asarray(data["episode_index"])
        # Renumber by order of appearance; a number that comes back later is refused.
        changes = np.flatnonzero(np.diff(index)) + 1
        starts = np.concatenate(([0], changes))
        labels = index[starts]
        if np.unique(labels).size != labels.size:
            seen = {}
            for position, label in enumerate(labels.tolist()):
                if label in seen:
                    raise BadInput(
                        f"{origin} [{mapping['episode_index']}]: episode {label} appears again "
                        f"at row {int(starts[position])} after other episodes; each episode's "
                        "rows must be contiguous"
                    )
                seen[label] = position
        renumbered = np.repeat(np.arange(labels.size), np.diff(np.append(starts, index.size)))
        return episode_lengths_from_index(renumbered, where=origin)
    done = data["terminated"] | data["truncated"]
    boundaries = np.flatnonzero(done[:-1]) + 1
    lengths = np.diff(np.concatenate(([0], boundaries, [done.size]))).astype(np.int64)
    # An unflagged boundary would make next_observations[t] differ from observations[t + 1].
    for start in range(0, done.size - 1, _CHUNK_EPISODES_ROWS):
        stop = min(start + _CHUNK_EPISODES_ROWS, done.size - 1)
        following = np.asarray(data["observations"][start + 1 : stop + 1])
        differs = (np.asarray(data["next_observations"][start:stop]) != following).any(axis=1)
        mismatch = differs & ~done[start:stop]
        if mismatch.any():
            row = start + int(np.argmax(mismatch))
            raise BadInput(
                f"{origin}: cannot derive episode_index: row {row} has no done flag but its "
                f"next_observation differs from the observation in row {row + 1}; map an "
                "episode_index array"
            )
    return lengths
