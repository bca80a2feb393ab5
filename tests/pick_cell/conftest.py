"""Shared helpers for the pick-cell tests."""

from __future__ import annotations

import gymnasium as gym
import numpy as np

import demo_envs
from demo_envs.pick_cell import ScriptedPicker


def success_count(
    episodes: int,
    perturbations: dict | None = None,
    noise: float = 0.02,
    seed: int = 11,
    **kwargs,
) -> int:
    """Successful episodes of the scripted picker, one episode per batched sub-env."""
    envs = gym.make_vec(
        demo_envs.PICK_CELL_ID, num_envs=episodes, perturbations=perturbations, **kwargs
    )
    picker = ScriptedPicker(noise=noise, seed=seed)
    obs, _ = envs.reset(seed=seed)
    done = np.zeros(episodes, dtype=bool)
    success = np.zeros(episodes, dtype=bool)
    for _ in range(envs.unwrapped.cell.horizon):
        obs, _, terminated, truncated, _ = envs.step(picker.act(obs))
        success |= terminated & ~done
        done |= terminated | truncated
    assert done.all()
    return int(success.sum())
