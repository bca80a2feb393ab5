"""The 5x5 gridworld of Sutton and Barto (2018), Example 3.5, as a table of transitions.

Reinforcement Learning: An Introduction, 2nd ed., Example 3.5 and Figure 3.5: from A (row 0,
column 1) every action jumps to A' (row 4, column 1) with reward +10; from B (row 0, column 3)
to B' (row 2, column 3) with +5; a move off the grid leaves the state unchanged with reward -1;
every other move gives 0. With gamma = 0.9 the optimal state values of the top row are
22.0, 24.4, 22.0, 19.4, 17.5 (Figure 3.5, rounded to one decimal in the book).
"""

from __future__ import annotations

import numpy as np

SIZE = 5
MOVES = ((-1, 0), (1, 0), (0, 1), (0, -1))  # north, south, east, west
A, A_PRIME, B, B_PRIME = (0, 1), (4, 1), (0, 3), (2, 3)
OPTIMAL_TOP_ROW = (22.0, 24.4, 22.0, 19.4, 17.5)


def step(cell: tuple[int, int], move: int) -> tuple[tuple[int, int], float]:
    if cell == A:
        return A_PRIME, 10.0
    if cell == B:
        return B_PRIME, 5.0
    row, col = cell[0] + MOVES[move][0], cell[1] + MOVES[move][1]
    if not (0 <= row < SIZE and 0 <= col < SIZE):
        return cell, -1.0
    return (row, col), 0.0


def transitions() -> dict[str, np.ndarray]:
    """Every (state, action) pair once: one-hot observations [100, 25], one-hot actions
    [100, 4], rewards, one-hot next observations; nothing terminates."""
    eye_s, eye_a = np.eye(SIZE * SIZE, dtype=np.float32), np.eye(4, dtype=np.float32)
    obs, act, rew, nxt = [], [], [], []
    for r in range(SIZE):
        for c in range(SIZE):
            for m in range(4):
                (nr, nc), reward = step((r, c), m)
                obs.append(eye_s[r * SIZE + c])
                act.append(eye_a[m])
                rew.append(reward)
                nxt.append(eye_s[nr * SIZE + nc])
    return {
        "observations": np.stack(obs),
        "actions": np.stack(act),
        "rewards": np.array(rew, dtype=np.float32),
        "next_observations": np.stack(nxt),
        "terminated": np.zeros(len(rew), dtype=np.float32),
    }
