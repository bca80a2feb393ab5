"""Pretraining on scripted-picker data gives a greedy policy that beats the scripted picker.

The comparison is a one-sided Fisher exact test on success counts (scipy.stats.fisher_exact,
a general-purpose reference library): the greedy CEM policy of the pretrained Q-function in
the base cell against the very controller (same noise) that collected its training data.
"""

from __future__ import annotations

import gymnasium as gym
import pytest
from scipy.stats import fisher_exact

import demo_envs
from demo_envs.pick_cell import ScriptedPicker
from qadapt.data import MixtureSampler, collect, open_dataset
from qadapt.learner import FittedQLearner, LearnerConfig, QPolicy
from qadapt.learner.assembly import new_critics, observation_statistics, transition_arrays
from qadapt.maximize import CrossEntropyMaximizer
from qadapt.nets import QNetworkConfig
from qadapt.rollout import run_episodes

EPISODES = 400


@pytest.mark.slow
def test_pretrained_greedy_policy_beats_the_data_collector(tmp_path):
    envs = gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=256)
    collect(envs, ScriptedPicker(noise=0.15, seed=0), episodes=1500, out=tmp_path / "prior",
            seed=0, env_record={"id": demo_envs.PICK_CELL_ID, "kwargs": {}, "wrappers": []},
            progress=False)
    dataset = open_dataset(tmp_path / "prior")
    arrays = [transition_arrays(dataset)]
    critics = new_critics(61, [-1.0] * 4, [1.0] * 4, QNetworkConfig(), seed=0,
                          statistics=observation_statistics(arrays))
    cem = CrossEntropyMaximizer([-1.0] * 4, [1.0] * 4)
    # The measured defaults (configs/learner/conservative.yaml).
    config = LearnerConfig(conservative_weight=1.0, conservative_samples=32,
                           conservative_maximum="online")
    learner = FittedQLearner(critics, cem, config, arrays, seed=0)
    sampler = MixtureSampler([dataset], batch_size=256, seed=0)
    for _ in range(3000):
        learner.update(sampler.sample())

    evaluation = gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=EPISODES)
    learned = run_episodes(evaluation, QPolicy(learner.acting_network(), cem, seed=1), seed=7)
    scripted = run_episodes(evaluation, ScriptedPicker(noise=0.15, seed=1), seed=7)
    table = [[learned.successes, EPISODES - learned.successes],
             [scripted.successes, EPISODES - scripted.successes]]
    _, p_value = fisher_exact(table, alternative="greater")
    assert p_value < 0.01, (learned.successes, scripted.successes)
