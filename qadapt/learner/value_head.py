"""Choosing the network's output and the TD loss from the rewards the data holds.

Holds:
    RewardRange -- the lowest and highest reward and episode return of some datasets.
    ValueHead -- a network output ("sigmoid" or "linear") with its loss, and why it was chosen.
    choose_value_head -- "auto" settings made concrete from a RewardRange; conflicts refused.
    SETTINGS_OF_OUTPUT -- the learner settings a run gets when none are set, by output.
    settle_learner -- a learner node's undecided fields made concrete, with one line saying so.

A sigmoid output with a cross-entropy loss suits 0/1 success rewards: Q is a probability of
success and cannot leave [0, 1]. It is only right when every discounted return does lie in
[0, 1], which holds when every reward and every episode return of the data does (the rewards
are then non-negative, so a discounted sum lies between 0 and the undiscounted one). Anything
else (dense, negative or large rewards) gets a linear output and a Huber loss with no clamp.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

AUTO = "auto"
# The loss each output is trained with when only one of them is given.
LOSS_OF_OUTPUT = {"sigmoid": "cross_entropy", "linear": "huber"}
# Learner settings a run gets when they are not set, by network output.
# Sigmoid: the pick cell's measured defaults (docs/learner.md, "How the defaults were chosen"):
#   CQL weight 1 on the logits, Adam step 3e-4, targets refreshed every 500 steps.
# Linear: measured on gymnasium's CartPole-v1 and Pendulum-v1 from random episodes
#   (docs/learner.md, "Other environments"): CQL weight 0 (at 1 the CartPole policy was no
#   better than random), Adam step 1e-3 and refreshes every 100 steps (Pendulum at 3e-4 or
#   every 500 steps had not left the random policy's returns after 3,000 steps).
SETTINGS_OF_OUTPUT = {
    "sigmoid": {"conservative_weight": 1.0, "learning_rate": 3e-4, "refresh_every": 500},
    "linear": {"conservative_weight": 0.0, "learning_rate": 1e-3, "refresh_every": 100},
}


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


def _largest_reward(datasets: Sequence) -> float:
    return max((float(np.abs(np.asarray(d.array("rewards"), dtype=np.float64)).max())
                for d in datasets if len(d.array("rewards"))), default=0.0)


def settle_learner(learner, output: str, datasets: Sequence, base: dict | None = None):
    """(learner node, output, line): ``learner`` (a node with LearnerConfig's fields, some
    None or "auto") with nothing left undecided, and the one line that says what was chosen.

    - Reward scale and shift: as set, else the base checkpoint's (``base``: its recorded
      value units), else 0 for the shift and, for the scale, 1 with a sigmoid output and
      1 / max |r| of the data with a linear one (rewards of magnitude at most 1: the Huber
      loss's quadratic zone, common practice). Pendulum-v1 unscaled (|r| up to 16.3) did not
      learn in 3,000 steps; scaled, it did (docs/learner.md, "Other environments").
    - Output and loss: choose_value_head on the rewards (scaled as set or inherited); a
      base's output is fixed and its loss kept unless the loss is set.
    - CQL weight, learning rate, refresh interval: as set, else SETTINGS_OF_OUTPUT.
    ValueError (naming the field) for a combination that cannot work.
    """
    base = base or {}
    scale = learner.reward_scale if learner.reward_scale is not None else base.get(
        "reward_scale")
    shift = learner.reward_shift if learner.reward_shift is not None else base.get(
        "reward_shift", 0.0)
    loss = base.get("loss", AUTO) if learner.loss == AUTO else learner.loss
    head = choose_value_head(output, loss, RewardRange.of_datasets(
        datasets, 1.0 if scale is None else scale, shift))
    if learner.loss == AUTO and "loss" in base:
        head = ValueHead(head.output, head.loss, "the base checkpoint's")
    if scale is None:
        largest = _largest_reward(datasets)
        scale = 1.0 if head.output == "sigmoid" or largest == 0.0 else 1.0 / largest
    chosen = {name: getattr(learner, name) if getattr(learner, name) is not None else value
              for name, value in SETTINGS_OF_OUTPUT[head.output].items()}
    settled = replace(learner, loss=head.loss, reward_scale=float(scale),
                      reward_shift=float(shift), **chosen)
    units = "" if (scale, shift) == (1.0, 0.0) else f"; rewards as {scale:.4g} * r + {shift:g}"
    line = (f"{head.describe()}{units}; CQL weight {settled.conservative_weight:g}, learning "
            f"rate {settled.learning_rate:g}, targets refreshed every {settled.refresh_every} "
            "steps")
    return settled, head.output, line
