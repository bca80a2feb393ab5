"""A hand-written pick-cell controller, used to make prior datasets and to calibrate variations.

Holds:
    ScriptedPicker -- move over the nearest parcel, descend, close, lift; with exploration noise.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from demo_envs.pick_cell import settings as geo
from demo_envs.pick_cell.observation import GRIPPER_COLUMNS, SLOT_COLUMNS

_G = len(GRIPPER_COLUMNS)
_REL, _WIDTH, _HEIGHT, _ABOVE = 0, 2, 3, 4


class ScriptedPicker:
    """Batched controller: obs [N, D] -> actions [N, 4], in the pick cell's action space.

    It targets slot 0 (the nearest detection) and trusts what it is told: it centres the
    reported finger position over the reported parcel centre (descending once within
    ``centring_tolerance`` widths of it), brings the reported tip to ``aim`` of the parcel's
    height (the middle of the grasp window), closes once within ``height_tolerance`` heights
    of that, then lifts. A
    failed grasp makes it open and try again. Gaussian noise of standard deviation ``noise``
    is added to every action component (then clipped), and with probability ``random_rate``
    an action is replaced by a uniform random one.

    Example:
        >>> import gymnasium as gym, demo_envs
        >>> envs = gym.make_vec("demo_envs/PickCell-v0", num_envs=2)
        >>> obs, _ = envs.reset(seed=0)
        >>> ScriptedPicker(noise=0.0).act(obs).shape
        (2, 4)
    """

    def __init__(
        self,
        noise: float = 0.15,
        random_rate: float = 0.0,
        seed: int | None = None,
        aim: float = 0.65,
        centring_tolerance: float = 0.25,
        height_tolerance: float = 0.1,
    ) -> None:
        for name, value, low, high in (
            ("noise", noise, 0.0, 2.0),
            ("random_rate", random_rate, 0.0, 1.0),
            ("aim", aim, 0.0, 1.0),
            ("centring_tolerance", centring_tolerance, 0.0, 0.5),
            ("height_tolerance", height_tolerance, 0.0, 0.5),
        ):
            if not (isinstance(value, int | float) and low <= float(value) <= high):
                raise ValueError(f"{name}: got {value!r}, expected a number in [{low}, {high}]")
        self.noise = float(noise)
        self.random_rate = float(random_rate)
        self.aim = float(aim)
        self.centring_tolerance = float(centring_tolerance)
        self.height_tolerance = float(height_tolerance)
        self.seed = seed
        self._rng = np.random.default_rng(seed)

    def describe(self) -> dict[str, Any]:
        """What made the data, for dataset provenance."""
        return {
            "kind": "scripted",
            "noise": self.noise,
            "random_rate": self.random_rate,
            "aim": self.aim,
            "centring_tolerance": self.centring_tolerance,
            "height_tolerance": self.height_tolerance,
            "seed": self.seed,
        }

    def reseed(self, seed: int) -> None:
        """Restart the noise stream from ``seed`` (collectors call this per chunk)."""
        self._rng = np.random.default_rng(seed)

    def state_dict(self) -> dict[str, Any]:
        return {"rng": self._rng.bit_generator.state}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self._rng.bit_generator.state = state["rng"]

    def act(self, observations: np.ndarray) -> np.ndarray:
        obs = np.asarray(observations, dtype=np.float64)
        n = obs.shape[0]
        opening = obs[:, 3] > 0.5
        holding = obs[:, 4] > 0.5
        target = obs[:, _G : _G + len(SLOT_COLUMNS)]
        rel = target[:, _REL : _REL + 2]
        descend = -(target[:, _ABOVE] + (1.0 - self.aim) * target[:, _HEIGHT])

        action = np.zeros((n, 4))
        action[:, :2] = np.clip(rel / geo.PLANAR_STEP, -1.0, 1.0)
        width = target[:, _WIDTH]
        centred = np.hypot(rel[:, 0], rel[:, 1]) <= self.centring_tolerance * width
        at_height = np.abs(descend) <= self.height_tolerance * target[:, _HEIGHT]
        action[:, 2] = np.where(centred, np.clip(descend / geo.VERTICAL_STEP, -1.0, 1.0), 0.0)
        action[:, 3] = np.where(centred & at_height, 1.0, -1.0)
        # Holding: keep the fingers shut and lift straight up.
        action[holding] = (0.0, 0.0, 1.0, 1.0)
        # Closed on nothing: open and back off upwards, then try again.
        missed = ~opening & ~holding
        action[missed] = (0.0, 0.0, 1.0, -1.0)

        if self.noise > 0.0:
            action += self._rng.normal(0.0, self.noise, action.shape)
        if self.random_rate > 0.0:
            swap = self._rng.random(n) < self.random_rate
            action[swap] = self._rng.uniform(-1.0, 1.0, (int(swap.sum()), 4))
        return np.clip(action, -1.0, 1.0).astype(np.float32)
