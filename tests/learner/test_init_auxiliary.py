"""The auxiliary start: exact return-to-go targets, a regression that learns, a fresh head."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
import torch

from qadapt.errors import BadInput
from qadapt.learner.assembly import new_critics
from qadapt.learner.init import (
    InitContext,
    RegressionSettings,
    ReturnRegressionData,
    SupervisedTorso,
    discounted_return_to_go,
    episode_ends,
    fit_return_regression,
    network_part,
)

from .init_fixtures import NETWORK, OBS_DIM, base_weights, problem_dataset, start, write_dataset

# Three episodes, gamma 0.9, worked by hand with G_t = r_t + 0.9 * G_{t+1}:
#   A, 3 steps, terminated, rewards 1, 0, 2:  G = 1 + 0.9 * 1.8 = 2.62, 0 + 0.9 * 2 = 1.8, 2
#   B, 2 steps, truncated,  rewards 0.5, 1:   G = 0.5 + 0.9 * 1 = 1.4, 1
#   C, 2 steps, cut off (no flag; ends with the data), rewards 1, 1: G = 1.9, 1
# Truncation ends the sum just as termination does: nothing is bootstrapped past the data.
REWARDS = np.array([1.0, 0.0, 2.0, 0.5, 1.0, 1.0, 1.0], dtype=np.float32)
TERMINATED = np.array([0, 0, 1, 0, 0, 0, 0], dtype=bool)
TRUNCATED = np.array([0, 0, 0, 0, 1, 0, 0], dtype=bool)
BY_HAND = [2.62, 1.8, 2.0, 1.4, 1.0, 1.9, 1.0]


def _tiny_dataset(out):
    rng = np.random.default_rng(0)
    arrays = {
        "observations": rng.normal(size=(7, 3)).astype(np.float32),
        "actions": rng.uniform(-1, 1, (7, 1)).astype(np.float32),
        "rewards": REWARDS,
        "next_observations": rng.normal(size=(7, 3)).astype(np.float32),
        "terminated": TERMINATED,
        "truncated": TRUNCATED,
    }
    return write_dataset(out, arrays, np.array([3, 2, 2]))


def test_return_to_go_of_a_written_dataset_matches_the_hand_computation(tmp_path):
    dataset = _tiny_dataset(tmp_path / "tiny")
    data = ReturnRegressionData.from_datasets([dataset], gamma=0.9)
    np.testing.assert_allclose(data.returns, BY_HAND, rtol=0, atol=1e-12)
    mean, std = np.mean(BY_HAND), np.std(BY_HAND)
    np.testing.assert_allclose(data.targets_for(np.arange(7)), (np.array(BY_HAND) - mean) / std,
                               rtol=0, atol=1e-12)
    # The batch carries the rows' own observations with their targets.
    obs, act, targets = data.batch(np.array([1, 4]))
    assert torch.equal(obs, torch.from_numpy(np.asarray(dataset.array("observations"))[[1, 4]]))
    assert targets.tolist() == pytest.approx([(1.8 - mean) / std, (1.0 - mean) / std])


def test_episodes_end_at_flags_and_at_new_episode_numbers():
    # Flags alone split A | B | C (C's end is the last row) ...
    assert np.flatnonzero(episode_ends(TERMINATED, TRUNCATED)).tolist() == [2, 4, 6]
    # ... and an unflagged cut-off episode followed by another is split by its number.
    ends = episode_ends(np.zeros(4, bool), np.zeros(4, bool), np.array([0, 0, 1, 1]))
    assert ends.tolist() == [False, True, False, True]
    returns = discounted_return_to_go(np.ones(4), ends, 0.5)
    assert returns.tolist() == [1.5, 1.0, 1.5, 1.0]


def test_return_to_go_matches_scipy_lfilter_on_random_episodes():
    # Reference: the discounted sum is the IIR filter y[n] = x[n] + gamma * y[n-1] run over
    # each episode's rewards in reverse (scipy.signal.lfilter with b=[1], a=[1, -gamma]).
    rng = np.random.default_rng(4)
    lengths = rng.integers(1, 40, 50)
    rewards = rng.normal(size=lengths.sum())
    ends = np.zeros(lengths.sum(), bool)
    ends[np.cumsum(lengths) - 1] = True
    got = discounted_return_to_go(rewards, ends, 0.97)
    start_row = 0
    for n in lengths:
        episode = rewards[start_row : start_row + n]
        want = scipy.signal.lfilter([1.0], [1.0, -0.97], episode[::-1])[::-1]
        np.testing.assert_allclose(got[start_row : start_row + n], want, rtol=1e-12, atol=1e-12)
        start_row += n


def test_regression_loss_drops_and_is_deterministic(tmp_path):
    dataset = problem_dataset(tmp_path / "prior")
    data = ReturnRegressionData.from_datasets([dataset], gamma=0.9)
    reports, torsos = [], []
    for _ in range(2):
        _, critics, _ = start("scratch", dataset, {})
        report = fit_return_regression(list(critics.online), data,
                                       RegressionSettings(steps=150, learning_rate=3e-3,
                                                          batch_size=64), seed=7)
        reports.append(report)
        torsos.append(critics.online[0].torso[0].weight.detach().clone())
    assert reports[0]["last_loss"] < 0.7 * reports[0]["first_loss"]
    assert reports[0] == reports[1] and torch.equal(torsos[0], torsos[1])


def test_auxiliary_keeps_the_trained_torso_and_resets_the_head(tmp_path):
    dataset = problem_dataset(tmp_path / "prior")
    _, fresh, _ = start("scratch", dataset, {})  # the same seeded critics, untouched
    _, critics, outcome = start("auxiliary", dataset, base_weights(), regression_steps=60)
    for net, untouched in zip(critics.online, fresh.online, strict=True):
        reference = untouched.state_dict()
        for key, value in net.state_dict().items():
            same = torch.equal(value, reference[key])
            assert same == (network_part(key) != "torso"), key
    report = outcome.report
    assert report["regression_rows"] == 512
    assert report["regression_last_loss"] < report["regression_first_loss"]


def test_auxiliary_needs_prior_data():
    critics = new_critics(OBS_DIM, -np.ones(2), np.ones(2), NETWORK, seed=0)
    with pytest.raises(BadInput, match="prior"):
        SupervisedTorso().initialise(InitContext(critics=critics, base_weights={}, prior=()))


@pytest.mark.parametrize(("field", "value"), [("steps", 0), ("learning_rate", -1.0),
                                              ("batch_size", 2.5)])
def test_regression_settings_are_checked_at_the_door(field, value):
    with pytest.raises(BadInput, match=f"init.regression.{field}: got"):
        RegressionSettings(**{field: value})
