"""The batched pick cell against gymnasium's SyncVectorEnv over the single env.

Reference: gymnasium's own ``SyncVectorEnv`` (next-step autoreset, sub-env i seeded with
seed + i) defines what a vector env over the single env must return; the batched
implementation must match it observation for observation.
"""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest

import demo_envs
from demo_envs.pick_cell import FAMILIES, PickCellVectorEnv, ScriptedPicker

# Every family at once, at magnitudes mild enough that episodes still succeed and autoreset.
ALL_FAMILIES_MILD = {
    "finger_offset": 0.03, "finger_length": 0.02, "camera_shift": 0.02, "camera_scale": 0.05,
    "drive_lag": 0.3, "ghost_items": 0.3, "offcentre_load": 0.3,
}
assert set(ALL_FAMILIES_MILD) == set(FAMILIES)


def _rollout(envs, actions_for, steps, seed):
    obs, info = envs.reset(seed=seed)
    record = [(obs.copy(), info["is_success"].copy())]
    for t in range(steps):
        obs, reward, terminated, truncated, info = envs.step(actions_for(t, obs))
        record.append(
            (obs.copy(), reward.copy(), terminated.copy(), truncated.copy(),
             info["is_success"].copy(), info["_is_success"].copy())
        )
    return record


@pytest.mark.parametrize(
    "kwargs",
    [{}, {"perturbations": ALL_FAMILIES_MILD, "reveal": True}, {"max_items": 2, "horizon": 12}],
    ids=["base", "all-families-revealed", "small"],
)
def test_batched_env_matches_sync_vector_env_step_by_step(kwargs):
    n, steps, seed = 16, 70, 123  # 70 steps cross several autoresets per sub-env
    batched = gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=n, **kwargs)
    sync = gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=n, vectorization_mode="sync", **kwargs)
    assert isinstance(batched.unwrapped, PickCellVectorEnv)
    assert sync.metadata["autoreset_mode"] == batched.metadata["autoreset_mode"]

    # Mix scripted actions (so episodes succeed and terminate early) with random ones.
    picker_a, picker_b = ScriptedPicker(noise=0.05, seed=5), ScriptedPicker(noise=0.05, seed=5)
    rng_a, rng_b = np.random.default_rng(9), np.random.default_rng(9)

    def actions(picker, rng):
        def pick(t, obs):
            act = picker.act(obs)
            random_rows = rng.random(n) < 0.05
            act[random_rows] = rng.uniform(-1, 1, (int(random_rows.sum()), 4))
            return act
        return pick

    got = _rollout(batched, actions(picker_a, rng_a), steps, seed)
    want = _rollout(sync, actions(picker_b, rng_b), steps, seed)
    successes = sum(int(step[2].sum()) for step in want[1:])
    assert successes > 5, "the comparison should cover terminations, not only truncations"
    for t, (a, b) in enumerate(zip(got, want, strict=True)):
        for x, y in zip(a, b, strict=True):
            np.testing.assert_array_equal(x, y, err_msg=f"step {t}")


def test_reset_mask_restarts_only_the_masked_envs():
    envs = PickCellVectorEnv(num_envs=4)
    first, _ = envs.reset(seed=0)
    moved, *_ = envs.step(np.ones((4, 4), dtype=np.float32) * [1, 1, 1, -1])
    mask = np.array([True, False, True, False])
    again, info = envs.reset(options={"reset_mask": mask})
    np.testing.assert_array_equal(again[~mask], moved[~mask])
    np.testing.assert_array_equal(info["_is_success"], mask)
    # A fresh episode from the same generator is a new scene, not the first one again.
    assert not np.array_equal(again[mask], first[mask])


def test_sensor_noise_perturbs_positions_but_not_scenes():
    quiet = PickCellVectorEnv(num_envs=8)
    noisy = PickCellVectorEnv(num_envs=8, sensor_noise=0.05)
    quiet.reset(seed=4)
    noisy.reset(seed=4)
    np.testing.assert_array_equal(quiet._state.item_xy, noisy._state.item_xy)
    a, _ = quiet.reset(seed=4)
    b, _ = noisy.reset(seed=4)
    assert np.abs(a - b).max() > 0.0
