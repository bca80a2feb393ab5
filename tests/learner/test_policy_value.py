"""Fitted Q evaluation reaches published values of fixed policies.

- The five-state random walk of Sutton and Barto (2018, Reinforcement Learning: An
  Introduction, 2nd ed., Example 6.2): true values 1/6, 2/6, ..., 5/6 for states A..E.
- The 5x5 gridworld of the same book (Example 3.5) under its optimal policy, whose values are
  those of Figure 3.5 (top row 22.0, 24.4, 22.0, 19.4, 17.5, rounded to one decimal there);
  the optimal policy is found here by value iteration on the table, independently of qadapt.
"""

from __future__ import annotations

import numpy as np
import torch

from qadapt.learner import TransitionArrays
from qadapt.learner.policy_value import (
    ValueFitSettings,
    fit_policy_value,
    own_critic_signals,
    start_values,
)
from qadapt.nets import QNetworkConfig, build_q_network

from . import gridworld

RANDOM_WALK_VALUES = (1 / 6, 2 / 6, 3 / 6, 4 / 6, 5 / 6)  # Sutton and Barto, Example 6.2


def _random_walk() -> TransitionArrays:
    """Each of A..E stepping left once and right once: the empirical model is the true one
    (a step off the left end ends with reward 0, off the right end with reward 1)."""
    eye = np.eye(5, dtype=np.float32)
    obs, nxt, rew, term = [], [], [], []
    for state in range(5):
        for move in (-1, 1):
            after = state + move
            obs.append(eye[state])
            nxt.append(eye[min(max(after, 0), 4)])
            rew.append(1.0 if after == 5 else 0.0)
            term.append(1.0 if after in (-1, 5) else 0.0)
    n = len(rew)
    return TransitionArrays(observations=np.stack(obs), actions=np.zeros((n, 1), np.float32),
                            rewards=np.array(rew, np.float32),
                            next_observations=np.stack(nxt),
                            terminated=np.array(term, np.float32))


def _linear_net(obs_dim: int, action_dim: int):
    config = QNetworkConfig(torso=(64,), head=(64,), output="linear", initial_value=0.0)
    return lambda: build_q_network(obs_dim, torch.zeros(action_dim), torch.ones(action_dim),
                                   config)


def test_random_walk_values_match_sutton_barto_example_6_2():
    arrays = _random_walk()
    single = torch.zeros(len(arrays), 1)  # the walk has one "action"
    critic = fit_policy_value(arrays, single, _linear_net(5, 1), gamma=1.0,
                              settings=ValueFitSettings(fits=40, steps_per_fit=50, batch_size=10))
    values = start_values(critic, np.eye(5, dtype=np.float32), torch.zeros(5, 1))
    np.testing.assert_allclose(values, RANDOM_WALK_VALUES, atol=0.01)  # measured: 0.002, seeds 0-2


def _optimal_moves(gamma: float = 0.9) -> np.ndarray:
    """The greedy move [25] of the exact optimal values (value iteration on the table)."""
    values = np.zeros((gridworld.SIZE, gridworld.SIZE))
    cells = [(r, c) for r in range(gridworld.SIZE) for c in range(gridworld.SIZE)]
    for _ in range(500):
        values = np.array([max(rew + gamma * values[nxt] for nxt, rew in
                               (gridworld.step(cell, m) for m in range(4)))
                           for cell in cells]).reshape(gridworld.SIZE, gridworld.SIZE)
    return np.array([int(np.argmax([rew + gamma * values[nxt] for nxt, rew in
                                    (gridworld.step(cell, m) for m in range(4))]))
                     for cell in cells])


def test_gridworld_optimal_policy_values_match_sutton_barto_figure_3_5():
    table = gridworld.transitions()
    arrays = TransitionArrays(**table)
    moves = _optimal_moves()
    next_states = table["next_observations"].argmax(1)
    next_actions = torch.eye(4)[moves[next_states]]
    critic = fit_policy_value(arrays, next_actions, _linear_net(25, 4), gamma=0.9,
                              settings=ValueFitSettings(fits=100, steps_per_fit=60, batch_size=100))
    values = start_values(critic, np.eye(25, dtype=np.float32), torch.eye(4)[moves])
    # Figure 3.5's top row, rounded to one decimal in the book: its rounding (0.05) plus 0.02
    # (measured, seeds 0-2: 0.023 at most, which is the rounding of 21.977 to 22.0).
    np.testing.assert_allclose(values[:5], gridworld.OPTIMAL_TOP_ROW, atol=0.07)


def test_own_critic_signals_of_the_exact_critic():
    # A "critic" that is exactly the random walk's value table (the book's values). Each
    # transition's TD error is V(s) - r - V(s') = -/+ 1/6 (neighbours differ by 1/6, and the
    # ends give V(A) - 0 = 1/6 and V(E) - 1 = -1/6): the held-out TD error of even a perfect
    # critic is the environment's noise, not zero, which is why it ranks checkpoints poorly.
    class Table(torch.nn.Module):
        def value(self, raw):
            return raw

        def forward(self, obs, actions):
            return obs @ torch.tensor(RANDOM_WALK_VALUES, dtype=torch.float32)

    arrays = _random_walk()
    nothing = torch.zeros(len(arrays), 1)
    rmse, own = own_critic_signals(Table(), arrays, nothing, np.eye(5, dtype=np.float32)[[2]],
                                   torch.zeros(1, 1), gamma=1.0)
    np.testing.assert_allclose(rmse, 1 / 6, atol=1e-6)
    np.testing.assert_allclose(own, [0.5], atol=1e-6)
