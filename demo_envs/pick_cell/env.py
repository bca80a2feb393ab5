"""The pick cell as a single gymnasium environment.

Holds:
    PickCellEnv -- a gantry with a two-finger gripper picks parcels out of a tote.

Action: Box [-1, 1]^4: planar x and y motion and vertical motion (scaled by the largest step,
see ``settings``), and a grip command (> 0 closes the fingers, <= 0 opens them).
Observation: see ``observation`` (gripper block, then parcel slots nearest first).
Reward: 1 when a held parcel's base is lifted to the lift height (the episode then
terminates), else 0; the episode is truncated after ``horizon`` steps.
``info["is_success"]`` is True on the step that succeeds.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import gymnasium as gym
import numpy as np

from demo_envs.pick_cell.dynamics import CellState, advance
from demo_envs.pick_cell.layout import draw_layout, uniforms_per_episode
from demo_envs.pick_cell.observation import observation_bounds, observe
from demo_envs.pick_cell.render import draw_frame
from demo_envs.pick_cell.settings import CellSettings

# Per-step sensor noise comes from its own stream, so switching it on leaves the scenes
# (drawn from np_random) unchanged.
NOISE_STREAM = 0x5E45


def noise_generator(seed: int | None) -> np.random.Generator:
    """The sensor-noise generator for a reset seed (fresh entropy when ``seed`` is None)."""
    return np.random.default_rng(None if seed is None else [NOISE_STREAM, seed])


def check_render_mode(render_mode: str | None) -> str | None:
    if render_mode not in (None, "rgb_array"):
        raise ValueError(
            f"render_mode: got {render_mode!r}, expected None or 'rgb_array'"
        )
    return render_mode


def cell_spaces(cell: CellSettings) -> tuple[gym.spaces.Box, gym.spaces.Box]:
    """The (observation, action) spaces of one pick cell."""
    low, high = observation_bounds(cell.slots)
    observation_space = gym.spaces.Box(low, high, dtype=np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, shape=(4,), dtype=np.float32)
    return observation_space, action_space


class PickCellEnv(gym.Env):
    """One pick-cell episode at a time.

    Args: see ``CellSettings`` (max_items, horizon, perturbations, reveal, sensor_noise),
    plus ``render_mode`` (None or "rgb_array").

    Example:
        >>> import gymnasium as gym, demo_envs
        >>> env = gym.make("demo_envs/PickCell-v0", perturbations={"drive_lag": 1.0})
        >>> obs, info = env.reset(seed=0)
        >>> obs.shape, info["is_success"]
        ((61,), False)
    """

    metadata = {
        "render_modes": ["rgb_array"],
        "render_fps": 5,
        "scripted_policy": "demo_envs.pick_cell.controller:ScriptedPicker",
    }

    def __init__(
        self,
        render_mode: str | None = None,
        max_items: int = 4,
        horizon: int = 20,
        perturbations: Mapping[str, float] | None = None,
        reveal: bool = False,
        sensor_noise: float = 0.0,
    ) -> None:
        self.render_mode = check_render_mode(render_mode)
        self.cell = CellSettings(
            max_items=max_items,
            horizon=horizon,
            perturbations=perturbations,
            reveal=reveal,
            sensor_noise=sensor_noise,
        )
        self.observation_space, self.action_space = cell_spaces(self.cell)
        self._uniforms = uniforms_per_episode(self.cell.max_items)
        self._state = CellState.empty(1, self.cell.slots)
        self._noise_rng: np.random.Generator | None = None

    def _observe(self) -> np.ndarray:
        noise = None
        if self.cell.sensor_noise > 0.0:
            noise = self._noise_rng.normal(0.0, self.cell.sensor_noise, (1, self.cell.slots, 2))
        return observe(self._state, self.cell, noise)[0]

    def reset(
        self, *, seed: int | None = None, options: dict[str, Any] | None = None
    ) -> tuple[np.ndarray, dict[str, Any]]:
        super().reset(seed=seed)
        if seed is not None or self._noise_rng is None:
            self._noise_rng = noise_generator(seed)
        uniforms = self.np_random.random(self._uniforms)[None, :]
        self._state.place(slice(None), draw_layout(uniforms, self.cell.max_items,
                                                   self.cell.resolved))
        return self._observe(), {"is_success": False}

    def step(self, action: np.ndarray) -> tuple[np.ndarray, float, bool, bool, dict[str, Any]]:
        reward, success = advance(self._state, np.asarray(action)[None, :], self.cell)
        terminated = bool(success[0])
        truncated = not terminated and int(self._state.steps[0]) >= self.cell.horizon
        return self._observe(), float(reward[0]), terminated, truncated, {"is_success": terminated}

    def render(self) -> np.ndarray | None:
        if self.render_mode is None:
            return None
        return draw_frame(self._state, self.cell)
