"""The value head chosen from the data's rewards (qadapt.learner.value_head).

The rule checked here is ours; the facts it relies on are arithmetic: with rewards in [0, 1]
and an undiscounted episode return in [0, 1], every discounted return lies in [0, 1] too.
The reward ranges used are those of gymnasium's own reference environments, as their
documentation states them: CartPole-v1 gives +1 per step; Pendulum-v1 gives rewards in
[-16.27, 0] (-(pi^2 + 0.1 * 8^2 + 0.001 * 2^2)).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from qadapt.learner.value_head import (
    SETTINGS_OF_OUTPUT,
    RewardRange,
    choose_value_head,
    settle_learner,
)

PICK = RewardRange(0.0, 1.0, 0.0, 1.0)  # one 0/1 success reward per episode
CARTPOLE = RewardRange(1.0, 1.0, 8.0, 61.0)
PENDULUM = RewardRange(-(math.pi**2 + 0.1 * 64 + 0.001 * 4), 0.0, -1800.0, -1.0)


@pytest.mark.parametrize(("rewards", "output", "loss"), [
    (PICK, "sigmoid", "cross_entropy"),
    (CARTPOLE, "linear", "huber"),      # rewards in [0, 1], but returns above 1
    (PENDULUM, "linear", "huber"),
])
def test_auto_follows_the_reward_range(rewards, output, loss):
    head = choose_value_head("auto", "auto", rewards)
    assert (head.output, head.loss) == (output, loss)
    assert head.describe().startswith(f"value head: {output} output, {loss} loss (auto: ")


@pytest.mark.parametrize(("output", "loss", "want"), [
    ("linear", "auto", ("linear", "huber")),
    ("sigmoid", "auto", ("sigmoid", "cross_entropy")),
    ("auto", "mse", ("linear", "mse")),
    ("auto", "cross_entropy", ("sigmoid", "cross_entropy")),
    ("linear", "mse", ("linear", "mse")),
])
def test_one_given_setting_decides_the_other(output, loss, want):
    head = choose_value_head(output, loss, PICK)
    assert (head.output, head.loss) == want


@pytest.mark.parametrize(("output", "loss", "rewards", "words"), [
    ("linear", "cross_entropy", PICK, ["loss", "cross_entropy", "sigmoid"]),
    ("sigmoid", "huber", PICK, ["loss", "huber", "cross_entropy"]),
    ("sigmoid", "auto", PENDULUM, ["output", "sigmoid", "[0, 1]"]),
    ("auto", "cross_entropy", CARTPOLE, ["output", "sigmoid", "[0, 1]"]),
])
def test_combinations_that_cannot_work_are_refused(output, loss, rewards, words):
    with pytest.raises(ValueError) as caught:
        choose_value_head(output, loss, rewards)
    assert all(w in str(caught.value) for w in words), caught.value


class _Data:
    """Just the arrays RewardRange reads, as a ReplayDataset gives them."""

    def __init__(self, rewards, lengths):
        self._arrays = {"rewards": np.asarray(rewards, np.float32),
                        "episode_lengths": np.asarray(lengths, np.int64)}
        ends = np.cumsum(lengths)
        self._arrays["episode_returns"] = np.array(
            [self._arrays["rewards"][e - n:e].sum() for e, n in zip(ends, lengths, strict=True)])

    def array(self, name):
        return self._arrays[name]


def test_reward_range_applies_scale_and_shift_per_step():
    # Two episodes: returns 3 and 1 over 3 and 2 steps. Scale 0.5, shift -1: each reward
    # r -> 0.5 r - 1, so a return R over L steps -> 0.5 R - L.
    data = _Data([1.0, 1.0, 1.0, 0.0, 1.0], [3, 2])
    plain = RewardRange.of_datasets([data])
    assert (plain.lowest_reward, plain.highest_reward) == (0.0, 1.0)
    assert (plain.lowest_return, plain.highest_return) == (1.0, 3.0)
    scaled = RewardRange.of_datasets([data], scale=0.5, shift=-1.0)
    assert (scaled.lowest_reward, scaled.highest_reward) == (-1.0, -0.5)
    assert (scaled.lowest_return, scaled.highest_return) == (-1.5, -1.5)
    # Scaled into [0, 1]: the sigmoid head becomes the automatic choice.
    assert RewardRange.of_datasets([data], scale=1 / 3).in_unit_interval


@dataclasses.dataclass
class _Node:
    """The learner-node fields the jobs may leave undecided (as LearnerSettings does)."""

    loss: str = "auto"
    reward_scale: float | None = None
    reward_shift: float | None = None
    conservative_weight: float | None = None
    learning_rate: float | None = None
    refresh_every: int | None = None


def _settle(data, **given):
    return settle_learner(_Node(**given), "auto", [data])


def test_settling_a_dense_negative_reward_task():
    # Pendulum-like rewards: largest magnitude 16 -> scaled by 1/16; the linear head's settings.
    data = _Data([-16.0, -4.0, -1.0, -0.5], [2, 2])
    settled, output, line = _settle(data)
    assert output == "linear" and settled.loss == "huber"
    assert settled.reward_scale == 1 / 16 and settled.reward_shift == 0.0
    assert (settled.conservative_weight, settled.learning_rate, settled.refresh_every) == (
        SETTINGS_OF_OUTPUT["linear"]["conservative_weight"],
        SETTINGS_OF_OUTPUT["linear"]["learning_rate"],
        SETTINGS_OF_OUTPUT["linear"]["refresh_every"])
    assert line.startswith("value head: linear output, huber loss") and "0.0625 * r" in line


def test_settling_keeps_what_is_set_and_what_the_base_records():
    data = _Data([0.0, 1.0, 0.0, 0.0], [2, 2])  # 0/1 success rewards: the sigmoid head
    settled, output, _ = _settle(data, learning_rate=0.01)
    assert (output, settled.loss, settled.reward_scale) == ("sigmoid", "cross_entropy", 1.0)
    assert settled.learning_rate == 0.01
    assert settled.conservative_weight == SETTINGS_OF_OUTPUT["sigmoid"]["conservative_weight"]
    # A linear base with its reward units: fine-tuning inherits loss and scale.
    settled, output, _ = settle_learner(_Node(), "linear", [data],
                                        base={"loss": "mse", "reward_scale": 0.5,
                                              "reward_shift": -1.0})
    assert (output, settled.loss, settled.reward_scale, settled.reward_shift) == (
        "linear", "mse", 0.5, -1.0)
