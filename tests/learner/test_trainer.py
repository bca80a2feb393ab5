"""The Trainer: divergence stops training and keeps the last checkpoint; anchors hold weights."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest
import torch

from qadapt.checkpoint import CheckpointMetadata, load_checkpoint
from qadapt.learner import FittedQLearner, LearnerConfig, TrainingDiverged, TransitionArrays
from qadapt.learner.trainer import Trainer, TrainingPlan
from qadapt.maximize import CrossEntropyMaximizer
from qadapt.nets import CriticPair, QNetworkConfig, build_q_network

from .test_resume import _batches, _problem


class ListSampler:
    def __init__(self, batches):
        self.batches, self.drawn = batches, 0

    def sample(self):
        self.drawn += 1
        return self.batches[(self.drawn - 1) % len(self.batches)]

    def state_dict(self):
        return {"drawn": self.drawn}

    def load_state_dict(self, state):
        self.drawn = state["drawn"]


def _learner(arrays, **overrides):
    config = QNetworkConfig(torso=(16,), head=(8,))
    critics = CriticPair(lambda: build_q_network(6, -torch.ones(2), torch.ones(2), config),
                         seed=0)
    cem = CrossEntropyMaximizer([-1, -1], [1, 1], samples=8, elites=2, iterations=1)
    settings = dict(batch_size=32, refresh_every=10)
    settings.update(overrides)
    return FittedQLearner(critics, cem, LearnerConfig(**settings),
                          [TransitionArrays(**arrays)], seed=0)


def _metadata():
    return CheckpointMetadata(
        observation_space=gym.spaces.Box(-np.inf, np.inf, (6,), np.float32),
        action_space=gym.spaces.Box(-1.0, 1.0, (2,), np.float32),
        network={"q_network": {}}, env_id="none", gradient_step=0, config_digest="x" * 64,
    )


def test_divergence_stops_with_the_step_and_keeps_the_last_checkpoint(tmp_path):
    arrays = _problem()
    learner = _learner(arrays, q_limit=0.5, learning_rate=0.05)
    sampler = ListSampler(list(_batches(arrays, 50, seed=0)))
    trainer = Trainer(learner, sampler, TrainingPlan(steps=2000, checkpoint_every=5,
                                                     progress_bar=False), tmp_path, _metadata())
    with pytest.raises(TrainingDiverged) as err:
        trainer.run()
    message = str(err.value)
    assert f"gradient step {err.value.step}" in message and "is kept at" in message
    # The kept checkpoint is the last one written before the guard fired, and it loads
    # (every file's checksum verified).
    loaded = load_checkpoint(trainer.last_path, load_training_state=True)
    assert loaded.metadata.gradient_step == (err.value.step // 5) * 5
    assert loaded.training_state["learner"]["step"] == loaded.metadata.gradient_step


def test_anchor_penalty_holds_weights_near_the_anchor():
    arrays = _problem()
    free = _learner(arrays, learning_rate=1e-2)
    anchor = {k: v.detach().clone() for k, v in free.critics.online[0].named_parameters()}
    config = QNetworkConfig(torso=(16,), head=(8,))
    critics = CriticPair(lambda: build_q_network(6, -torch.ones(2), torch.ones(2), config),
                         seed=0)
    cem = CrossEntropyMaximizer([-1, -1], [1, 1], samples=8, elites=2, iterations=1)
    held = FittedQLearner(critics, cem, LearnerConfig(batch_size=32, refresh_every=10,
                                                      learning_rate=1e-2, anchor_weight=10.0),
                          [TransitionArrays(**arrays)], seed=0, anchor=anchor)
    for batch in _batches(arrays, 60, seed=3):
        free.update(batch)
        held.update(batch)

    def distance(learner):
        params = dict(learner.critics.online[0].named_parameters())
        return sum(float((params[k].detach() - v).pow(2).sum()) for k, v in anchor.items())

    assert distance(held) < 0.2 * distance(free)
