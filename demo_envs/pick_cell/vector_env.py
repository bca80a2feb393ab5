"""The pick cell batched: N episodes stepped by one numpy program.

Holds:
    PickCellVectorEnv -- a ``gymnasium.vector.VectorEnv`` over N pick cells (next-step autoreset).

Seeding follows ``SyncVectorEnv``: ``reset(seed=s)`` seeds sub-env i with s + i, and each
sub-env keeps its own generator for the scenes of later episodes, so the batched env and
``gymnasium.make_vec(id, N, vectorization_mode="sync")`` produce the same episodes. Sensor
noise, when switched on, comes from one batched generator instead.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from gymnasium.utils import seeding
from gymnasium.vector import AutoresetMode, VectorEnv
from gymnasium.vector.utils import batch_space

from demo_envs.pick_cell.dynamics import CellState, advance
from demo_envs.pick_cell.env import cell_spaces, check_render_mode, noise_generator
from demo_envs.pick_cell.layout import draw_layout, uniforms_per_episode
from demo_envs.pick_cell.observation import observe
from demo_envs.pick_cell.render import draw_frame
from demo_envs.pick_cell.settings import CellSettings


class PickCellVectorEnv(VectorEnv):
    """N pick cells at once; the same keyword arguments as ``PickCellEnv`` plus ``num_envs``.

    Example:
        >>> import gymnasium as gym, demo_envs
        >>> envs = gym.make_vec("demo_envs/PickCell-v0", num_envs=8)
        >>> obs, info = envs.reset(seed=0)
        >>> obs.shape
        (8, 61)
    """

    metadata = {
        "render_modes": ["rgb_array"],
        "render_fps": 5,
        "autoreset_mode": AutoresetMode.NEXT_STEP,
        # qadapt collect policy=scripted builds this controller ("module:class").
        "scripted_policy": "demo_envs.pick_cell.controller:ScriptedPicker",
    }

    def __init__(
        self,
        num_envs: int = 1,
        render_mode: str | None = None,
        max_items: int = 4,
        horizon: int = 20,
        perturbations: Mapping[str, float] | None = None,
        reveal: bool = False,
        sensor_noise: float = 0.0,
    ) -> None:
        if isinstance(num_envs, bool) or not isinstance(num_envs, int) or num_envs < 1:
            raise ValueError(f"num_envs: got {num_envs!r}, expected a positive integer")
        self.render_mode = check_render_mode(render_mode)
        self.cell = CellSettings(
            max_items=max_items,
            horizon=horizon,
            perturbations=perturbations,
            reveal=reveal,
            sensor_noise=sensor_noise,
        )
        self.num_envs = num_envs
        self.single_observation_space, self.single_action_space = cell_spaces(self.cell)
        self.observation_space = batch_space(self.single_observation_space, num_envs)
        self.action_space = batch_space(self.single_action_space, num_envs)
        self._uniforms = uniforms_per_episode(self.cell.max_items)
        self._state = CellState.empty(num_envs, self.cell.slots)
        self._scene_rngs: list[np.random.Generator | None] = [None] * num_envs
        self._noise_rng: np.random.Generator | None = None
        self._autoreset = np.zeros(num_envs, dtype=bool)
        self._all_true = np.ones(num_envs, dtype=bool)

    def _start_episodes(self, rows: np.ndarray) -> None:
        uniforms = np.stack([self._scene_rngs[i].random(self._uniforms) for i in rows])
        self._state.place(rows, draw_layout(uniforms, self.cell.max_items, self.cell.resolved))

    def _observe(self) -> np.ndarray:
        noise = None
        if self.cell.sensor_noise > 0.0:
            shape = (self.num_envs, self.cell.slots, 2)
            noise = self._noise_rng.normal(0.0, self.cell.sensor_noise, shape)
        return observe(self._state, self.cell, noise)

    def reset(
        self,
        *,
        seed: int | list[int | None] | None = None,
        options: dict[str, Any] | None = None,
    ) -> tuple[np.ndarray, dict[str, Any]]:
        """Reset every sub-env, or those in ``options["reset_mask"]`` (bool [N])."""
        if seed is None:
            seeds: list[int | None] = [None] * self.num_envs
        elif isinstance(seed, int):
            seeds = [seed + i for i in range(self.num_envs)]
        else:
            seeds = list(seed)
            if len(seeds) != self.num_envs:
                raise ValueError(
                    f"seed: got a list of {len(seeds)} seeds, expected {self.num_envs} (num_envs)"
                )
        mask = self._all_true
        if options is not None and "reset_mask" in options:
            mask = np.asarray(options["reset_mask"], dtype=bool)
            if mask.shape != (self.num_envs,):
                raise ValueError(
                    f"options['reset_mask']: got shape {mask.shape}, expected ({self.num_envs},)"
                )
        rows = np.flatnonzero(mask)
        for i in rows:
            if seeds[i] is not None or self._scene_rngs[i] is None:
                self._scene_rngs[i], _ = seeding.np_random(seeds[i])
        if self._noise_rng is None or seed is not None:
            first = next((s for s in seeds if s is not None), None)
            self._noise_rng = noise_generator(first)
        self._start_episodes(rows)
        self._autoreset[rows] = False
        info = {"is_success": np.zeros(self.num_envs, dtype=bool), "_is_success": mask.copy()}
        return self._observe(), info

    def step(
        self, actions: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
        """Step every sub-env; those that ended on the previous step start a new episode
        instead (their action is ignored, reward 0, flags False)."""
        actions = np.asarray(actions)
        if actions.shape != (self.num_envs, 4):
            raise ValueError(f"actions: got shape {actions.shape}, expected ({self.num_envs}, 4)")
        restart = np.flatnonzero(self._autoreset)
        # Every row is advanced; restarting rows are then overwritten by their new episode.
        reward, success = advance(self._state, actions, self.cell)
        terminated = success
        truncated = ~terminated & (self._state.steps >= self.cell.horizon)
        if restart.size:
            self._start_episodes(restart)
            reward[restart] = 0.0
            terminated[restart] = False
            truncated[restart] = False
        self._autoreset = terminated | truncated
        info = {"is_success": terminated.copy(), "_is_success": self._all_true.copy()}
        return self._observe(), reward, terminated, truncated, info

    def render(self) -> tuple[np.ndarray, ...] | None:
        """One top-down frame per sub-env (None without render_mode)."""
        if self.render_mode is None:
            return None
        return tuple(
            draw_frame(self._state.select(slice(i, i + 1)), self.cell)
            for i in range(self.num_envs)
        )
