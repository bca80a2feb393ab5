"""Running a batched policy for one episode in every sub-env of a gymnasium vector env.

Holds:
    EpisodeResults -- per-episode successes, returns and lengths of one batched rollout.
    run_episodes -- run one episode per sub-env and collect its results.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import gymnasium as gym
import numpy as np

from qadapt.spaces import env_actions


class BatchPolicy(Protocol):
    def act(self, observations: np.ndarray) -> np.ndarray: ...


@dataclass(frozen=True)
class EpisodeResults:
    """Raw per-episode figures: ``success`` [E] bool, ``returns`` [E], ``lengths`` [E] int;
    ``success_reported``: the env reported ``is_success`` at all (else success is unknown and
    ``success`` all False)."""

    success: np.ndarray
    returns: np.ndarray
    lengths: np.ndarray
    success_reported: bool = True

    @property
    def successes(self) -> int:
        return int(self.success.sum())

    @property
    def episodes(self) -> int:
        return int(self.success.size)


def run_episodes(
    envs: gym.vector.VectorEnv, policy: BatchPolicy, seed: int, max_steps: int = 10_000
) -> EpisodeResults:
    """Run the first episode of each of ``envs.num_envs`` sub-envs (reset with ``seed``).

    Success is read from ``info["is_success"]`` where the env reports it, otherwise it is
    unknown and reported as False. Raises RuntimeError if an episode outlasts ``max_steps``.
    """
    n = envs.num_envs
    obs, _ = envs.reset(seed=seed)
    running = np.ones(n, dtype=bool)
    success = np.zeros(n, dtype=bool)
    reported_any = False
    returns = np.zeros(n)
    lengths = np.zeros(n, dtype=np.int64)
    for _ in range(max_steps):
        actions = env_actions(envs.single_action_space, policy.act(obs))
        obs, reward, terminated, truncated, info = envs.step(actions)
        returns += np.where(running, reward, 0.0)
        lengths += running
        if "is_success" in info:
            reported = np.asarray(info["is_success"], dtype=bool) & info["_is_success"]
            success |= running & reported
            reported_any = True
        running &= ~(terminated | truncated)
        if not running.any():
            return EpisodeResults(success=success, returns=returns, lengths=lengths,
                                  success_reported=reported_any)
    raise RuntimeError(f"episodes still running after max_steps={max_steps}")
