"""What the collector needs from a policy, and the uniform random policy.

Holds:
    Policy -- the protocol: ``act(observations [N, obs_dim]) -> actions [N, act_dim]`` and
        ``describe() -> dict`` (JSON provenance); optionally ``reseed(seed)``.
    UniformRandomPolicy -- actions drawn uniformly from a Box or Discrete action space.
"""

from __future__ import annotations

from typing import Any, Protocol, runtime_checkable

import gymnasium
import numpy as np

from qadapt.errors import BadInput
from qadapt.spaces import BoxDescription, describe_space


@runtime_checkable
class Policy(Protocol):
    """A policy the collector can run.

    ``act`` maps a batch of observations ``[N, obs_dim]`` (float32) to actions ``[N, act_dim]``
    (for a Discrete space ``act_dim`` is 1 and the value is the integer action). ``describe``
    returns a JSON object with a string ``kind`` that is recorded as the dataset's provenance.
    A stochastic policy should also offer ``reseed(seed: int)``: the collector reseeds it at
    every chunk so that a resumed collection repeats an uninterrupted one exactly.
    """

    def act(self, observations: np.ndarray) -> np.ndarray: ...

    def describe(self) -> dict[str, Any]: ...


class UniformRandomPolicy:
    """Draws every action uniformly from ``action_space`` (Box bounds must be finite).

    Example:
        >>> policy = UniformRandomPolicy(gymnasium.spaces.Box(-1.0, 1.0, (2,)), seed=0)
        >>> policy.act(np.zeros((3, 5), np.float32)).shape
        (3, 2)
        >>> policy.describe()
        {'kind': 'random', 'distribution': 'uniform', 'seed': 0}
    """

    def __init__(self, action_space: gymnasium.Space, seed: int) -> None:
        if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
            raise BadInput(f"seed: got {seed!r}, expected a non-negative integer")
        self.space = describe_space(action_space, role="action space")
        if isinstance(self.space, BoxDescription):
            self._low = np.asarray(self.space.low, dtype=np.float64)
            self._high = np.asarray(self.space.high, dtype=np.float64)
            if not (np.isfinite(self._low).all() and np.isfinite(self._high).all()):
                raise BadInput(
                    "action_space: a uniform random policy needs finite Box bounds, got "
                    f"low={list(self.space.low)}, high={list(self.space.high)}"
                )
        self.seed = seed
        self._rng = np.random.default_rng(seed)

    def act(self, observations: np.ndarray) -> np.ndarray:
        """Actions ``[N, act_dim]`` float32 for a batch of ``N`` observations."""
        count = int(np.shape(observations)[0])
        if isinstance(self.space, BoxDescription):
            draws = self._rng.uniform(self._low, self._high, size=(count, self.space.width))
            # float64 draws below `high` never round above it: the bounds are float32 values.
            return draws.astype(np.float32)
        choices = self._rng.integers(self.space.start, self.space.start + self.space.n, count)
        return choices.astype(np.float32).reshape(count, 1)

    def describe(self) -> dict[str, Any]:
        return {"kind": "random", "distribution": "uniform", "seed": self.seed}

    def reseed(self, seed: int) -> None:
        """Restart the random stream from ``seed`` (the collector calls this per chunk)."""
        self._rng = np.random.default_rng(seed)

    def state_dict(self) -> dict[str, Any]:
        return {"seed": self.seed, "generator": self._rng.bit_generator.state}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.seed = int(state["seed"])
        self._rng = np.random.default_rng()
        self._rng.bit_generator.state = state["generator"]
