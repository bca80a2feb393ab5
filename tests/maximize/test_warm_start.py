"""Warm starts: CEM begun at the previous solution does at least as well with fewer iterations.

The set-up mimics fitted Q-iteration: the score function drifts a little between calls (the
optimum of each state moves by about 5% of the box width), and the previous call's actions
are the warm start for the next.
"""

from __future__ import annotations

import pytest
import torch

from qadapt.maximize import CrossEntropyMaximizer

from .problems import QuadraticProblem, TwoBumpProblem, random_box

STATES = 256


def _seeded(seed: int) -> torch.Generator:
    return torch.Generator().manual_seed(seed)


def _drifting_quadratic(dim: int):
    """Box (low, high) and a quadratic before and after a drift of its optima."""
    low, high = random_box(dim, seed=8)
    before = QuadraticProblem.random(low, high, STATES, seed=1)
    drift = 0.05 * (high - low) * torch.randn(STATES, dim, generator=_seeded(3))
    after = QuadraticProblem(torch.clamp(before.shifts + drift, low, high), before.weights)
    return low, high, before, after


@pytest.mark.parametrize(("warm_iterations", "cold_iterations"), [(1, 2), (2, 4)])
def test_warm_start_with_fewer_iterations_is_at_least_as_good_on_a_drifting_quadratic(
    warm_iterations, cold_iterations
):
    low, high, before, after = _drifting_quadratic(4)
    # Settings: defaults (samples 64, elites 6, initial_std 0.5, warm_std 0.2, min_std 0.02).
    previous = CrossEntropyMaximizer(low, high, iterations=cold_iterations).maximize(
        before.score, STATES, generator=_seeded(0)
    )
    cold = CrossEntropyMaximizer(low, high, iterations=cold_iterations).maximize(
        after.score, STATES, generator=_seeded(1)
    )
    warm = CrossEntropyMaximizer(low, high, iterations=warm_iterations).maximize(
        after.score, STATES, initial=previous.actions, generator=_seeded(1)
    )
    # The maximum is 0 for every state, so -value is the gap to the optimum.
    assert warm.values.mean() >= cold.values.mean()
    assert warm.values.min() >= cold.values.min()


def test_warm_start_keeps_the_global_bump_that_a_cold_start_can_miss():
    dim, low, high = 3, -torch.ones(3), torch.ones(3)
    before = TwoBumpProblem.random(dim, STATES, seed=5)
    before.global_width, before.local_width, before.local_height = 0.4, 0.25, 0.5
    moved = before.global_centres + 0.05 * torch.randn(STATES, dim, generator=_seeded(7))
    after = TwoBumpProblem(moved, before.local_centres, 0.4, 0.25, 0.5)
    # A thorough solve of the earlier problem is the previous solution.
    thorough = CrossEntropyMaximizer(
        low, high, samples=256, elites=10, iterations=5, initial_std=1.0
    ).maximize(before.score, STATES, generator=_seeded(0))
    cold = CrossEntropyMaximizer(low, high, iterations=3).maximize(
        after.score, STATES, generator=_seeded(1)
    )
    warm = CrossEntropyMaximizer(low, high, iterations=1).maximize(
        after.score, STATES, initial=thorough.actions, generator=_seeded(1)
    )
    # Values below 0.9 mean the search settled on the local bump (height 0.5 < 0.9 < 1).
    trapped_cold, trapped_warm = int((cold.values < 0.9).sum()), int((warm.values < 0.9).sum())
    assert trapped_warm <= trapped_cold
    assert trapped_warm == 0
    assert warm.values.mean() >= cold.values.mean()


def test_warm_start_is_never_worse_than_the_start_itself():
    low, high, _, after = _drifting_quadratic(3)
    start = low + (high - low) * torch.rand(STATES, 3, generator=_seeded(4))
    start_values = after.score(start.unsqueeze(1)).squeeze(1)
    for iterations in (1, 3):
        warm = CrossEntropyMaximizer(low, high, iterations=iterations).maximize(
            after.score, STATES, initial=start, generator=_seeded(2)
        )
        # ``initial`` is a first-iteration candidate and the best candidate is returned.
        assert (warm.values >= start_values).all()


def test_initial_outside_the_box_is_clipped_so_actions_stay_inside():
    low, high, _, after = _drifting_quadratic(3)
    outside = high + 1.0 + torch.zeros(STATES, 3)
    warm = CrossEntropyMaximizer(low, high, iterations=1, samples=1, elites=1).maximize(
        after.score, STATES, initial=outside, generator=_seeded(0)
    )
    # With one sample the only candidate is the (clipped) start itself.
    assert torch.equal(warm.actions, high.expand(STATES, 3))
