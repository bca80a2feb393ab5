"""Shared pieces of the init-strategy tests: a small written dataset, base weights, a start.

Holds:
    OBS_DIM, ACT_DIM, NETWORK -- the problem's sizes and a small late-fusion network.
    write_dataset -- write step arrays as a real replay dataset (DatasetWriter), open it.
    problem_dataset -- 512 rows of the learner tests' problem in episodes of 8 steps.
    base_weights -- a "pretrained" checkpoint's weights: seeded critics moved by noise, with
        targets unlike their online critics and normaliser statistics unlike the data's.
    start -- fresh critics set up by a strategy the way ``qadapt finetune`` does it.
"""

from __future__ import annotations

from pathlib import Path

import gymnasium as gym
import numpy as np
import torch

from qadapt.data import DatasetWriter, open_dataset
from qadapt.learner.assembly import new_critics, observation_statistics, transition_arrays
from qadapt.learner.init import InitContext, InitSettings, RegressionSettings, init_strategy
from qadapt.nets import CriticPair, QNetworkConfig, build_q_network

from .test_resume import _problem

OBS_DIM, ACT_DIM = 6, 2
NETWORK = QNetworkConfig(torso=(32,), head=(16, 16))
BASE_MEAN, BASE_STD = 0.5, 2.0


def write_dataset(out: Path, arrays: dict[str, np.ndarray], lengths: np.ndarray):
    """A verified ReplayDataset holding ``arrays`` (the six step fields) in episodes of
    ``lengths``."""
    obs_dim, act_dim = arrays["observations"].shape[1], arrays["actions"].shape[1]
    writer = DatasetWriter(
        out, environment={"id": "synthetic", "kwargs": {}, "wrappers": []},
        observation_space=gym.spaces.Box(-np.inf, np.inf, (obs_dim,), np.float32),
        action_space=gym.spaces.Box(-1.0, 1.0, (act_dim,), np.float32),
        collected_by={"kind": "synthetic", "note": "init-strategy tests"}, seed=0)
    writer.add_episodes(**arrays, episode_lengths=np.asarray(lengths))
    writer.finish()
    return open_dataset(out)


def problem_dataset(out: Path):
    """The learner tests' 512-row problem as a dataset: 64 episodes of 8 steps, the even
    ones terminated, the odd ones truncated; rewards follow the first observation column so
    that the return-to-go can be learnt."""
    arrays = _problem()
    arrays["rewards"] = (arrays["observations"][:, 0] > 0.5).astype(np.float32)
    ends = np.zeros(512, dtype=bool)
    ends[7::8] = True
    even = (np.arange(512) // 8) % 2 == 0
    arrays["terminated"] = ends & even
    arrays["truncated"] = ends & ~even
    return write_dataset(out, arrays, np.full(64, 8))


def base_weights() -> dict[str, torch.Tensor]:
    base = CriticPair(lambda: build_q_network(OBS_DIM, -torch.ones(ACT_DIM),
                                              torch.ones(ACT_DIM), NETWORK), seed=0)
    g = torch.Generator().manual_seed(1)
    with torch.no_grad():
        for param in base.parameters():  # online and target, each its own noise
            param.add_(0.1 * torch.randn(param.shape, generator=g))
        for net in [*base.online, *base.target]:
            net.set_normalizer(torch.full((OBS_DIM,), BASE_MEAN), torch.full((OBS_DIM,), BASE_STD))
    return {f"critics.{k}": v.clone() for k, v in base.state_dict().items()}


def start(name: str, dataset, weights, seed: int = 3, regression_steps: int = 30):
    """(strategy, critics, outcome) as ``qadapt finetune`` would set them up."""
    settings = InitSettings(name=name, regression=RegressionSettings(
        steps=regression_steps, learning_rate=3e-3, batch_size=64))
    strategy = init_strategy(settings)
    statistics = (None if strategy.uses_base_statistics
                  else observation_statistics([transition_arrays(dataset)]))
    critics = new_critics(OBS_DIM, -np.ones(ACT_DIM), np.ones(ACT_DIM), NETWORK, seed=seed,
                          statistics=statistics)
    outcome = strategy.initialise(InitContext(critics=critics, base_weights=weights,
                                              where="base", prior=[dataset], gamma=0.9,
                                              seed=seed))
    return strategy, critics, outcome
