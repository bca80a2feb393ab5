"""Putting a learner together from datasets: arrays, observation statistics, fresh critics.

Holds:
    transition_arrays -- a dataset's fields as the learner's TransitionArrays (memory maps).
    observation_statistics -- mean and std of observations over datasets, chunk by chunk.
    new_critics -- a seeded CriticPair with the normalisation statistics set.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch

from qadapt.learner.targets import TransitionArrays
from qadapt.nets import CriticPair, QNetworkConfig, build_q_network


def transition_arrays(dataset) -> TransitionArrays:
    """The learner's view of a ``ReplayDataset``: memory-mapped, nothing copied."""
    return TransitionArrays(
        observations=dataset.array("observations"),
        actions=dataset.array("actions"),
        rewards=dataset.array("rewards"),
        next_observations=dataset.array("next_observations"),
        terminated=dataset.array("terminated"),
    )


def observation_statistics(
    sources: Sequence[TransitionArrays], chunk: int = 65_536
) -> tuple[torch.Tensor, torch.Tensor]:
    """(mean [D], std [D]) of every observation of every source, in float64 sums per chunk
    so that memory-mapped data is never loaded whole."""
    total = 0
    first = sources[0].observations
    s1 = np.zeros(first.shape[1])
    s2 = np.zeros(first.shape[1])
    for source in sources:
        obs = source.observations
        for start in range(0, obs.shape[0], chunk):
            block = np.asarray(obs[start : start + chunk], dtype=np.float64)
            s1 += block.sum(axis=0)
            s2 += np.square(block).sum(axis=0)
            total += block.shape[0]
    mean = s1 / total
    var = np.maximum(s2 / total - mean**2, 0.0)
    return torch.from_numpy(mean.astype(np.float32)), torch.from_numpy(
        np.sqrt(var).astype(np.float32)
    )


def new_critics(
    obs_dim: int,
    action_low,
    action_high,
    config: QNetworkConfig,
    seed: int,
    statistics: tuple[torch.Tensor, torch.Tensor] | None = None,
) -> CriticPair:
    """Two freshly initialised critics (and targets) drawn from ``seed``."""
    low = torch.as_tensor(np.asarray(action_low, dtype=np.float32))
    high = torch.as_tensor(np.asarray(action_high, dtype=np.float32))
    critics = CriticPair(lambda: build_q_network(obs_dim, low, high, config), seed=seed)
    if statistics is not None:
        critics.online[0].set_normalizer(*statistics)
        critics.sync_normalizer()
    return critics
