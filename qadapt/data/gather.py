"""Gathering chosen rows of a dataset's arrays into preallocated tensors.

Holds:
    SAMPLED_FIELDS -- the dataset fields a batch is built from.
    MappedRows -- gathers straight from the memory maps. Fast; the kernel keeps every page it
        maps resident (shared, reclaimable file pages), so after enough random batches the
        process's resident size includes most of the sampled files.
    InMemoryRows -- copies the sampled fields into process memory once, then gathers there.
    WindowedRows -- gathers in file order one window of rows at a time and unmaps each window
        right after, so mapped pages never exceed one window: bounded resident memory at the
        price of re-mapping pages for every block.
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
_COPY_WINDOW_BYTES = 1 << 26  # 64 MiB: InMemoryRows copies files in windows of this size


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
    """Gathers rows from a dataset's memory-mapped files with ``torch.index_select``.

    Example:
        >>> import tempfile; from pathlib import Path
        >>> from qadapt.data.synthetic import write_synthetic_dataset
        >>> from qadapt.data.dataset import open_dataset
        >>> ds = open_dataset(write_synthetic_dataset(Path(tempfile.mkdtemp()) / "s",
        ...                                           transitions=10, obs_dim=3, act_dim=2))
        >>> source = MappedRows(ds)
        >>> out = {name: torch.empty((2, *ds.array(name).shape[1:]),
        ...                          dtype=torch.from_numpy(ds.array(name)[:1].copy()).dtype)
        ...        for name in SAMPLED_FIELDS}
        >>> source.gather(np.array([4, 1]), out)
        >>> bool((out["rewards"] == torch.from_numpy(ds.array("rewards")[[4, 1]].copy())).all())
        True
    """

    def __init__(self, dataset) -> None:
        self.dataset = dataset
        self.transitions = int(dataset.transition_count)
        self.arrays = {name: dataset.array(name) for name in SAMPLED_FIELDS}
        self.tensors = {name: _as_tensor(array) for name, array in self.arrays.items()}

    def gather(self, rows: np.ndarray, outputs: dict[str, torch.Tensor]) -> None:
        """``outputs[name][i] = field[rows[i]]`` for every sampled field (rows int64)."""
        index = torch.from_numpy(rows)
        for name, tensor in self.tensors.items():
            torch.index_select(tensor, 0, index, out=outputs[name])


class InMemoryRows(MappedRows):
    """Like MappedRows, after copying the sampled fields into process memory (window by window,
    unmapping each window, so the copy does not count twice)."""

    def __init__(self, dataset) -> None:
        super().__init__(dataset)
        for name, array in self.arrays.items():
            copy = torch.empty(tuple(array.shape), dtype=self.tensors[name].dtype)
            row_bytes = max(1, array.nbytes // max(1, array.shape[0]))
            step = max(1, _COPY_WINDOW_BYTES // row_bytes)
            for start in range(0, array.shape[0], step):
                copy[start : start + step] = self.tensors[name][start : start + step]
                release_mapping(array)
            self.tensors[name] = copy


class WindowedRows(MappedRows):
    """Gathers rows in file order, ``window_bytes`` of each file at a time, unmapping each
    window after use, so at most about one window of file pages is mapped at once."""

    def __init__(self, dataset, window_bytes: int) -> None:
        super().__init__(dataset)
        if window_bytes < 1 << 20:
            raise BadInput(f"window_bytes: got {window_bytes}, expected at least 1 MiB")
        for name, array in self.arrays.items():
            if getattr(array, "_mmap", None) is None:
                raise BadInput(
                    f"{dataset.path}: field {name!r} is not a numpy memory map; bounded-memory "
                    "sampling needs one"
                )
        self.window_rows = {
            name: max(1, window_bytes // max(1, array.nbytes // max(1, array.shape[0])))
            for name, array in self.arrays.items()
        }
        self._scratch: dict[str, torch.Tensor] = {}

    def _scratch_for(self, name: str, count: int) -> torch.Tensor:
        scratch = self._scratch.get(name)
        if scratch is None or scratch.shape[0] < count:
            tensor = self.tensors[name]
            scratch = torch.empty((count, *tensor.shape[1:]), dtype=tensor.dtype)
            self._scratch[name] = scratch
        return scratch[:count]

    def gather(self, rows: np.ndarray, outputs: dict[str, torch.Tensor]) -> None:
        order = np.argsort(rows, kind="stable")
        ordered = rows[order]
        order_index = torch.from_numpy(order)
        ordered_index = torch.from_numpy(ordered)
        for name, tensor in self.tensors.items():
            step = self.window_rows[name]
            edges = np.searchsorted(ordered, np.arange(0, self.transitions + step, step))
            scratch = self._scratch_for(name, rows.size)
            for low, high in zip(edges[:-1].tolist(), edges[1:].tolist(), strict=True):
                if high > low:
                    torch.index_select(tensor, 0, ordered_index[low:high], out=scratch[low:high])
                    release_mapping(self.arrays[name])
            outputs[name].index_copy_(0, order_index, scratch)
