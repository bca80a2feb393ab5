"""Batches mixed from several datasets in configured shares, reproducible across restarts.

Holds:
    MixtureSampler -- draws batches whose rows come from each source in a configured share
        (fixed or scheduled), gathered in blocks of many batches at once, with
        ``state_dict()``/``load_state_dict()`` for exact resumption.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import Any

import numpy as np
import torch

from qadapt.checks import positive_int
from qadapt.data.sampling.batch import ReplayBatch
from qadapt.data.sampling.block_pool import BlockPool
from qadapt.data.sampling.gather import SAMPLED_FIELDS, InMemoryRows, MappedRows, WindowedRows
from qadapt.data.sampling.shares import LinearShareSchedule, check_shares
from qadapt.errors import BadInput

_STATE_VERSION = 1
_ALIGN = 64
_MIN_MEMORY_LIMIT = 16 << 20


class MixtureSampler:
    """Random batches from ``datasets``, each batch holding a configured share of each source.

    How shares become rows: every row of a batch independently picks its source with
    probability equal to the source's share (one multinomial draw of the per-source counts per
    batch), then a uniformly random row of that source, with replacement. Over many batches a
    source's row count in a batch of ``B`` is Binomial(B, share), whatever the datasets'
    sizes. Within a batch the rows of source 0 come first, then source 1, and so on.
    ``shares`` defaults to equal shares; ``schedule`` (instead of ``shares``) moves the shares
    linearly from one vector to another over a number of batches.

    Speed: indices for ``block_batches`` batches (default 64) are drawn at once (seeded numpy
    Generator, no per-row Python loop), each field is gathered for the whole block with one
    ``torch.index_select`` per source (on one torch thread), and batches are handed out as
    contiguous views of the block. The small fields (actions, reward, flags: ``4 * (act_dim +
    3)`` bytes per transition) are always packed into one in-memory array.

    Memory, for observations and next observations (nearly all of a dataset's bytes):
    ``memory_limit_bytes=None`` (default) gathers straight from the memory maps; fastest, but
    the kernel keeps every page it maps resident (shared, reclaimable page cache), so over a
    long run the resident size approaches the size of those files. ``in_memory=True`` copies
    them into RAM first. ``memory_limit_bytes=N`` keeps what the sampler holds (blocks, scratch
    and one file window, read with plain reads into a reused buffer) near ``N``; blocks are
    then as large as the limit allows and each block reads the observation files once.
    ``scripts/bench_data_memory`` measures the default and two limits.

    Every dataset is verified (checksums and contents) before its first batch, if it was not
    already. ``state_dict()`` records the generator at the start of the current block and the
    batch count; ``load_state_dict()`` rebuilds that block, so a resumed run draws exactly the
    batches the uninterrupted one would have.

    Example:
        >>> import tempfile; from pathlib import Path
        >>> from qadapt.data.writing.synthetic import write_synthetic_dataset
        >>> from qadapt.data.format.dataset import open_dataset
        >>> root = Path(tempfile.mkdtemp())
        >>> prior = open_dataset(write_synthetic_dataset(root / "prior", transitions=500))
        >>> fresh = open_dataset(write_synthetic_dataset(root / "fresh", transitions=80))
        >>> sampler = MixtureSampler([prior, fresh], [0.5, 0.5], batch_size=32, seed=0)
        >>> batch = sampler.sample()
        >>> batch.observations.shape, batch.terminated.dtype
        (torch.Size([32, 61]), torch.float32)
    """

    def __init__(
        self,
        datasets: Sequence[Any],
        shares: Sequence[float] | None = None,
        batch_size: int = 256,
        seed: int = 0,
        schedule: LinearShareSchedule | None = None,
        *,
        block_batches: int | None = None,
        memory_limit_bytes: int | None = None,
        in_memory: bool = False,
    ) -> None:
        if isinstance(datasets, str | bytes) or not isinstance(datasets, Sequence) or not datasets:
            raise BadInput(f"datasets: got {datasets!r}, expected a non-empty list of datasets")
        self.datasets = list(datasets)
        self.batch_size = positive_int("batch_size", batch_size, BadInput)
        if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
            raise BadInput(f"seed: got {seed!r}, expected a non-negative integer")
        self.seed = int(seed)
        sizes = [int(len(dataset)) for dataset in self.datasets]
        if schedule is not None and shares is not None:
            raise BadInput("give shares or a schedule, not both (the schedule sets the shares)")
        if schedule is None:
            if shares is None:
                shares = [1.0 / len(sizes)] * len(sizes)
            schedule = LinearShareSchedule.constant(check_shares(shares, sizes=sizes).tolist())
        elif not isinstance(schedule, LinearShareSchedule):
            raise BadInput(
                f"schedule: got {type(schedule).__name__}, expected a LinearShareSchedule"
            )
        schedule.check_sources(sizes)
        self.schedule = schedule
        self._check_compatible()
        if memory_limit_bytes is not None:
            memory_limit_bytes = positive_int("memory_limit_bytes", memory_limit_bytes, BadInput)
            if memory_limit_bytes < _MIN_MEMORY_LIMIT:
                raise BadInput(
                    f"memory_limit_bytes: got {memory_limit_bytes}, expected at least "
                    f"{_MIN_MEMORY_LIMIT} (16 MiB)"
                )
            if in_memory:
                raise BadInput(
                    "in_memory=True copies whole fields into RAM; it cannot be "
                    "combined with memory_limit_bytes"
                )
        self.memory_limit_bytes = memory_limit_bytes
        self.in_memory = bool(in_memory)
        for dataset in self.datasets:
            dataset.verify()
        first = self.datasets[0]
        self.obs_dim, self.act_dim = int(first.obs_dim), int(first.act_dim)
        self._row_bytes = 4 * (2 * self.obs_dim + self.act_dim + 3) + 16
        if memory_limit_bytes is not None:
            # A quarter of the limit for the block being handed out, a quarter for the one a
            # caller may still hold, a quarter for the gather's scratch and a quarter for the
            # file window. Blocks as large as that allows: each block reads the files once.
            fit = max(1, memory_limit_bytes // 4 // (self._row_bytes * self.batch_size))
            wanted = (fit if block_batches is None
                      else positive_int("block_batches", block_batches, BadInput))
            block_batches = min(wanted, fit)
            self._sources = [WindowedRows(d, memory_limit_bytes // 4) for d in self.datasets]
        else:
            block_batches = (
                64 if block_batches is None
                else positive_int("block_batches", block_batches, BadInput)
            )
            row_source = InMemoryRows if self.in_memory else MappedRows
            self._sources = [row_source(d) for d in self.datasets]
        self.block_batches = block_batches
        self._generator = np.random.default_rng(self.seed)
        self._batches_drawn = 0
        self._block_start = 0
        self._block_state = self._generator.bit_generator.state
        self._block: list[ReplayBatch] = []
        self._pool = BlockPool()
        self._block_bytes, self._layout = self._block_layout()
        # Per-source gathers of a mixed block land here before going to their rows.
        self._scratch: dict[str, torch.Tensor] = {}
        if len(self._sources) > 1:
            rows = self.block_batches * self.batch_size
            for name, shape in self._sources[0].row_shapes.items():
                self._scratch[name] = torch.empty((rows, *shape), dtype=torch.float32)

    def _check_compatible(self) -> None:
        first = self.datasets[0]
        for i, dataset in enumerate(self.datasets[1:], start=1):
            for role in ("observation_space", "action_space"):
                if getattr(dataset, role) != getattr(first, role):
                    raise BadInput(
                        f"datasets[{i}] ({dataset.path}): {role.replace('_', ' ')} "
                        f"{getattr(dataset, role).to_json()} differs from datasets[0] "
                        f"({first.path}): {getattr(first, role).to_json()}"
                    )

    # -- drawing --------------------------------------------------------------------------
    @property
    def batches_drawn(self) -> int:
        """Batches handed out so far (the schedule's step counter)."""
        return self._batches_drawn

    def shares_now(self) -> np.ndarray:
        """The share vector the next batch is drawn with."""
        return self.schedule.shares_at(np.array([self._batches_drawn]))[0]

    def sample(self) -> ReplayBatch:
        """The next batch."""
        position = self._batches_drawn - self._block_start
        if position >= len(self._block):
            self._start_block(self._batches_drawn)
            position = 0
        self._batches_drawn += 1
        return self._block[position]

    def __iter__(self) -> Iterator[ReplayBatch]:
        return self

    def __next__(self) -> ReplayBatch:
        return self.sample()

    def _start_block(self, first_batch: int) -> None:
        self._block_start = first_batch
        self._block_state = self._generator.bit_generator.state
        self._block = []  # let the old block's buffer go back to the pool
        # Gathering is memory-bound: a second thread adds little, and on a shared 2-core
        # machine torch's worker threads waiting for a busy core made one block ~50x slower
        # (measured 125 vs 2.6 us per batch of 256 x 61 floats). So: one thread, restored after.
        threads = torch.get_num_threads()
        torch.set_num_threads(1)
        try:
            self._block = self._draw_block(first_batch)
        finally:
            torch.set_num_threads(threads)

    def _draw_block(self, first_batch: int) -> list[ReplayBatch]:
        count, size = self.block_batches, self.batch_size
        rows_total = count * size
        sources = len(self._sources)
        generator = self._generator
        fields = self._allocate_block()
        if sources == 1:
            chosen = generator.integers(0, self._sources[0].transitions, rows_total, dtype=np.int64)
            self._sources[0].gather(chosen, fields)
            fields["row_index"].copy_(torch.from_numpy(chosen))
            fields["source_index"].zero_()
        else:
            shares = self.schedule.shares_at(np.arange(first_batch, first_batch + count))
            counts = generator.multinomial(size, shares)  # [count, sources]
            self._gather_mixed(counts, fields)
        views = {
            name: tensor.view(count, size, *tensor.shape[1:]).unbind(0)
            for name, tensor in fields.items()
        }
        return [
            ReplayBatch(
                views["observations"][k],
                views["next_observations"][k],
                views["actions"][k],
                views["rewards"][k],
                views["terminated"][k],
                views["truncated"][k],
                views["source_index"][k],
                views["row_index"][k],
            )
            for k in range(count)
        ]

    def _gather_mixed(self, counts: np.ndarray, fields: dict[str, torch.Tensor]) -> None:
        """Fill a block from several sources; ``counts[k, s]`` rows of batch k from source s,
        laid out source after source within each batch."""
        count, size = counts.shape[0], self.batch_size
        row_index = np.empty(count * size, dtype=np.int64)
        source_index = np.repeat(np.tile(np.arange(len(self._sources)), count), counts.ravel())
        offsets = np.cumsum(counts, axis=1) - counts  # where each source starts in its batch
        for s, rows in enumerate(self._sources):
            per_batch = counts[:, s]
            total = int(per_batch.sum())
            if total == 0:
                continue
            chosen = self._generator.integers(0, rows.transitions, total, dtype=np.int64)
            # Destination of every chosen row: its batch's start + its source's offset + rank.
            starts = np.arange(count, dtype=np.int64) * size + offsets[:, s]
            rank = np.arange(total, dtype=np.int64) - np.repeat(
                np.cumsum(per_batch) - per_batch, per_batch
            )
            destination = np.repeat(starts, per_batch) + rank
            row_index[destination] = chosen
            scratch = {name: self._scratch[name][:total] for name in SAMPLED_FIELDS}
            rows.gather(chosen, scratch)
            where = torch.from_numpy(destination)
            for name in SAMPLED_FIELDS:
                fields[name].index_copy_(0, where, scratch[name])
        fields["row_index"].copy_(torch.from_numpy(row_index))
        fields["source_index"].copy_(torch.from_numpy(source_index))

    def _block_layout(self) -> tuple[int, list[tuple[str, torch.dtype, tuple, int, int]]]:
        """Byte size of a block and, per field, ``(name, dtype, shape, offset, bytes)``."""
        rows = self.block_batches * self.batch_size
        fields = (
            ("observations", torch.float32, (rows, self.obs_dim)),
            ("next_observations", torch.float32, (rows, self.obs_dim)),
            ("actions", torch.float32, (rows, self.act_dim)),
            ("rewards", torch.float32, (rows,)),
            ("terminated", torch.float32, (rows,)),
            ("truncated", torch.float32, (rows,)),
            ("source_index", torch.int64, (rows,)),
            ("row_index", torch.int64, (rows,)),
        )
        layout, offset = [], 0
        for name, dtype, shape in fields:
            nbytes = int(np.prod(shape)) * dtype.itemsize
            layout.append((name, dtype, shape, offset, nbytes))
            offset += -(-nbytes // _ALIGN) * _ALIGN
        return offset, layout

    def _allocate_block(self) -> dict[str, torch.Tensor]:
        """One buffer for the whole block, carved into contiguous per-field views. The pool
        reuses a buffer only when no batch viewing it is alive."""
        storage = self._pool.take(self._block_bytes)
        return {
            name: storage[offset : offset + nbytes].view(dtype).view(shape)
            for name, dtype, shape, offset, nbytes in self._layout
        }

    # -- resuming -------------------------------------------------------------------------
    def _identity(self) -> dict[str, Any]:
        return {
            "sources": [getattr(d, "fingerprint", None) for d in self.datasets],
            "source_sizes": [int(len(d)) for d in self.datasets],
            "batch_size": self.batch_size,
            "block_batches": self.block_batches,
            "seed": self.seed,
            "schedule": self.schedule.to_json(),
        }

    def state_dict(self) -> dict[str, Any]:
        """Everything needed to continue the exact sequence of batches (plain Python data)."""
        return {
            "version": _STATE_VERSION,
            **self._identity(),
            "batches_drawn": self._batches_drawn,
            "block_start": self._block_start,
            "generator_at_block_start": self._block_state,
            "generator_now": self._generator.bit_generator.state,
            "block_loaded": bool(self._block),
        }

    def load_state_dict(self, state: dict[str, Any]) -> None:
        """Continue from ``state`` (made by ``state_dict`` of a sampler with the same sources,
        batch size, block size, seed and schedule; BadInput names what differs)."""
        if not isinstance(state, dict) or state.get("version") != _STATE_VERSION:
            raise BadInput(f"sampler state: expected a state_dict of version {_STATE_VERSION}")
        for key, value in self._identity().items():
            if state.get(key) != value:
                raise BadInput(
                    f"sampler state: {key} is {state.get(key)!r} in the saved state but "
                    f"{value!r} in this sampler"
                )
        drawn, start = int(state["batches_drawn"]), int(state["block_start"])
        if not 0 <= drawn - start <= self.block_batches:
            raise BadInput("sampler state: batches_drawn and block_start do not fit together")
        if state["block_loaded"]:
            self._generator.bit_generator.state = state["generator_at_block_start"]
            self._start_block(start)
        else:
            self._generator.bit_generator.state = state["generator_now"]
            self._block = []
            self._block_start = start
            self._block_state = state["generator_now"]
        self._batches_drawn = drawn
