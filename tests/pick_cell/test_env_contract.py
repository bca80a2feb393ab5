"""The pick cell against gymnasium's published environment contract."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env

import demo_envs
from demo_envs.pick_cell import FAMILIES, PickCellEnv
from demo_envs.pick_cell.observation import GRIPPER_COLUMNS, SLOT_COLUMNS, observation_size


@pytest.mark.parametrize(
    "kwargs",
    [
        {},
        {"reveal": True, "sensor_noise": 0.02},
        {"perturbations": {name: family.default for name, family in FAMILIES.items()}},
        {"max_items": 1, "horizon": 5},
    ],
    ids=["base", "reveal-noise", "all-families", "small"],
)
def test_gymnasium_env_checker_passes(kwargs):
    # Published standard: gymnasium.utils.env_checker.check_env, gymnasium's own checker of the
    # Env API (spaces, seeding determinism, reset/step return types, render).
    env = gym.make(demo_envs.PICK_CELL_ID, render_mode="rgb_array", **kwargs)
    check_env(env.unwrapped, skip_render_check=False)


def test_make_builds_the_registered_env_with_kwargs():
    env = gym.make(demo_envs.PICK_CELL_ID, max_items=3, perturbations={"drive_lag": 0.5})
    assert isinstance(env.unwrapped, PickCellEnv)
    assert env.observation_space.shape == (observation_size(4),)
    assert env.unwrapped.cell.resolved.drive_lag == 0.5


def test_observation_layout_is_documented_length():
    env = PickCellEnv()
    obs, info = env.reset(seed=3)
    assert obs.shape == (len(GRIPPER_COLUMNS) + 5 * len(SLOT_COLUMNS),) == (61,)
    assert obs.dtype == np.float32
    assert info == {"is_success": False}


def test_slots_are_sorted_nearest_first_and_empty_slots_last():
    env = PickCellEnv(max_items=4)
    g, s = len(GRIPPER_COLUMNS), len(SLOT_COLUMNS)
    for seed in range(30):
        obs, _ = env.reset(seed=seed)
        slots = obs[g:].reshape(5, s)
        present = slots[:, 5] > 0.5
        count = int(present.sum())
        assert present[:count].all() and not present[count:].any()
        dist = np.hypot(slots[:count, 0], slots[:count, 1])
        assert np.all(np.diff(dist) >= -1e-6)
        assert np.all(slots[count:] == 0.0)


def test_render_is_a_small_rgb_picture():
    env = PickCellEnv(render_mode="rgb_array")
    env.reset(seed=0)
    frame = env.render()
    assert frame.dtype == np.uint8 and frame.ndim == 3 and frame.shape[2] == 3
    assert frame.std() > 0  # something is drawn on the floor


def test_episode_truncates_at_horizon_when_nothing_is_lifted():
    env = PickCellEnv(horizon=7)
    env.reset(seed=0)
    for t in range(7):
        _, reward, terminated, truncated, info = env.step(np.zeros(4, dtype=np.float32))
        assert reward == 0.0 and not terminated and not info["is_success"]
        assert truncated == (t == 6)
