"""The maximiser contract, run on every kind in the registry (one test suite, many maximisers).

Each case builds its maximiser through build_maximizer and scores with a per-state problem
from problems.py, so a kind added to MAXIMIZERS without a case here fails
test_every_registered_kind_has_a_case.
"""

from __future__ import annotations

from dataclasses import dataclass

import gymnasium as gym
import pytest
import torch

from qadapt.maximize import MAXIMIZERS, ActionMaximizer, build_maximizer

from .problems import QuadraticProblem, random_box


@dataclass
class Case:
    """One maximiser on one action space, with the problem the contract is checked on."""

    kind: str
    space: gym.spaces.Space
    settings: dict
    finite: bool  # searches a fixed candidate set (exact, seed-free)
    low: torch.Tensor
    high: torch.Tensor


def _cases() -> list[Case]:
    low, high = random_box(3, seed=5)
    box = gym.spaces.Box(low.numpy(), high.numpy())
    g = torch.Generator().manual_seed(6)
    grid = low + (high - low) * torch.rand(40, 3, generator=g)
    return [
        Case("cem", box, {"samples": 64, "elites": 6, "iterations": 4}, False, low, high),
        Case("exhaustive", gym.spaces.Discrete(6), {}, True, torch.zeros(6), torch.ones(6)),
        Case("exhaustive", box, {"candidates": grid}, True, low, high),
    ]


CASES = _cases()
IDS = [f"{c.kind}-{type(c.space).__name__}" for c in CASES]


def _problem(case: Case, batch: int, seed: int = 0) -> QuadraticProblem:
    return QuadraticProblem.random(case.low, case.high, batch, seed)


def _recording(score):
    """Wraps a score function, recording (shape, dtype, grad enabled) of every call."""
    calls = []

    def wrapped(candidates: torch.Tensor) -> torch.Tensor:
        calls.append((tuple(candidates.shape), candidates.dtype, torch.is_grad_enabled()))
        return score(candidates)

    return wrapped, calls


def _seeded(seed: int) -> torch.Generator:
    return torch.Generator().manual_seed(seed)


def test_every_registered_kind_has_a_case():
    assert {c.kind for c in CASES} == set(MAXIMIZERS)


@pytest.mark.parametrize("case", CASES, ids=IDS)
@pytest.mark.parametrize("batch", [1, 7, 1000])
def test_shapes_dtypes_and_values_are_the_scores_of_the_actions(case, batch):
    maximizer = build_maximizer(case.kind, case.space, **case.settings)
    assert isinstance(maximizer, ActionMaximizer)
    problem = _problem(case, batch)
    score, calls = _recording(problem.score)
    result = maximizer.maximize(score, batch, generator=_seeded(0))
    a = maximizer.action_dim
    assert result.actions.shape == (batch, a) and result.actions.dtype == torch.float32
    assert result.values.shape == (batch,) and result.values.dtype == torch.float32
    assert torch.isfinite(result.values).all()
    # values are the scores of the returned actions, as the score function computes them.
    rescored = problem.score(result.actions.unsqueeze(1)).squeeze(1)
    torch.testing.assert_close(result.values, rescored, rtol=1e-6, atol=1e-6)
    # Every call: one batched program over all states, float32 [B, K, A], no autograd.
    assert calls and all(
        shape[0] == batch and shape[2] == a and dtype == torch.float32 and not grad
        for shape, dtype, grad in calls
    )
    if case.finite:
        assert result.indices is not None and result.indices.dtype == torch.int64
        assert result.indices.shape == (batch,)
        assert torch.equal(result.actions, maximizer.candidates[result.indices])
    else:
        assert result.indices is None
        assert (result.actions >= case.low).all() and (result.actions <= case.high).all()


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_score_calls_do_not_grow_with_the_batch(case):
    maximizer = build_maximizer(case.kind, case.space, **case.settings)
    counts = []
    for batch in (1, 1000):
        score, calls = _recording(_problem(case, batch).score)
        maximizer.maximize(score, batch, generator=_seeded(0))
        counts.append(len(calls))
    assert counts[0] == counts[1]
    if not case.finite:
        assert counts[0] == maximizer.iterations


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_runs_under_no_grad_even_when_the_caller_enables_grad(case):
    maximizer = build_maximizer(case.kind, case.space, **case.settings)
    problem = _problem(case, 5)
    weights = problem.weights.clone().requires_grad_(True)  # a score with trainable parts

    def score(candidates):
        return -(weights * (candidates - problem.shifts.unsqueeze(1)) ** 2).sum(-1)

    with torch.enable_grad():
        result = maximizer.maximize(score, 5, generator=_seeded(0))
    assert not result.values.requires_grad and not result.actions.requires_grad


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_same_generator_state_gives_the_same_result(case):
    maximizer = build_maximizer(case.kind, case.space, **case.settings)
    problem = _problem(case, 50)
    global_state = torch.get_rng_state()
    first = maximizer.maximize(problem.score, 50, generator=_seeded(123))
    second = maximizer.maximize(problem.score, 50, generator=_seeded(123))
    assert torch.equal(first.actions, second.actions)
    assert torch.equal(first.values, second.values)
    # A given generator is the only source of randomness: torch's global one is untouched.
    assert torch.equal(torch.get_rng_state(), global_state)
    other = maximizer.maximize(problem.score, 50, generator=_seeded(124))
    if case.finite:
        assert torch.equal(first.actions, other.actions)  # exact search: seed-free
    else:
        assert not torch.equal(first.actions, other.actions)  # the generator is really used


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_batched_answer_matches_one_state_at_a_time(case):
    maximizer = build_maximizer(case.kind, case.space, **case.settings)
    batch = 12
    problem = _problem(case, batch, seed=3)
    together = maximizer.maximize(problem.score, batch, generator=_seeded(0))
    alone = [
        maximizer.maximize(problem.subset(i).score, 1, generator=_seeded(0)) for i in range(batch)
    ]
    alone_values = torch.cat([r.values for r in alone])
    if case.finite:
        assert torch.equal(together.indices, torch.cat([r.indices for r in alone]))
        assert torch.equal(together.actions, torch.cat([r.actions for r in alone]))
        assert torch.equal(together.values, alone_values)
    else:
        # The noise differs between a batch and a single state, so compare quality: both reach
        # the known maximum 0 within 1% of the value range over the box (max - min, the min at
        # a corner), the tolerance test_against_scipy.py uses.
        corners = torch.cartesian_prod(*torch.stack([case.low, case.high], 1))
        value_range = -problem.score(corners.unsqueeze(0).expand(batch, -1, -1)).min(1).values
        assert (-together.values <= 1e-2 * value_range).all()
        assert (-alone_values <= 1e-2 * value_range).all()


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_state_dict_round_trip_rebuilds_the_same_maximizer(case):
    maximizer = build_maximizer(case.kind, case.space, **case.settings)
    state = maximizer.state_dict()
    problem = _problem(case, 20)
    want = maximizer.maximize(problem.score, 20, generator=_seeded(9))
    # A differently-configured instance of the same kind takes the settings over.
    if case.finite:
        other = build_maximizer("exhaustive", gym.spaces.Discrete(2))
    else:
        other = build_maximizer("cem", gym.spaces.Box(-5.0, 5.0, (1,)), samples=8, elites=2)
    other.load_state_dict(state)
    got = other.maximize(problem.score, 20, generator=_seeded(9))
    assert other.action_dim == maximizer.action_dim
    assert torch.equal(want.actions, got.actions) and torch.equal(want.values, got.values)
    # The state dict is a snapshot: changing it does not change the maximiser.
    for value in state.values():
        if isinstance(value, torch.Tensor):
            value.add_(1.0)
    again = maximizer.maximize(problem.score, 20, generator=_seeded(9))
    assert torch.equal(want.actions, again.actions)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_initial_of_the_right_shape_is_accepted_and_never_hurts(case):
    maximizer = build_maximizer(case.kind, case.space, **case.settings)
    problem = _problem(case, 30)
    cold = maximizer.maximize(problem.score, 30, generator=_seeded(0))
    warm = maximizer.maximize(problem.score, 30, initial=cold.actions, generator=_seeded(1))
    assert (warm.values >= cold.values).all()
