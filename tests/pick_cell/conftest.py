"""Shared helpers for the pick-cell tests."""

from __future__ import annotations

import gymnasium as gym

import demo_envs
from demo_envs.pick_cell import ScriptedPicker
from qadapt.rollout import run_episodes


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
    return run_episodes(envs, ScriptedPicker(noise=noise, seed=seed), seed=seed).successes
