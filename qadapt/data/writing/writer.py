"""Writing a dataset: validated episodes go to disk in chunks, then one atomic publish.

Holds:
    DatasetWriter -- takes whole episodes, checks them, commits them in chunks to a staging
        directory beside the output path, and finally assembles the dataset's array files,
        writes the manifest and renames the result into place.
    check_collector_record -- BadInput unless a "collected by" record is a JSON object with a
        string ``kind``.
"""

from __future__ import annotations

import hashlib
import uuid
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import gymnasium
import numpy as np

from qadapt.data.format.episodes import (
    check_done_flags,
    episode_index_from_lengths,
    episode_returns,
    episode_success,
)
from qadapt.data.format.manifest import (
    EnvironmentRecord,
    FieldEntry,
    Manifest,
    SplitRecord,
    check_json_value,
    manifest_text,
)
from qadapt.data.format.npy_files import NpyStreamWriter
from qadapt.data.format.schema import (
    FIELDS,
    FORMAT_VERSION,
    MANIFEST_NAME,
    expected_fields,
    expected_shape,
)
from qadapt.data.format.validation import (
    as_bool,
    as_float32,
    as_int64,
    check_actions,
    check_finite,
    check_row_counts,
)
from qadapt.data.writing.staging import StagingArea, check_output_path
from qadapt.errors import BadInput
from qadapt.files import write_text_durably
from qadapt.spaces import SpaceDescription, describe_space

_STEP_FLOATS = ("observations", "actions", "rewards", "next_observations")


def check_collector_record(record: object, *, where: str = "collected_by") -> dict[str, Any]:
    """Return ``record`` if it is a JSON object with a non-empty string ``kind``.

    Example:
        >>> check_collector_record({"kind": "scripted", "noise": 0.1})["kind"]
        'scripted'
    """
    if not isinstance(record, dict):
        raise BadInput(f"{where}: got {type(record).__name__}, expected a JSON object")
    kind = record.get("kind")
    if not isinstance(kind, str) or not kind:
        raise BadInput(f"{where}: needs a non-empty string 'kind' (e.g. 'scripted', 'random')")
    check_json_value(record, where)
    return record


def _as_description(space: gymnasium.Space | SpaceDescription, role: str) -> SpaceDescription:
    if isinstance(space, gymnasium.Space):
        return describe_space(space, role=role)
    return space


class DatasetWriter:
    """Streams whole episodes into a new dataset directory at ``out``.

    Episodes added with :meth:`add_episodes` are checked at once (dtypes, shapes, NaN/Inf,
    action bounds, done flags only at episode ends) and buffered; :meth:`commit_chunk`
    writes the buffer as one durable chunk in the staging directory ``.<name>.incomplete``;
    :meth:`finish` assembles the array files, writes the manifest and renames the result to
    ``out``. Until then no directory at ``out`` exists, so an interrupted writer never leaves
    a dataset that looks complete. ``run_digest`` with ``resume=True`` lets a re-run with the
    same arguments continue after the chunks already committed (see ``committed_*``).

    Example:
        >>> import tempfile
        >>> out = Path(tempfile.mkdtemp()) / "tiny"
        >>> writer = DatasetWriter(
        ...     out, environment={"id": "Pendulum-v1", "kwargs": {}, "wrappers": []},
        ...     observation_space=gymnasium.spaces.Box(-1.0, 1.0, (2,)),
        ...     action_space=gymnasium.spaces.Box(-1.0, 1.0, (1,)),
        ...     collected_by={"kind": "random"}, seed=0)
        >>> obs = np.zeros((3, 2), np.float32)
        >>> writer.add_episodes(observations=obs, actions=np.zeros((3, 1)), rewards=np.ones(3),
        ...     next_observations=obs, terminated=np.array([False, False, True]),
        ...     truncated=np.zeros(3, bool), episode_lengths=np.array([3]))
        >>> writer.finish().name
        'tiny'
    """

    def __init__(
        self,
        out: str | Path,
        *,
        environment: dict[str, Any] | EnvironmentRecord,
        observation_space: gymnasium.Space | SpaceDescription,
        action_space: gymnasium.Space | SpaceDescription,
        collected_by: dict[str, Any],
        seed: int | None = None,
        split: SplitRecord | None = None,
        run_digest: str | None = None,
        run_description: dict[str, Any] | None = None,
        resume: bool = False,
        overwrite: bool = False,
    ) -> None:
        self.out = Path(out)
        self.environment = EnvironmentRecord.parse(environment, where="environment")
        self.observation_space = _as_description(observation_space, "observation space")
        if not hasattr(self.observation_space, "low"):
            raise BadInput("observation space: observations must be a Box space")
        self.action_space = _as_description(action_space, "action space")
        self.collected_by = check_collector_record(collected_by)
        if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int) or seed < 0):
            raise BadInput(f"seed: got {seed!r}, expected a non-negative integer or None")
        self.seed = seed
        self.split = split
        self.overwrite = bool(overwrite)
        check_output_path(Path(self.out), overwrite=self.overwrite)
        digest = run_digest or hashlib.sha256(uuid.uuid4().bytes).hexdigest()
        self._staging = StagingArea(
            self.out, digest, resume=resume and run_digest is not None, description=run_description
        )
        self._buffer: list[dict[str, np.ndarray]] = []
        self._buffered_episodes = 0
        self._buffered_transitions = 0

    # -- state ----------------------------------------------------------------------------
    @property
    def committed_transitions(self) -> int:
        """Transitions in chunks already on disk (from this run or the one it resumes)."""
        return self._staging.committed_transitions

    @property
    def committed_episodes(self) -> int:
        return self._staging.committed_episodes

    @property
    def committed_chunks(self) -> int:
        return len(self._staging.chunks)

    @property
    def restart_reason(self) -> str | None:
        """Why an existing staging directory was discarded instead of resumed (or None)."""
        return self._staging.restart_reason

    @property
    def buffered_transitions(self) -> int:
        return self._buffered_transitions

    # -- adding ---------------------------------------------------------------------------
    def add_episodes(
        self,
        *,
        observations: np.ndarray,
        actions: np.ndarray,
        rewards: np.ndarray,
        next_observations: np.ndarray,
        terminated: np.ndarray,
        truncated: np.ndarray,
        episode_lengths: np.ndarray,
        success: np.ndarray | None = None,
        success_reported: np.ndarray | None = None,
        parent_episodes: np.ndarray | None = None,
        where: str = "episodes",
    ) -> None:
        """Check and buffer a block of whole episodes (rows of each episode contiguous).

        Per-step arrays have ``n = sum(episode_lengths)`` rows: observations and
        next_observations ``[n, obs_dim]``, actions ``[n, act_dim]``, rewards, terminated,
        truncated, success and success_reported ``[n]``. ``success_reported`` marks the steps
        whose info carried ``is_success`` (default: all steps when ``success`` is given).
        ``parent_episodes`` ``[e]`` is required for (and only for) a split part.
        """
        lengths = as_int64(episode_lengths, field="episode_lengths", where=where).reshape(-1)
        if lengths.size == 0:
            return
        if (lengths < 1).any():
            raise BadInput(f"{where}: every episode needs at least one transition")
        block = {
            name: as_float32(value, field=name, where=where)
            for name, value in (
                ("observations", observations),
                ("actions", actions),
                ("rewards", rewards),
                ("next_observations", next_observations),
            )
        }
        block["terminated"] = as_bool(terminated, field="terminated", where=where)
        block["truncated"] = as_bool(truncated, field="truncated", where=where)
        rows = check_row_counts(block, where=where)
        if success is None:
            block["success"] = np.zeros(rows, dtype=bool)
            block["success_reported"] = np.zeros(rows, dtype=bool)
        else:
            block["success"] = as_bool(success, field="success", where=where)
            block["success_reported"] = (
                np.ones(rows, dtype=bool)
                if success_reported is None
                else as_bool(success_reported, field="success_reported", where=where)
            )
        rows = check_row_counts(block, where=where)
        if int(lengths.sum()) != rows:
            raise BadInput(
                f"{where}: episode lengths add up to {int(lengths.sum())}, but there are "
                f"{rows} rows"
            )
        self._check_widths(block, where)
        for name in _STEP_FLOATS:
            check_finite(block[name], field=name, where=where)
        check_actions(block["actions"], self.action_space, where=where)
        check_done_flags(block["terminated"], block["truncated"], lengths, where=where)
        if (self.split is None) != (parent_episodes is None):
            raise BadInput(f"{where}: parent_episodes goes with (and only with) a split part")
        if parent_episodes is not None:
            parents = as_int64(parent_episodes, field="parent_episodes", where=where)
            if parents.shape != lengths.shape:
                raise BadInput(f"{where}: parent_episodes needs one entry per episode")
            block["parent_episodes"] = parents
        block["episode_lengths"] = lengths
        self._buffer.append(block)
        self._buffered_episodes += int(lengths.size)
        self._buffered_transitions += rows

    def _check_widths(self, block: dict[str, np.ndarray], where: str) -> None:
        widths = {
            "observations": self.observation_space.width,
            "next_observations": self.observation_space.width,
            "actions": self.action_space.width,
        }
        for name, array in block.items():
            want = widths.get(name)
            shape = np.shape(array)
            if want is None:
                if len(shape) != 1:
                    raise BadInput(f"{where}: field {name!r} has shape {shape}, expected [n]")
            elif len(shape) != 2 or shape[1] != want:
                raise BadInput(
                    f"{where}: shape mismatch: field {name!r} has shape {shape}, expected "
                    f"[n, {want}] to match the declared space"
                )

    def commit_chunk(self) -> None:
        """Write the buffered episodes to disk as one chunk (no-op when the buffer is empty)."""
        if not self._buffer:
            return
        chunk = {
            name: np.concatenate([block[name] for block in self._buffer])
            for name in self._buffer[0]
        }
        self._staging.commit_chunk(chunk, episodes=self._buffered_episodes)
        self._buffer = []
        self._buffered_episodes = 0
        self._buffered_transitions = 0

    # -- finishing ------------------------------------------------------------------------
    def finish(self) -> Path:
        """Commit what is buffered, assemble the dataset and publish it at ``out``."""
        self.commit_chunk()
        chunks = self._staging.chunks
        transitions = self._staging.committed_transitions
        episodes = self._staging.committed_episodes
        if transitions == 0:
            self._staging.discard()
            raise BadInput(f"{self.out}: no transitions to write; an empty dataset is refused")
        has_success = any(chunk.success_reported for chunk in chunks)
        names = expected_fields(has_success=has_success, is_split_part=self.split is not None)
        assembled = self._staging.assembly_directory()
        obs_dim, act_dim = self.observation_space.width, self.action_space.width
        writers = {}
        for name in names:
            shape = expected_shape(
                name, transitions=transitions, episodes=episodes, obs_dim=obs_dim, act_dim=act_dim
            )
            writers[name] = NpyStreamWriter(assembled / f"{name}.npy", FIELDS[name].dtype, shape)
        first_episode = 0
        try:
            for chunk in chunks:
                arrays = chunk.load()
                local_index = episode_index_from_lengths(arrays["episode_lengths"])
                count = int(arrays["episode_lengths"].size)
                derived = {
                    "episode_index": local_index + first_episode,
                    "episode_returns": episode_returns(arrays["rewards"], local_index, count),
                }
                if has_success:
                    derived["success"] = arrays["success"] & arrays["success_reported"]
                    derived["episode_success"] = episode_success(
                        derived["success"], local_index, count
                    )
                for name, writer in writers.items():
                    writer.append(derived[name] if name in derived else arrays[name])
                first_episode += count
            checksums = {name: writer.close() for name, writer in writers.items()}
        except BaseException:
            for writer in writers.values():
                writer.abandon()
            raise
        manifest = Manifest(
            format_version=FORMAT_VERSION,
            created_at=datetime.now(UTC).isoformat(timespec="seconds"),
            transition_count=transitions,
            episode_count=episodes,
            fields={
                name: FieldEntry(
                    f"{name}.npy", FIELDS[name].dtype.name, writer.shape, checksums[name]
                )
                for name, writer in writers.items()
            },
            environment=self.environment,
            observation_space=self.observation_space,
            action_space=self.action_space,
            collected_by=self.collected_by,
            seed=self.seed,
            split=self.split,
        )
        write_text_durably(assembled / MANIFEST_NAME, manifest_text(manifest))
        return self._staging.publish(assembled, overwrite=self.overwrite)

    def discard(self) -> None:
        """Throw away everything staged (the output path is left untouched)."""
        self._staging.discard()

    def keep_for_resume(self) -> None:
        """Stop writing but keep committed chunks so a re-run with the same digest resumes."""
        self._staging.release()
