"""Bootstrapped targets for fitted Q-iteration, per batch or cached for every transition.

Holds:
    TransitionArrays -- the arrays of one data source the learner reads (numpy or memory-mapped).
    bootstrap_values -- min over the two target critics of Q(s', a*), a* from the maximiser.
    td_targets -- r + gamma * (1 - terminated) * bootstrap (truncation still bootstraps).
    TargetCache -- targets for every transition of every source, recomputed on refresh.

A refresh runs the maximiser over all next states once (in chunks, warm-started from the last
refresh's actions), so a gradient step only looks targets up instead of running CEM for its
batch: this is what makes the learner's step cost close to a bare network update.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import torch

from qadapt.maximize import ActionMaximizer
from qadapt.nets import CriticPair


@dataclass(frozen=True)
class TransitionArrays:
    """One source's transitions: ``observations``, ``next_observations`` [T, D];
    ``actions`` [T, A]; ``rewards``, ``terminated`` [T]. Arrays may be memory-mapped."""

    observations: np.ndarray
    actions: np.ndarray
    rewards: np.ndarray
    next_observations: np.ndarray
    terminated: np.ndarray

    def __len__(self) -> int:
        return int(self.rewards.shape[0])


def _tensor(array: np.ndarray) -> torch.Tensor:
    return torch.from_numpy(np.ascontiguousarray(array, dtype=np.float32))


@torch.no_grad()
def bootstrap_values(
    critics: CriticPair,
    maximizer: ActionMaximizer,
    next_observations: torch.Tensor,
    generator: torch.Generator,
    initial: torch.Tensor | None = None,
) -> tuple[torch.Tensor, torch.Tensor]:
    """(values [B], actions [B, A]): a* maximises target critic 0; the value is the smaller of
    the two target critics' Q at a* (clipped double-Q)."""
    first, second = critics.target
    code = first.encode(next_observations)
    best = maximizer.maximize(
        lambda candidates: first.score(code, candidates),
        next_observations.shape[0],
        initial=initial,
        generator=generator,
    )
    other = second.score(second.encode(next_observations), best.actions[:, None, :])[:, 0]
    values = torch.minimum(first.value(best.values), second.value(other))
    return values, best.actions


def td_targets(
    rewards: torch.Tensor, terminated: torch.Tensor, bootstrap: torch.Tensor, gamma: float,
    reward_map: tuple[float, float] = (1.0, 0.0),
) -> torch.Tensor:
    """One-step targets; only termination stops bootstrapping, truncation does not."""
    scale, shift = reward_map
    if (scale, shift) != (1.0, 0.0):
        rewards = rewards * scale + shift
    return rewards + gamma * (1.0 - terminated) * bootstrap


class TargetCache:
    """Cached targets and maximiser actions for every transition of every source.

    ``state_actions`` (the maximiser's action at each transition's own state) is kept when
    ``with_state_actions`` is set: the conservative penalty pushes Q down there.

    Example:
        >>> cache = TargetCache([3, 5], action_dim=2)
        >>> cache.targets[1].shape
        torch.Size([5])
    """

    def __init__(
        self, sizes: Sequence[int], action_dim: int, with_state_actions: bool = False
    ) -> None:
        self.sizes = [int(n) for n in sizes]
        self.action_dim = int(action_dim)
        self.with_state_actions = with_state_actions
        self.targets = [torch.zeros(n) for n in self.sizes]
        self.next_actions = [torch.zeros(n, action_dim) for n in self.sizes]
        self.state_actions = [torch.zeros(n, action_dim) for n in self.sizes]
        self.refreshes = 0

    @torch.no_grad()
    def refresh(
        self,
        critics: CriticPair,
        maximizer: ActionMaximizer,
        sources: Sequence[TransitionArrays],
        gamma: float,
        generator: torch.Generator,
        chunk: int,
        clamp: tuple[float, float] | None = None,
        blend: float = 1.0,
        reward_map: tuple[float, float] = (1.0, 0.0),
    ) -> None:
        """Recompute every source's targets with the current target critics.

        With ``blend`` b < 1 the cache moves only part of the way: targets <- b * new +
        (1 - b) * old (the first refresh takes the new targets whole). This damps the
        period-two swings that replacing every target at once can set off.
        """
        warm = self.refreshes > 0
        keep = 1.0 - blend if warm else 0.0
        for s, source in enumerate(sources):
            for start in range(0, len(source), chunk):
                rows = slice(start, min(start + chunk, len(source)))
                values, actions = bootstrap_values(
                    critics, maximizer, _tensor(source.next_observations[rows]), generator,
                    initial=self.next_actions[s][rows] if warm else None,
                )
                y = td_targets(_tensor(source.rewards[rows]), _tensor(source.terminated[rows]),
                               values, gamma, reward_map)
                if clamp is not None:
                    y = y.clamp(*clamp)
                self.targets[s][rows] = keep * self.targets[s][rows] + (1.0 - keep) * y
                self.next_actions[s][rows] = actions
                if self.with_state_actions:
                    obs = _tensor(source.observations[rows])
                    first = critics.target[0]
                    code = first.encode(obs)
                    best = maximizer.maximize(
                        lambda candidates, code=code, first=first: first.score(code, candidates),
                        obs.shape[0],
                        initial=self.state_actions[s][rows] if warm else None,
                        generator=generator,
                    )
                    self.state_actions[s][rows] = best.actions
        self.refreshes += 1

    def lookup(
        self, source: torch.Tensor, rows: torch.Tensor
    ) -> tuple[torch.Tensor, torch.Tensor | None]:
        """Targets [B] (and state actions [B, A] if kept) for batch rows of given sources."""
        targets = torch.empty(rows.shape[0])
        state_actions = torch.empty(rows.shape[0], self.action_dim) if (
            self.with_state_actions) else None
        for s in range(len(self.sizes)):
            mask = source == s
            if mask.any():
                picked = rows[mask]
                targets[mask] = self.targets[s][picked]
                if state_actions is not None:
                    state_actions[mask] = self.state_actions[s][picked]
        return targets, state_actions

    def state_dict(self) -> dict:
        return {
            "sizes": list(self.sizes),
            "refreshes": self.refreshes,
            "targets": [t.clone() for t in self.targets],
            "next_actions": [a.clone() for a in self.next_actions],
            "state_actions": [a.clone() for a in self.state_actions],
        }

    def load_state_dict(self, state: dict) -> None:
        if list(state["sizes"]) != self.sizes:
            raise ValueError(
                f"target cache: saved for sources of sizes {state['sizes']}, "
                f"these sources have sizes {self.sizes}"
            )
        self.refreshes = int(state["refreshes"])
        self.targets = [t.clone() for t in state["targets"]]
        self.next_actions = [a.clone() for a in state["next_actions"]]
        self.state_actions = [a.clone() for a in state["state_actions"]]
