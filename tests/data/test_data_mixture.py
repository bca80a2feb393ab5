"""MixtureSampler: shares, schedule, exact resumption, batch contents, gathering modes."""

from __future__ import annotations

import json

import numpy as np
import pytest
import torch
from scipy.stats import binomtest

from qadapt.data import LinearShareSchedule, MixtureSampler, check_shares, open_dataset
from qadapt.data.sampling.gather import SAMPLED_FIELDS, MappedRows, WindowedRows
from qadapt.data.writing.synthetic import write_synthetic_dataset
from qadapt.errors import BadInput

BATCH_FIELDS = (
    "observations",
    "next_observations",
    "actions",
    "rewards",
    "terminated",
    "truncated",
    "source_index",
    "row_index",
)


@pytest.fixture
def two_sources(write_dataset):
    small, _ = write_dataset("small", lengths=(5, 7, 3), seed=1)  # 15 transitions
    large, _ = write_dataset("large", lengths=tuple(range(20, 80)), seed=2, chunk_episodes=60)
    return open_dataset(small), open_dataset(large)


def _same_batches(first, second):
    for name in BATCH_FIELDS:
        assert torch.equal(getattr(first, name), getattr(second, name)), name


def test_shares_hold_whatever_the_dataset_sizes(two_sources):
    # Reference: scipy.stats.binomtest's exact (Clopper-Pearson) interval. Each row picks its
    # source independently, so the pooled count of source-0 rows is Binomial(n, share).
    for shares in ([0.5, 0.5], [0.2, 0.8], [0.9, 0.1]):
        sampler = MixtureSampler(list(two_sources), shares, batch_size=256, seed=3)
        sources = torch.cat([sampler.sample().source_index for _ in range(400)])
        n = sources.numel()
        for s, share in enumerate(shares):
            k = int((sources == s).sum())
            interval = binomtest(k, n, share).proportion_ci(confidence_level=0.999)
            assert interval.low <= share <= interval.high, (shares, s, k / n)


def test_default_shares_are_equal(two_sources):
    sampler = MixtureSampler(list(two_sources), batch_size=128, seed=0)
    assert sampler.shares_now().tolist() == [0.5, 0.5]


def test_per_batch_counts_vary_like_a_binomial(two_sources):
    # A per-row draw gives per-batch counts with variance B p (1 - p) (binomial variance,
    # from memory); a fixed split would give variance 0.
    sampler = MixtureSampler(list(two_sources), [0.5, 0.5], batch_size=200, seed=5)
    counts = np.array([int((sampler.sample().source_index == 0).sum()) for _ in range(600)])
    assert 0.7 * 50 < counts.var() < 1.3 * 50


def test_linear_schedule(two_sources):
    schedule = LinearShareSchedule([1.0, 0.0], [0.0, 1.0], steps=100)
    sampler = MixtureSampler(list(two_sources), batch_size=64, seed=1, schedule=schedule)
    batches = [sampler.sample().source_index for _ in range(140)]
    assert (batches[0] == 0).all()
    assert all((b == 1).all() for b in batches[100:])
    middle = torch.cat(batches[40:60])
    expected = float(np.mean(1 - np.arange(40, 60) / 100))  # mean share of source 0
    k = int((middle == 0).sum())
    interval = binomtest(k, middle.numel(), expected).proportion_ci(confidence_level=0.999)
    assert interval.low <= expected <= interval.high


@pytest.mark.parametrize("stop_after", [0, 5, 16, 37])
def test_resumed_sampler_draws_exactly_the_uninterrupted_batches(two_sources, stop_after):
    def make():
        return MixtureSampler(
            list(two_sources), [0.3, 0.7], batch_size=32, seed=9, block_batches=16
        )

    uninterrupted = make()
    expected = [uninterrupted.sample().clone() for _ in range(70)]
    interrupted = make()
    for _ in range(stop_after):
        interrupted.sample()
    saved = json.loads(json.dumps(interrupted.state_dict()))  # plain data, survives JSON
    resumed = make()
    resumed.load_state_dict(saved)
    for position in range(stop_after, 70):
        _same_batches(resumed.sample(), expected[position])


def test_state_from_a_different_sampler_is_refused(two_sources):
    state = MixtureSampler(list(two_sources), [0.3, 0.7], batch_size=32, seed=9).state_dict()
    other = MixtureSampler(list(two_sources), [0.5, 0.5], batch_size=32, seed=9)
    with pytest.raises(BadInput, match="sampler state: schedule"):
        other.load_state_dict(state)
    with pytest.raises(BadInput, match="sampler state: batch_size is 32 in the saved state but 16"):
        MixtureSampler(list(two_sources), [0.3, 0.7], batch_size=16, seed=9).load_state_dict(state)


def test_batches_hold_the_rows_they_name(two_sources):
    sampler = MixtureSampler(list(two_sources), [0.4, 0.6], batch_size=300, seed=2)
    for _ in range(5):
        batch = sampler.sample()
        assert len(batch) == 300
        for name in BATCH_FIELDS:
            tensor = getattr(batch, name)
            assert tensor.is_contiguous() and tensor.shape[0] == 300
        for name in ("observations", "actions", "rewards", "terminated", "truncated"):
            assert getattr(batch, name).dtype == torch.float32
        for s, dataset in enumerate(two_sources):
            mine = batch.source_index == s
            rows = batch.row_index[mine].numpy()
            for name in ("observations", "next_observations", "actions", "rewards"):
                np.testing.assert_array_equal(
                    getattr(batch, name)[mine].numpy(), dataset.array(name)[rows]
                )
            for name in ("terminated", "truncated"):
                np.testing.assert_array_equal(
                    getattr(batch, name)[mine].numpy(), dataset.array(name)[rows].astype(np.float32)
                )
        # Rows of source 0 come first in every batch.
        assert (torch.diff(batch.source_index) >= 0).all()


def test_held_batches_are_never_overwritten(two_sources):
    sampler = MixtureSampler(list(two_sources), batch_size=64, seed=0, block_batches=4)
    kept = [sampler.sample() for _ in range(3)]
    copies = [batch.clone() for batch in kept]
    for _ in range(200):
        sampler.sample()
    for batch, copy in zip(kept, copies, strict=True):
        _same_batches(batch, copy)


def test_windowed_gathering_matches_mapped(tmp_path):
    dataset = open_dataset(write_synthetic_dataset(tmp_path / "w", transitions=20_000))
    rows = np.random.default_rng(0).integers(0, 20_000, 5000)
    outputs = []
    for gatherer in (MappedRows(dataset), WindowedRows(dataset, window_bytes=1 << 20)):
        out = {
            name: torch.empty((rows.size, *gatherer.row_shapes[name])) for name in SAMPLED_FIELDS
        }
        gatherer.gather(rows, out)
        outputs.append(out)
    assert WindowedRows(dataset, 1 << 20).window_rows < 20_000 // 4  # several windows
    for name in SAMPLED_FIELDS:
        assert torch.equal(outputs[0][name], outputs[1][name])


def test_all_memory_modes_draw_the_same_batches(two_sources):
    common = dict(batch_size=48, seed=4, block_batches=8)
    samplers = [
        MixtureSampler(list(two_sources), [0.5, 0.5], **common),
        MixtureSampler(list(two_sources), [0.5, 0.5], in_memory=True, **common),
        MixtureSampler(list(two_sources), [0.5, 0.5], memory_limit_bytes=64 << 20, **common),
    ]
    assert {s.block_batches for s in samplers} == {8}
    for _ in range(20):
        first, *others = [s.sample() for s in samplers]
        for other in others:
            _same_batches(first, other)


def test_sampler_verifies_an_unverified_dataset(write_dataset):
    path, _ = write_dataset()
    target = path / "observations.npy"
    data = bytearray(target.read_bytes())
    data[-1] ^= 0x10
    target.write_bytes(bytes(data))
    dataset = open_dataset(path, verify=False)
    with pytest.raises(BadInput, match="observations.npy.*checksum mismatch"):
        MixtureSampler([dataset], batch_size=8)


def test_share_validation_names_the_offending_share(two_sources):
    datasets = list(two_sources)
    with pytest.raises(BadInput, match=r"shares\[1\]: got -0.1, expected a share >= 0"):
        MixtureSampler(datasets, [1.1, -0.1])
    with pytest.raises(BadInput, match="sum to 0.9, expected 1"):
        MixtureSampler(datasets, [0.4, 0.5])
    with pytest.raises(BadInput, match=r"shares\[0\]: got nan"):
        MixtureSampler(datasets, [float("nan"), 0.5])
    with pytest.raises(BadInput, match="got 3 shares for 2 sources"):
        MixtureSampler(datasets, [0.2, 0.3, 0.5])
    with pytest.raises(BadInput, match=r"shares\[1\]: got 0.5 for source 1, which is empty"):
        check_shares([0.5, 0.5], sizes=[10, 0])
    assert check_shares([0.5, 0.5 + 5e-7]).sum() == pytest.approx(1.0, abs=1e-15)
    with pytest.raises(BadInput, match="give shares or a schedule, not both"):
        MixtureSampler(datasets, [0.5, 0.5], schedule=LinearShareSchedule([1, 0], [0, 1], 5))
    with pytest.raises(BadInput, match="batch_size: got 0"):
        MixtureSampler(datasets, batch_size=0)


def test_sources_must_agree_on_spaces(write_dataset):
    first = open_dataset(write_dataset("a", obs_dim=3)[0])
    second = open_dataset(write_dataset("b", obs_dim=4)[0])
    with pytest.raises(
        BadInput,
        match=r"datasets\[1\].*observation space .* differs from "
        r"datasets\[0\]",
    ):
        MixtureSampler([first, second])
