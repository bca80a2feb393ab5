"""Choosing the network's output and the TD loss from the rewards the data holds.

Holds:
    RewardRange -- the lowest and highest reward and episode return of some datasets.
    ValueHead -- a network output ("sigmoid" or "linear") with its loss, and why it was chosen.
    choose_value_head -- "auto" settings made concrete from a RewardRange; conflicts refused.
    PENALTY_OF_OUTPUT -- the CQL weight a run gets when none is set, by network output.

A sigmoid output with a cross-entropy loss suits 0/1 success rewards: Q is a probability of
success and cannot leave [0, 1]. It is only right when every discounted return does lie in
[0, 1], which holds when every reward and every episode return of the data does (the rewards
are then non-negative, so a discounted sum lies between 0 and the undiscounted one). Anything
else (dense, negative or large rewards) gets a linear output and a Huber loss with no clamp.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

AUTO = "auto"
# The loss each output is trained with when only one of them is given.
LOSS_OF_OUTPUT = {"sigmoid": "cross_entropy", "linear": "huber"}
# The CQL weight when none is set. Sigmoid: 1 on the logits, measured on the pick cell (without
# it greedy success swung between refreshes; docs/learner.md). Linear: 0, measured on
# CartPole-v1 from 150 random episodes (3,000 steps, greedy mean return over 50 episodes:
# weight 1 -> 22, the random policy's 21; 0.1 -> 183; 0 -> 500, the maximum; docs/learner.md,
# "Other environments"): on a linear Q the penalty flattens the action's effect.
PENALTY_OF_OUTPUT = {"sigmoid": 1.0, "linear": 0.0}


@dataclass(frozen=True)
class RewardRange:
    """Extremes of the rewards and episode returns, after ``scale * r + shift``.

    Example:
        >>> RewardRange(0.0, 1.0, 0.0, 1.0).in_unit_interval
        True
    """

    lowest_reward: float
    highest_reward: float
    lowest_return: float
    highest_return: float

    @classmethod
    def of_datasets(cls, datasets: Sequence, scale: float = 1.0,
                    shift: float = 0.0) -> RewardRange:
        """The range over ``datasets`` (ReplayDatasets) of the rewards the learner sees."""
        rewards, returns = [], []
        for dataset in datasets:
            r = np.asarray(dataset.array("rewards"), dtype=np.float64)
            lengths = np.asarray(dataset.array("episode_lengths"), dtype=np.float64)
            sums = np.asarray(dataset.array("episode_returns"), dtype=np.float64)
            rewards += [r.min() * scale + shift, r.max() * scale + shift] if r.size else []
            returns += list(sums * scale + shift * lengths)
        if not rewards:
            return cls(0.0, 0.0, 0.0, 0.0)
        return cls(float(min(rewards)), float(max(rewards)), float(min(returns)),
                   float(max(returns)))

    @property
    def in_unit_interval(self) -> bool:
        return 0.0 <= self.lowest_reward and self.highest_reward <= 1.0 and (
            0.0 <= self.lowest_return and self.highest_return <= 1.0)

    def describe(self) -> str:
        return (f"rewards in [{self.lowest_reward:.4g}, {self.highest_reward:.4g}], "
                f"episode returns in [{self.lowest_return:.4g}, {self.highest_return:.4g}]")


@dataclass(frozen=True)
class ValueHead:
    """The network output and TD loss a run trains with; ``reason`` says why."""

    output: str
    loss: str
    reason: str

    def describe(self) -> str:
        return f"value head: {self.output} output, {self.loss} loss ({self.reason})"


def _output_of_loss(loss: str) -> str:
    return "sigmoid" if loss == "cross_entropy" else "linear"


def choose_value_head(output: str, loss: str, rewards: RewardRange) -> ValueHead:
    """The output and loss for ``output`` and ``loss`` settings ("auto" or a value).

    Both "auto": sigmoid and cross-entropy when every reward and return lies in [0, 1],
    otherwise linear and Huber. One given: the other follows it (a sigmoid output trains with
    cross-entropy, a linear one with Huber; cross-entropy needs a sigmoid, Huber or squared
    error a linear output). ValueError for a cross-entropy loss without a sigmoid output, or a
    sigmoid output forced on rewards outside [0, 1].

    Example:
        >>> choose_value_head("auto", "auto", RewardRange(-16.3, 0.0, -1800.0, -1.0)).output
        'linear'
        >>> choose_value_head("auto", "auto", RewardRange(0.0, 1.0, 0.0, 1.0)).loss
        'cross_entropy'
    """
    if output == AUTO and loss == AUTO:
        if rewards.in_unit_interval:
            return ValueHead("sigmoid", "cross_entropy",
                             f"auto: {rewards.describe()}, all within [0, 1]")
        return ValueHead("linear", "huber", f"auto: {rewards.describe()}, not all within [0, 1]")
    if output == AUTO:
        output, why = _output_of_loss(loss), f"the output a {loss} loss needs"
    elif loss == AUTO:
        loss, why = LOSS_OF_OUTPUT[output], f"the loss that goes with a {output} output"
    else:
        why = "both as configured"
    if loss == "cross_entropy" and output != "sigmoid":
        raise ValueError(f"loss: got 'cross_entropy' with a {output} output, expected a "
                         "sigmoid output (or loss huber or mse)")
    if output == "sigmoid" and loss != "cross_entropy":
        raise ValueError(f"loss: got {loss!r} with a sigmoid output, expected cross_entropy "
                         "(the loss compares the network's logits with its targets)")
    if output == "sigmoid" and not rewards.in_unit_interval:
        raise ValueError(f"output: got 'sigmoid', but the data's {rewards.describe()} (after "
                         "any reward scale and shift) leave [0, 1], where a sigmoid's Q lies; "
                         "use output linear, or rescale the rewards")
    return ValueHead(output, loss, why)
