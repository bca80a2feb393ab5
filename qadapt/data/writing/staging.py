"""The staging directory where a dataset is built, chunk by chunk, before it is published.

Holds:
    ChunkRecord -- one committed chunk: its directory, row counts and file checksums.
    StagingArea -- a hidden sibling directory ``.<name>.incomplete`` of the output path, with
        a lock, the digest of the run that fills it, committed chunks (resumable), and the
        atomic publish step (fsync files and directory, then rename).
    check_output_path -- BadInput if the output path holds something that must not be replaced.
"""

from __future__ import annotations

import fcntl
import json
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from qadapt.data.format.npy_files import NpyStreamWriter
from qadapt.data.format.schema import MANIFEST_NAME
from qadapt.errors import BadInput
from qadapt.files import (
    fsync_directory,
    remove_tree,
    sha256_of_file,
    strict_json,
    write_text_durably,
)

_CHUNK_NAME = re.compile(r"chunk-(\d{6})")
_RUN_FILE = "run.json"
_CHUNK_FILE = "chunk.json"
_ASSEMBLY_NAME = "assembled"


@dataclass(frozen=True)
class ChunkRecord:
    """A chunk committed to the staging area (its directory was renamed into place)."""

    directory: Path
    transitions: int
    episodes: int
    success_reported: bool
    files: dict[str, str]

    def load(self) -> dict[str, np.ndarray]:
        """The chunk's arrays, read into memory (no pickles)."""
        return {
            name: np.load(self.directory / f"{name}.npy", allow_pickle=False) for name in self.files
        }


def check_output_path(out: Path, *, overwrite: bool) -> None:
    """Refuse an output path that holds a dataset (unless ``overwrite``) or anything else.

    An empty directory is treated as free; a non-empty one that is not a dataset is never
    replaced, whatever ``overwrite`` says, so no user files can be lost.
    """
    if out.is_symlink():
        raise BadInput(f"{out}: is a symlink; give the real output directory")
    if not out.exists():
        if not out.parent.is_dir():
            raise BadInput(f"{out}: parent directory {out.parent} does not exist")
        return
    if not out.is_dir():
        raise BadInput(f"{out}: exists and is not a directory; refusing to replace it")
    if (out / MANIFEST_NAME).exists():
        if not overwrite:
            raise BadInput(
                f"{out}: a complete dataset already exists here; it is not overwritten unless "
                "you ask for it (overwrite=True)"
            )
        return
    if any(out.iterdir()):
        raise BadInput(f"{out}: exists, is not empty and is not a dataset; refusing to replace it")


class StagingArea:
    """Hidden sibling directory of ``out`` that holds committed chunks until publication.

    ``run_digest`` identifies the run's arguments. With ``resume=True`` an existing staging
    directory whose digest matches and whose chunks are all intact (checksums) is kept, so the
    run continues after its last committed chunk; anything else is deleted and the run starts
    over. A lock file stops two processes from filling the same staging area.

    Example:
        >>> import tempfile
        >>> out = Path(tempfile.mkdtemp()) / "ds"
        >>> area = StagingArea(out, "d" * 64, resume=True)
        >>> area.chunks, area.path.name
        ([], '.ds.incomplete')
        >>> area.discard()
    """

    def __init__(
        self, out: Path, run_digest: str, *, resume: bool, description: dict | None = None
    ) -> None:
        self.out = Path(os.path.abspath(out))
        self.path = self.out.parent / f".{self.out.name}.incomplete"
        self.run_digest = run_digest
        self.restart_reason: str | None = None
        if not self.out.parent.is_dir():
            raise BadInput(f"{self.out}: parent directory {self.out.parent} does not exist")
        self._lock_path = self.out.parent / f".{self.out.name}.lock"
        self._lock = os.open(self._lock_path, os.O_CREAT | os.O_RDWR, 0o644)
        try:
            fcntl.flock(self._lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(self._lock)
            raise BadInput(f"{self.out}: another process is writing this dataset") from None
        self.chunks: list[ChunkRecord] = []
        if self.path.exists():
            if resume:
                self.restart_reason = self._try_resume()
                if self.restart_reason is None:
                    return
            else:
                self.restart_reason = "resuming was not asked for"
            remove_tree(self.path)
            self.chunks = []
        self.path.mkdir()
        run = {"run_digest": run_digest, "run": description or {}}
        write_text_durably(self.path / _RUN_FILE, json.dumps(run, indent=2, allow_nan=False))
        fsync_directory(self.path)
        fsync_directory(self.path.parent)

    # -- resuming -------------------------------------------------------------------------
    def _try_resume(self) -> str | None:
        """Load committed chunks if they belong to this run and are intact; else say why not."""
        try:
            run = json.loads((self.path / _RUN_FILE).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return "the staging directory has no readable run description"
        if not isinstance(run, dict) or run.get("run_digest") != self.run_digest:
            return "the staged chunks came from a run with different arguments"
        for leftover in self.path.glob("chunk-*.writing"):
            remove_tree(leftover)
        remove_tree(self.path / _ASSEMBLY_NAME)
        names = sorted(p.name for p in self.path.iterdir() if _CHUNK_NAME.fullmatch(p.name))
        for number, name in enumerate(names):
            if name != f"chunk-{number:06d}":
                return f"chunk {number} is missing"
            record = self._read_chunk(self.path / name)
            if record is None:
                return f"{name} is damaged"
            self.chunks.append(record)
        return None

    def _read_chunk(self, directory: Path) -> ChunkRecord | None:
        try:
            info = json.loads((directory / _CHUNK_FILE).read_text(encoding="utf-8"))
            if info["run_digest"] != self.run_digest:
                return None
            files = dict(info["files"])
            for name, digest in files.items():
                if sha256_of_file(directory / f"{name}.npy") != digest:
                    return None
            return ChunkRecord(
                directory,
                int(info["transitions"]),
                int(info["episodes"]),
                bool(info["success_reported"]),
                files,
            )
        except (OSError, ValueError, KeyError, TypeError):
            return None

    # -- writing --------------------------------------------------------------------------
    @property
    def committed_transitions(self) -> int:
        return sum(chunk.transitions for chunk in self.chunks)

    @property
    def committed_episodes(self) -> int:
        return sum(chunk.episodes for chunk in self.chunks)

    def commit_chunk(self, arrays: dict[str, np.ndarray], *, episodes: int) -> ChunkRecord:
        """Write ``arrays`` as the next chunk: files, fsync, then rename into place."""
        number = len(self.chunks)
        final = self.path / f"chunk-{number:06d}"
        scratch = self.path / f"chunk-{number:06d}.writing"
        remove_tree(scratch)
        scratch.mkdir()
        files = {}
        for name, array in arrays.items():
            writer = NpyStreamWriter(scratch / f"{name}.npy", array.dtype, array.shape)
            writer.append(array)
            files[name] = writer.close()
        transitions = int(arrays["rewards"].shape[0])
        info: dict[str, Any] = {
            "run_digest": self.run_digest,
            "transitions": transitions,
            "episodes": int(episodes),
            "success_reported": bool(np.any(arrays["success_reported"])),
            "files": files,
        }
        write_text_durably(scratch / _CHUNK_FILE, strict_json(info, indent=2))
        fsync_directory(scratch)
        os.rename(scratch, final)
        fsync_directory(self.path)
        record = ChunkRecord(final, transitions, int(episodes), info["success_reported"], files)
        self.chunks.append(record)
        return record

    def assembly_directory(self) -> Path:
        """A fresh, empty directory inside the staging area to assemble the dataset in."""
        directory = self.path / _ASSEMBLY_NAME
        remove_tree(directory)
        directory.mkdir()
        return directory

    def publish(self, assembled: Path, *, overwrite: bool) -> Path:
        """Move the assembled dataset to the output path atomically, then clean up.

        The caller has fsynced every file in ``assembled``; this fsyncs the directory, renames
        it to the output path (a single atomic step), fsyncs the parent and deletes staging.
        """
        fsync_directory(assembled)
        check_output_path(self.out, overwrite=overwrite)
        replaced = None
        if self.out.exists() and (self.out / MANIFEST_NAME).exists():
            replaced = self.out.parent / f".{self.out.name}.replaced"
            remove_tree(replaced)
            os.rename(self.out, replaced)
        os.rename(assembled, self.out)
        fsync_directory(self.out.parent)
        if replaced is not None:
            remove_tree(replaced)
        self.discard()
        return self.out

    def discard(self) -> None:
        """Delete the staging directory and release the lock."""
        remove_tree(self.path)
        if self._lock >= 0:  # unlink while still holding the lock, then let go
            try:
                os.unlink(self._lock_path)
            except FileNotFoundError:
                pass
        self.release()

    def release(self) -> None:
        """Release the lock, keeping the staging directory (so a later run can resume)."""
        if self._lock >= 0:
            os.close(self._lock)
            self._lock = -1
