"""Reusable memory for blocks of batches.

Holds:
    BlockPool -- hands out byte buffers as uint8 tensors, reusing a buffer only once no tensor
        made from it is alive any more.
"""

from __future__ import annotations

import sys

import torch


class BlockPool:
    """A small pool of byte buffers for the sampler's blocks.

    Freshly allocated memory costs a page fault per 4 KiB page on first touch, which for a
    block of batches costs more than gathering it. Buffers are therefore kept and reused, but
    only when no batch that views them is still alive: a tensor made with ``torch.frombuffer``
    holds a reference to its buffer object, so a buffer whose reference count is back to the
    pool's own is free. Batches a caller keeps are never overwritten.

    Example:
        >>> pool = BlockPool()
        >>> first = pool.take(1024)
        >>> second = pool.take(1024)          # `first` is alive: a new buffer
        >>> first.data_ptr() != second.data_ptr()
        True
        >>> address = first.data_ptr(); del first
        >>> pool.take(1024).data_ptr() == address  # free again: reused
        True
    """

    def __init__(self, keep: int = 3) -> None:
        if keep < 1:
            raise ValueError(f"keep: got {keep}, expected at least 1")
        self.keep = keep
        self._buffers: list[bytearray] = []
        self._free_count: int | None = None

    def _is_free(self, index: int) -> bool:
        return sys.getrefcount(self._buffers[index]) == self._free_count

    def take(self, nbytes: int) -> torch.Tensor:
        """A uint8 tensor of ``nbytes`` bytes whose memory no live tensor shares."""
        for index in range(len(self._buffers)):
            if len(self._buffers[index]) >= nbytes and self._is_free(index):
                return torch.frombuffer(self._buffers[index], dtype=torch.uint8)[:nbytes]
        # Drop free buffers beyond `keep` (e.g. after a caller released many held batches).
        free = [i for i in range(len(self._buffers)) if self._is_free(i)]
        while len(self._buffers) >= self.keep and free:
            del self._buffers[free.pop()]
        self._buffers.append(bytearray(nbytes))
        if self._free_count is None:
            self._free_count = sys.getrefcount(self._buffers[-1])
        return torch.frombuffer(self._buffers[-1], dtype=torch.uint8)
