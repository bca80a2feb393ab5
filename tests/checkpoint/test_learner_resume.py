"""A FittedQLearner saved to a training checkpoint mid-run and restored into a fresh learner
finishes bit-for-bit like the uninterrupted run."""

from __future__ import annotations

import numpy as np
import pytest
import torch

from qadapt.checkpoint import load_checkpoint, save_checkpoint
from qadapt.data.sampling.batch import ReplayBatch
from qadapt.learner import FittedQLearner, LearnerConfig, TransitionArrays
from qadapt.maximize import CrossEntropyMaximizer
from qadapt.nets import CriticPair, QNetworkConfig, build_q_network

from .conftest import make_metadata

ROWS, OBS_DIM, ACT_DIM, BATCH = 512, 6, 2, 32
NETWORK = QNetworkConfig(torso=(32,), head=(16, 16))


def _problem() -> dict[str, np.ndarray]:
    """Invented transitions (test data only)."""
    rng = np.random.default_rng(0)
    return {
        "observations": rng.normal(size=(ROWS, OBS_DIM)).astype(np.float32),
        "actions": rng.uniform(-1, 1, (ROWS, ACT_DIM)).astype(np.float32),
        "rewards": (rng.random(ROWS) < 0.2).astype(np.float32),
        "next_observations": rng.normal(size=(ROWS, OBS_DIM)).astype(np.float32),
        "terminated": (rng.random(ROWS) < 0.2).astype(np.float32),
    }


def _learner(arrays, target_mode: str, seed: int) -> FittedQLearner:
    make = lambda: build_q_network(OBS_DIM, -torch.ones(ACT_DIM), torch.ones(ACT_DIM),  # noqa: E731
                                   NETWORK)
    settings = dict(refresh_every=7, conservative_weight=0.5, ema_decay=0.9, batch_size=BATCH,
                    target_mode=target_mode)
    if target_mode == "per_batch":
        settings["target_update"] = "polyak"
    cem = CrossEntropyMaximizer([-1, -1], [1, 1], samples=16, elites=4, iterations=2)
    return FittedQLearner(CriticPair(make, seed=seed), cem, LearnerConfig(**settings),
                          [TransitionArrays(**arrays)], seed=seed + 2)


def _train(learner: FittedQLearner, arrays, rows_rng: np.random.Generator, steps: int) -> None:
    """``steps`` updates on batches whose rows come from ``rows_rng`` (saved with the state)."""
    table = {k: torch.from_numpy(v) for k, v in arrays.items()}
    for _ in range(steps):
        rows = torch.from_numpy(rows_rng.integers(0, ROWS, BATCH))
        learner.update(ReplayBatch(**{k: v[rows] for k, v in table.items()},
                                   truncated=torch.zeros(BATCH),
                                   source_index=torch.zeros(BATCH, dtype=torch.long),
                                   row_index=rows))


def _checkpoint_weights(learner: FittedQLearner) -> dict[str, torch.Tensor]:
    weights = {f"critics.{k}": v for k, v in learner.critics.state_dict().items()}
    weights.update({f"acting.{k}": v for k, v in learner.acting_network().state_dict().items()})
    return weights


@pytest.mark.parametrize("target_mode", ["refresh", "per_batch"])
def test_resume_from_a_training_checkpoint_is_bit_identical(tmp_path, target_mode):
    arrays = _problem()
    straight = _learner(arrays, target_mode, seed=3)
    _train(straight, arrays, np.random.default_rng(11), 40)

    first = _learner(arrays, target_mode, seed=3)
    rows_rng = np.random.default_rng(11)
    _train(first, arrays, rows_rng, 23)
    info = save_checkpoint(
        tmp_path / "step-23",
        _checkpoint_weights(first),
        make_metadata(OBS_DIM, ACT_DIM, network=NETWORK.to_dict(), gradient_step=first.step),
        training_state={"learner": first.state_dict(), "rows": rows_rng.bit_generator.state},
    )
    del first, rows_rng

    loaded = load_checkpoint(tmp_path / "step-23", load_training_state=True)
    assert loaded.identity == info.identity and loaded.metadata.gradient_step == 23
    # A differently seeded learner: anything the checkpoint failed to restore would show.
    resumed = _learner(arrays, target_mode, seed=97)
    resumed.load_state_dict(loaded.training_state["learner"])
    rows_rng = np.random.default_rng()
    rows_rng.bit_generator.state = loaded.training_state["rows"]
    _train(resumed, arrays, rows_rng, 40 - 23)

    assert resumed.step == straight.step == 40
    for (name, a), (_, b) in zip(straight.critics.state_dict().items(),
                                 resumed.critics.state_dict().items(), strict=True):
        assert torch.equal(a, b), name
    for a, b in zip(straight.ema.parameters(), resumed.ema.parameters(), strict=True):
        assert torch.equal(a, b)
    straight_moments = straight.optimizer.state_dict()["state"]
    for key, moments in resumed.optimizer.state_dict()["state"].items():
        assert torch.equal(moments["exp_avg_sq"], straight_moments[key]["exp_avg_sq"])


def test_the_weights_file_alone_rebuilds_the_acting_network(tmp_path):
    arrays = _problem()
    learner = _learner(arrays, "refresh", seed=3)
    _train(learner, arrays, np.random.default_rng(5), 9)
    save_checkpoint(tmp_path / "c", _checkpoint_weights(learner),
                    make_metadata(OBS_DIM, ACT_DIM, network=NETWORK.to_dict(), gradient_step=9))
    loaded = load_checkpoint(tmp_path / "c")
    config = QNetworkConfig(**{k: tuple(v) if isinstance(v, list) else v
                               for k, v in loaded.metadata.network.items()})
    net = build_q_network(OBS_DIM, -torch.ones(ACT_DIM), torch.ones(ACT_DIM), config)
    net.load_state_dict({k.removeprefix("acting."): v for k, v in loaded.weights.items()
                         if k.startswith("acting.")})
    obs, act = torch.from_numpy(arrays["observations"][:8]), torch.from_numpy(arrays["actions"][:8])
    with torch.no_grad():
        assert torch.equal(net(obs, act), learner.acting_network()(obs, act))
