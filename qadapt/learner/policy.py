"""Acting with a Q-function: the greedy CEM policy, optionally with exploration noise.

Holds:
    QPolicy -- obs [N, D] -> actions [N, A] maximising Q, plus Gaussian and epsilon-random noise.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import torch
from torch import nn

from qadapt.maximize import ActionMaximizer


class QPolicy:
    """Batched policy over a Q-network (``encode``/``score`` interface).

    Args:
        network: the Q-network to act with.
        maximizer: the action maximiser (CEM for Box actions).
        seed: seed of the policy's own random stream.
        gaussian_std: std of Gaussian noise added to the greedy action, as a fraction of
            the half-range of each action dimension (0 = greedy); Box actions only.
        epsilon: probability of replacing an action by a uniform random one.
        provenance: extra facts for ``describe()`` (e.g. the checkpoint's hash).

    Example: see tests/learner/test_policy.py.
    """

    def __init__(
        self,
        network: nn.Module,
        maximizer: ActionMaximizer,
        seed: int = 0,
        gaussian_std: float = 0.0,
        epsilon: float = 0.0,
        provenance: dict[str, Any] | None = None,
    ) -> None:
        if not (gaussian_std >= 0.0):
            raise ValueError(f"gaussian_std: got {gaussian_std!r}, expected a number >= 0")
        if not (0.0 <= epsilon <= 1.0):
            raise ValueError(f"epsilon: got {epsilon!r}, expected a number in [0, 1]")
        self.network = network
        self.maximizer = maximizer
        self.gaussian_std = float(gaussian_std)
        self.epsilon = float(epsilon)
        self.seed = seed
        self.provenance = dict(provenance or {})
        self.generator = torch.Generator().manual_seed(int(seed))
        self._low = (network.action_centre - network.action_half_range).clone()
        self._high = (network.action_centre + network.action_half_range).clone()
        # A maximiser over a finite set (a Discrete space's choices): random actions are drawn
        # from that set, and Gaussian noise, which would leave it, does not apply (describe()
        # then reports a std of 0; epsilon is the exploration there).
        self._choices = getattr(maximizer, "candidates", None)
        if self._choices is not None:
            self.gaussian_std = 0.0

    def describe(self) -> dict[str, Any]:
        return {
            "kind": "q_policy",
            "gaussian_std": self.gaussian_std,
            "epsilon": self.epsilon,
            "seed": self.seed,
            **self.provenance,
        }

    @torch.no_grad()
    def act(self, observations: np.ndarray) -> np.ndarray:
        obs = torch.as_tensor(np.asarray(observations, dtype=np.float32))
        code = self.network.encode(obs)
        best = self.maximizer.maximize(
            lambda c: self.network.score(code, c), obs.shape[0], generator=self.generator
        )
        actions = best.actions
        if self.gaussian_std > 0:
            noise = torch.randn(actions.shape, generator=self.generator)
            actions = actions + noise * self.gaussian_std * self.network.action_half_range
        if self.epsilon > 0:
            swap = torch.rand(actions.shape[0], generator=self.generator) < self.epsilon
            if self._choices is not None:
                pick = torch.randint(len(self._choices), (actions.shape[0],),
                                     generator=self.generator)
                uniform = self._choices[pick]
            else:
                uniform = self._low + (self._high - self._low) * torch.rand(
                    actions.shape, generator=self.generator
                )
            actions = torch.where(swap[:, None], uniform, actions)
        return torch.clamp(actions, self._low, self._high).numpy()

    def reseed(self, seed: int) -> None:
        """Restart the policy's random stream from ``seed`` (collectors call this per chunk)."""
        self.generator = torch.Generator().manual_seed(int(seed))

    def state_dict(self) -> dict:
        return {"generator": self.generator.get_state()}

    def load_state_dict(self, state: dict) -> None:
        self.generator.set_state(state["generator"])
