"""ExhaustiveMaximizer is exact: checked against numpy's argmax over an explicit score table.

Reference: numpy.argmax returns the first index of the maximum on ties ("In case of multiple
occurrences of the maximum values, the indices corresponding to the first occurrence are
returned", numpy.argmax documentation), the tie-break the maximiser promises.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st

from qadapt.maximize import ExhaustiveMaximizer


def _table_score(table: np.ndarray):
    """Score = table[b, c] for candidate c, read through the candidate's own index column."""
    lookup = torch.as_tensor(table, dtype=torch.float32)

    def score(candidates: torch.Tensor) -> torch.Tensor:
        index = candidates[..., 0].round().long()  # [B, K]
        return lookup.gather(1, index)

    return score


@settings(max_examples=40, deadline=None)
@given(
    states=st.integers(1, 40),
    count=st.integers(1, 60),
    levels=st.integers(1, 4),  # few distinct values: many ties
    chunk=st.sampled_from([1, 7, 64, 1 << 22]),
    seed=st.integers(0, 2**31 - 1),
)
def test_matches_numpy_argmax_over_an_explicit_table(states, count, levels, chunk, seed):
    rng = np.random.default_rng(seed)
    table = rng.integers(0, levels, size=(states, count)).astype(np.float32) / 4
    # Column 0 is the candidate's index, the rest arbitrary; chunk caps floats per score call.
    candidates = np.column_stack([np.arange(count), rng.normal(size=(count, 2))])
    maximizer = ExhaustiveMaximizer(candidates, floats_per_chunk=chunk)
    result = maximizer.maximize(_table_score(table), states)
    want = np.argmax(table, axis=1)
    np.testing.assert_array_equal(result.indices.numpy(), want)
    np.testing.assert_array_equal(result.values.numpy(), table[np.arange(states), want])
    np.testing.assert_array_equal(result.actions.numpy(), candidates.astype(np.float32)[want])


@pytest.mark.parametrize("chunk", [3, 1 << 22])
def test_discrete_one_hot_argmax_matches_numpy(chunk):
    rng = np.random.default_rng(0)
    states, n = 500, 9
    table = rng.normal(size=(states, n)).astype(np.float32)
    table[::5, 4] = table[::5].max(axis=1)  # ties with an earlier maximum in every 5th state
    weights = torch.as_tensor(table)
    maximizer = ExhaustiveMaximizer.for_discrete(n, floats_per_chunk=chunk)
    # One-hot candidates pick a table entry by a dot product: exact for 0/1 weights.
    result = maximizer.maximize(lambda c: (c * weights.unsqueeze(1)).sum(-1), states)
    want = np.argmax(table, axis=1)
    np.testing.assert_array_equal(result.indices.numpy(), want)
    np.testing.assert_array_equal(result.actions.numpy(), np.eye(n, dtype=np.float32)[want])


def test_chunking_bounds_each_score_call():
    calls = []

    def score(candidates):
        calls.append(candidates.shape)
        return candidates.sum(-1)

    states, count, dim = 10, 100, 2
    maximizer = ExhaustiveMaximizer(torch.rand(count, dim), floats_per_chunk=states * dim * 8)
    maximizer.maximize(score, states)
    # 8 candidates per call: 12 full chunks and one of 4.
    assert [s[1] for s in calls] == [8] * 12 + [4]
    assert all(s[0] == states and s[2] == dim for s in calls)
    # The cap never drops below one candidate per call.
    calls.clear()
    ExhaustiveMaximizer(torch.rand(3, dim), floats_per_chunk=1).maximize(score, states)
    assert [s[1] for s in calls] == [1, 1, 1]


def test_infinite_scores_are_ranked_and_all_minus_infinity_picks_index_zero():
    maximizer = ExhaustiveMaximizer.for_discrete(4)
    table = torch.tensor(
        [[-np.inf, np.inf, 0.0, np.inf], [-np.inf, -np.inf, -np.inf, -np.inf]], dtype=torch.float32
    )
    result = maximizer.maximize(lambda c: (c * table.unsqueeze(1)).nan_to_num(0.0).sum(-1), 2)
    assert result.indices.tolist() == [1, 0]
