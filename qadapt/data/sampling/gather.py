"""Gathering chosen rows of a dataset's arrays into preallocated tensors.

Holds:
    SAMPLED_FIELDS -- the dataset fields a batch is built from.
    LARGE_FIELDS -- the fields gathered from the files (the rest are packed in memory).
    MappedRows -- gathers straight from the memory maps. Fast; the kernel keeps every page it
        maps resident (shared, reclaimable file pages), so after enough random batches the
        process's resident size includes most of the observation files.
    InMemoryRows -- copies observations into process memory once, then gathers there.
    WindowedRows -- gathers observations in file order, copying one window of rows at a time
        into a reused buffer with plain reads: bounded resident memory, at the price of reading
        the windows again for every block.
    release_mapping -- drop a memory map's pages from the process (they stay in the page cache).
"""

from __future__ import annotations

import mmap
import warnings

import numpy as np
import torch

from qadapt.errors import BadInput

SAMPLED_FIELDS = (
    "observations",
    "next_observations",
    "actions",
    "rewards",
    "terminated",
    "truncated",
)
LARGE_FIELDS = ("observations", "next_observations")
_COPY_WINDOW_BYTES = 1 << 26  # 64 MiB: files are copied or scanned in windows of this size


def _as_tensor(array: np.ndarray) -> torch.Tensor:
    # The maps are read-only; torch warns that it cannot enforce that. Nothing here writes.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return torch.from_numpy(array)


def release_mapping(array: np.ndarray) -> None:
    """Tell the kernel the process no longer needs the pages of memory map ``array``.

    The pages are clean file pages, so they stay in the page cache and come back on the next
    access without disk reads; only the process's resident size drops.
    """
    handle = getattr(array, "_mmap", None)
    if handle is not None:
        handle.madvise(mmap.MADV_DONTNEED)


class MappedRows:
    """Gathers rows of a dataset: observations and next_observations from the memory maps,
    the small fields from one packed in-memory array.

    The small fields (actions, reward, terminated, truncated) take ``4 * (act_dim + 3)``
    bytes per transition (28 for the pick cell). Gathering a random row costs a memory miss
    per field whatever its size, so they are packed side by side in RAM as float32 (flags as
    0/1): one miss per row instead of four, and no dtype conversion per batch.

    Example:
        >>> import tempfile; from pathlib import Path
        >>> from qadapt.data.writing.synthetic import write_synthetic_dataset
        >>> from qadapt.data.format.dataset import open_dataset
        >>> ds = open_dataset(write_synthetic_dataset(Path(tempfile.mkdtemp()) / "s",
        ...                                           transitions=10, obs_dim=3, act_dim=2))
        >>> source = MappedRows(ds)
        >>> out = {name: torch.empty((2, *shape)) for name, shape in source.row_shapes.items()}
        >>> source.gather(np.array([4, 1]), out)
        >>> bool((out["rewards"] == torch.from_numpy(ds.array("rewards")[[4, 1]].copy())).all())
        True
    """

    def __init__(self, dataset) -> None:
        self.dataset = dataset
        self.transitions = int(dataset.transition_count)
        self.act_dim = int(dataset.act_dim)
        self.arrays = {name: dataset.array(name) for name in LARGE_FIELDS}
        self.tensors = {name: _as_tensor(array) for name, array in self.arrays.items()}
        self.row_shapes = {
            "observations": (int(dataset.obs_dim),),
            "next_observations": (int(dataset.obs_dim),),
            "actions": (self.act_dim,),
            "rewards": (),
            "terminated": (),
            "truncated": (),
        }
        self.small = torch.empty((self.transitions, self.act_dim + 3), dtype=torch.float32)
        step = max(1, _COPY_WINDOW_BYTES // (4 * (self.act_dim + 3)))
        for start in range(0, self.transitions, step):
            stop = min(start + step, self.transitions)
            block = self.small[start:stop]
            block[:, : self.act_dim] = torch.from_numpy(dataset.rows("actions", start, stop))
            for column, name in enumerate(("rewards", "terminated", "truncated")):
                values = torch.from_numpy(dataset.rows(name, start, stop))
                block[:, self.act_dim + column] = values
        self._small_scratch = torch.empty((0, self.act_dim + 3), dtype=torch.float32)

    def _gather_small(self, index: torch.Tensor, outputs: dict[str, torch.Tensor]) -> None:
        count = index.shape[0]
        if self._small_scratch.shape[0] < count:
            self._small_scratch = torch.empty((count, self.act_dim + 3), dtype=torch.float32)
        packed = self._small_scratch[:count]
        torch.index_select(self.small, 0, index, out=packed)
        outputs["actions"].copy_(packed[:, : self.act_dim])
        for column, name in enumerate(("rewards", "terminated", "truncated")):
            outputs[name].copy_(packed[:, self.act_dim + column])

    def gather(self, rows: np.ndarray, outputs: dict[str, torch.Tensor]) -> None:
        """``outputs[name][i] = field[rows[i]]`` for every sampled field (rows int64, outputs
        float32 of shape ``[len(rows), *row_shapes[name]]``)."""
        index = torch.from_numpy(rows)
        for name, tensor in self.tensors.items():
            torch.index_select(tensor, 0, index, out=outputs[name])
        self._gather_small(index, outputs)


class InMemoryRows(MappedRows):
    """Like MappedRows, after copying observations and next_observations into process memory
    (window by window, unmapping each window, so the copy does not count twice)."""

    def __init__(self, dataset) -> None:
        super().__init__(dataset)
        for name, array in self.arrays.items():
            copy = torch.empty(tuple(array.shape), dtype=torch.float32)
            step = max(1, _COPY_WINDOW_BYTES // max(1, array.nbytes // max(1, array.shape[0])))
            for start in range(0, array.shape[0], step):
                copy[start : start + step] = self.tensors[name][start : start + step]
                release_mapping(array)
            self.tensors[name] = copy


class WindowedRows(MappedRows):
    """Gathers observations in file order, one window of ``window_bytes`` at a time: each
    window that holds a chosen row is copied into one reused buffer with plain reads (no
    memory map), and the chosen rows are picked from it. Resident memory stays at about one
    window plus the outputs, whatever the file sizes; every block reads (from the page cache)
    each window it needs."""

    def __init__(self, dataset, window_bytes: int) -> None:
        super().__init__(dataset)
        if window_bytes < 1 << 20:
            raise BadInput(f"window_bytes: got {window_bytes}, expected at least 1 MiB")
        self.readers = {name: dataset.row_reader(name) for name in self.tensors}
        row_bytes = 4 * int(dataset.obs_dim)
        self.window_rows = max(1, window_bytes // row_bytes)
        self._window = np.empty(
            (min(self.window_rows, self.transitions), dataset.obs_dim), dtype=np.float32
        )
        self._scratch = torch.empty((0, dataset.obs_dim), dtype=torch.float32)
        # Nothing is gathered from the maps in this mode: let go of any pages they hold.
        for array in self.arrays.values():
            release_mapping(array)

    def gather(self, rows: np.ndarray, outputs: dict[str, torch.Tensor]) -> None:
        self._gather_small(torch.from_numpy(rows), outputs)
        order = np.argsort(rows, kind="stable")
        ordered = rows[order]
        if self._scratch.shape[0] < rows.size:
            self._scratch = torch.empty((rows.size, self._window.shape[1]), dtype=torch.float32)
        scratch = self._scratch[: rows.size]
        step = self.window_rows
        edges = np.searchsorted(ordered, np.arange(0, self.transitions + step, step))
        window = torch.from_numpy(self._window)
        order_index = torch.from_numpy(order)
        for name, reader in self.readers.items():
            for number, (low, high) in enumerate(
                zip(edges[:-1].tolist(), edges[1:].tolist(), strict=True)
            ):
                if high == low:
                    continue
                first = number * step
                count = min(step, self.transitions - first)
                reader.read_into(first, self._window[:count])
                local = torch.from_numpy(ordered[low:high] - first)
                torch.index_select(window, 0, local, out=scratch[low:high])
            outputs[name].index_copy_(0, order_index, scratch)
