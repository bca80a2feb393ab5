"""A learner restored from its state dict continues exactly like the uninterrupted one."""

from __future__ import annotations

import copy

import numpy as np
import pytest
import torch

from qadapt.learner import FittedQLearner, LearnerConfig, TrainingDiverged, TransitionArrays
from qadapt.maximize import CrossEntropyMaximizer
from qadapt.nets import CriticPair, QNetworkConfig, build_q_network

from .test_fixed_points import FullBatch


def _problem(seed: int = 0) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    n = 512
    return {
        "observations": rng.normal(size=(n, 6)).astype(np.float32),
        "actions": rng.uniform(-1, 1, (n, 2)).astype(np.float32),
        "rewards": (rng.random(n) < 0.2).astype(np.float32),
        "next_observations": rng.normal(size=(n, 6)).astype(np.float32),
        "terminated": (rng.random(n) < 0.2).astype(np.float32),
    }


def _learner(arrays, **overrides) -> FittedQLearner:
    config = QNetworkConfig(torso=(32,), head=(16, 16))
    make = lambda: build_q_network(6, -torch.ones(2), torch.ones(2), config)  # noqa: E731
    critics = CriticPair(make, seed=3)
    settings = dict(refresh_every=7, conservative_weight=0.5, ema_decay=0.9, batch_size=32)
    settings.update(overrides)
    cem = CrossEntropyMaximizer([-1, -1], [1, 1], samples=16, elites=4, iterations=2)
    return FittedQLearner(critics, cem, LearnerConfig(**settings), [TransitionArrays(**arrays)],
                          seed=5)


def _batches(arrays, count, seed):
    g = torch.Generator().manual_seed(seed)
    t = {k: torch.from_numpy(v) for k, v in arrays.items()}
    for _ in range(count):
        rows = torch.randint(0, 512, (32,), generator=g)
        yield FullBatch(**{k: v[rows] for k, v in t.items()},
                        source_index=torch.zeros(32, dtype=torch.long), row_index=rows)


@pytest.mark.parametrize("target_mode", ["refresh", "per_batch"])
def test_resumed_learner_matches_uninterrupted_bit_for_bit(target_mode):
    arrays = _problem()
    extra = {} if target_mode == "refresh" else {"target_update": "polyak"}
    batches = list(_batches(arrays, 40, seed=1))
    straight = _learner(arrays, target_mode=target_mode, **extra)
    for batch in batches:
        straight.update(batch)

    first = _learner(arrays, target_mode=target_mode, **extra)
    for batch in batches[:23]:
        first.update(batch)
    saved = copy.deepcopy(first.state_dict())
    resumed = _learner(arrays, target_mode=target_mode, **extra)
    resumed.load_state_dict(saved)
    for batch in batches[23:]:
        resumed.update(batch)

    assert resumed.step == straight.step == 40
    for (name, a), (_, b) in zip(straight.critics.state_dict().items(),
                                 resumed.critics.state_dict().items(), strict=True):
        assert torch.equal(a, b), name
    for a, b in zip(straight.ema.parameters(), resumed.ema.parameters(), strict=True):
        assert torch.equal(a, b)


def test_divergence_guard_names_the_step():
    arrays = _problem()
    arrays["rewards"][:] = np.nan
    learner = _learner(arrays, loss="mse", conservative_weight=0.0, refresh_every=1000)
    net = learner.critics.online[0]
    assert net.config.output == "sigmoid"
    with pytest.raises(TrainingDiverged, match="gradient step 0"):
        for batch in _batches(arrays, 3, seed=2):
            learner.update(batch)


def test_cross_entropy_needs_a_sigmoid_output():
    arrays = _problem()
    config = QNetworkConfig(torso=(8,), head=(8,), output="linear", initial_value=0.0)
    make = lambda: build_q_network(6, -torch.ones(2), torch.ones(2), config)  # noqa: E731
    with pytest.raises(ValueError, match="cross_entropy"):
        FittedQLearner(CriticPair(make, seed=0),
                       CrossEntropyMaximizer([-1, -1], [1, 1]), LearnerConfig(),
                       [TransitionArrays(**arrays)], seed=0)


def test_constant_observation_columns_keep_scale_one():
    config = QNetworkConfig(torso=(8,), head=(8,))
    net = build_q_network(3, -torch.ones(1), torch.ones(1), config)
    net.set_normalizer(torch.tensor([0.0, 5.0, 0.0]), torch.tensor([2.0, 0.0, 1e-9]))
    assert net.obs_std.tolist() == [2.0, 1.0, 1.0]
