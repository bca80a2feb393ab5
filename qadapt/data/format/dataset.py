"""Reading a dataset: the manifest, safe file resolution, memory-mapped arrays, verification.

Holds:
    content_fingerprint -- SHA-256 naming a dataset's content (the manifest minus its time).
    ReplayDataset -- an opened dataset directory. Arrays come out memory-mapped and read-only,
        and only after the files have been verified (checksums and contents).
    open_dataset -- open a dataset directory; verifies at once unless ``verify=False``.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np

from qadapt.data.format.manifest import Manifest, read_manifest
from qadapt.data.format.npy_files import NpyHeader, RowReader, read_npy_header, read_rows
from qadapt.data.format.verification import verify_files
from qadapt.errors import BadInput
from qadapt.files import resolve_member


def content_fingerprint(manifest: Manifest) -> str:
    """SHA-256 of the manifest's canonical JSON without its ``created_at`` time.

    The manifest holds every array's checksum, so this names the dataset's content: the same
    collection run twice (or resumed after a crash) gets the same fingerprint, and so do the
    checkpoints trained on it.
    """
    record = manifest.to_json()
    record.pop("created_at")
    text = json.dumps(record, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


class ReplayDataset:
    """A dataset directory opened for reading.

    Opening checks the structure (manifest, file names staying inside the directory, every
    ``.npy`` header's dtype and shape, file sizes) but reads no array data. Verification reads
    every file once (SHA-256 against the manifest, NaN/Inf, action bounds, episode
    bookkeeping); it runs when the dataset is opened with ``verify=True`` (the default) and
    otherwise automatically on the first call that hands out array data (:meth:`array`,
    :meth:`rows`), so unverified data can never reach a learner.

    Example:
        >>> from qadapt.data.writing.synthetic import write_synthetic_dataset
        >>> import tempfile
        >>> path = write_synthetic_dataset(Path(tempfile.mkdtemp()) / "s", transitions=50)
        >>> dataset = open_dataset(path, verify=False)
        >>> dataset.verified, dataset.transition_count
        (False, 50)
        >>> dataset.array("rewards").shape, dataset.verified
        ((50,), True)
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self.manifest: Manifest = read_manifest(self.path)
        self.fingerprint = content_fingerprint(self.manifest)
        self._paths: dict[str, Path] = {}
        self._headers: dict[str, NpyHeader] = {}
        for name, entry in self.manifest.fields.items():
            path = resolve_member(self.path, entry.file, where=f"{self.path}: fields.{name}.file")
            header = read_npy_header(path, field=name)
            if header.dtype != np.dtype(entry.dtype):
                raise BadInput(
                    f"{path}: field {name!r} has dtype {header.dtype} "
                    f"({header.dtype.str}), expected {entry.dtype}"
                )
            if header.shape != entry.shape:
                raise BadInput(
                    f"{path}: field {name!r} has shape {header.shape}, the manifest says "
                    f"{entry.shape}"
                )
            self._paths[name] = path
            self._headers[name] = header
        listed = {path.name for path in self._paths.values()}
        stray = sorted(p.name for p in self.path.glob("*.npy") if p.name not in listed)
        if stray:
            raise BadInput(
                f"{self.path}: array file {stray[0]!r} is not listed in the manifest (an extra "
                "field?); remove it or rebuild the dataset"
            )
        self._verified = False
        self._maps: dict[str, np.ndarray] = {}

    # -- description ----------------------------------------------------------------------
    @property
    def transition_count(self) -> int:
        return self.manifest.transition_count

    @property
    def episode_count(self) -> int:
        return self.manifest.episode_count

    @property
    def obs_dim(self) -> int:
        return self.manifest.obs_dim

    @property
    def act_dim(self) -> int:
        return self.manifest.act_dim

    @property
    def has_success(self) -> bool:
        return self.manifest.has_success

    @property
    def observation_space(self):
        """The recorded observation space (a BoxDescription; ``.to_space()`` for gymnasium)."""
        return self.manifest.observation_space

    @property
    def action_space(self):
        """The recorded action space (Box or Discrete description)."""
        return self.manifest.action_space

    @property
    def field_names(self) -> tuple[str, ...]:
        return tuple(self.manifest.fields)

    def file_path(self, name: str) -> Path:
        """Path of field ``name``'s ``.npy`` file."""
        self._check_name(name)
        return self._paths[name]

    def __len__(self) -> int:
        return self.transition_count

    def __repr__(self) -> str:
        return (
            f"ReplayDataset({str(self.path)!r}, transitions={self.transition_count}, "
            f"episodes={self.episode_count}, verified={self._verified})"
        )

    # -- verification ---------------------------------------------------------------------
    @property
    def verified(self) -> bool:
        return self._verified

    def verify(self) -> None:
        """Check every file (checksums and contents); BadInput names the file and problem."""
        if not self._verified:
            verify_files(self.path, self.manifest, self._paths, self._headers)
            self._verified = True

    # -- data -----------------------------------------------------------------------------
    def _check_name(self, name: str) -> None:
        if name not in self.manifest.fields:
            raise BadInput(
                f"{self.path}: no field {name!r}; this dataset has {list(self.manifest.fields)}"
            )

    def array(self, name: str) -> np.ndarray:
        """Field ``name`` as a read-only memory map (verifies the dataset first if needed)."""
        self._check_name(name)
        self.verify()
        if name not in self._maps:
            self._maps[name] = np.load(self._paths[name], mmap_mode="r", allow_pickle=False)
        return self._maps[name]

    def rows(self, name: str, start: int, stop: int) -> np.ndarray:
        """Rows ``[start, stop)`` of field ``name`` copied into memory with plain file reads
        (no memory map, so the process's resident size grows only by the copy)."""
        self._check_name(name)
        self.verify()
        return read_rows(self._paths[name], self._headers[name], start, stop)

    def row_reader(self, name: str) -> RowReader:
        """A reader that copies row ranges of field ``name`` into caller buffers with plain
        reads (verifies the dataset first if needed)."""
        self._check_name(name)
        self.verify()
        return RowReader(self._paths[name], self._headers[name])


def open_dataset(path: str | Path, verify: bool = True) -> ReplayDataset:
    """Open the dataset directory ``path``; with ``verify=False`` verification is deferred to
    :meth:`ReplayDataset.verify` or the first array access.

    Example:
        >>> open_dataset("/nonexistent/dataset")
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: /nonexistent/dataset: not a dataset directory (no such directory)
    """
    dataset = ReplayDataset(path)
    if verify:
        dataset.verify()
    return dataset
