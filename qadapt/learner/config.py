"""The fitted Q-iteration learner's settings.

Holds:
    LearnerConfig -- every learner hyper-parameter, validated at the door.
    in_reward_units -- a Q-value learnt on mapped rewards, back in the rewards' own units.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

TARGET_MODES = ("refresh", "per_batch")
TARGET_UPDATES = ("copy", "polyak")
LOSSES = ("cross_entropy", "huber", "mse")


def in_reward_units(q, gamma: float, scale: float = 1.0, shift: float = 0.0):
    """A Q-value learnt on rewards ``scale * r + shift``, in the rewards' own units (for an
    endless episode; episodes that end earlier carry less of the shift).

    Example:
        >>> round(in_reward_units(12.0, 0.9, scale=0.5, shift=1.0), 9)
        4.0
    """
    offset = 0.0 if shift == 0 else shift / (1.0 - gamma)
    return (q - offset) / scale


def _check(name: str, ok: bool, value: object, expected: str) -> None:
    if not ok:
        raise ValueError(f"{name}: got {value!r}, expected {expected}")


def _is_int(value: object) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _is_num(value: object) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


@dataclass(frozen=True)
class LearnerConfig:
    """Hyper-parameters of fitted Q-iteration with clipped double-Q.

    Args:
        gamma: discount in [0, 1).
        learning_rate: Adam step size.
        batch_size: transitions per gradient step.
        target_mode: "refresh" (recompute and cache targets for every transition of every
            source every ``refresh_every`` steps, warm-starting the maximiser from the last
            refresh) or "per_batch" (targets for each sampled batch; the reference).
        refresh_every: gradient steps between refreshes (refresh mode).
        refresh_blend: share of the freshly computed targets a refresh takes (1 = all;
            smaller values move the cached targets gradually).
        target_update: "copy" (target critics <- online ones every ``copy_every`` steps; in
            refresh mode, at every refresh when ``copy_every`` is 0) or "polyak" (``tau``).
        loss: "cross_entropy" (sigmoid outputs, targets in [0, 1]), "huber" or "mse".
        grad_clip: largest gradient norm (0 turns clipping off).
        conservative_weight: weight of the CQL regulariser (0 = off).
        conservative_samples: uniform random actions per state in the regulariser.
        conservative_temperature: temperature of the regulariser's soft maximum.
        conservative_at_maximum: include the maximiser's action at each state among the
            regulariser's sampled actions.
        conservative_maximum: "online" (search the online critic's maximum for each batch)
            or "cached" (the target critic's maximum found at the last refresh; cheaper, but
            chasing a stale maximum can make the policy swing from refresh to refresh).
        conservative_on: "raw" (the network's outputs: logits for a sigmoid output) or
            "value" (Q itself, bounded in (0, 1) for a sigmoid output).
        anchor_weight: weight of the L2 penalty towards given anchor weights (0 = off).
        ema_decay: decay of the exponential moving average of critic 0 used for acting
            (0 = act with the online weights).
        reward_scale, reward_shift: the learner trains on ``reward_scale * r + reward_shift``
            (1 and 0: the data's own rewards); Q-values are then in those units, and
            ``original_value`` maps them back.
        q_limit: the divergence guard stops training when |Q| exceeds this.
        refresh_chunk: states per maximiser call during a refresh (bounds memory; 512 keeps
            the head's activations in cache: about 3x faster than 4096, scripts/bench_learner).

    Example:
        >>> LearnerConfig(learning_rate=1e-3).target_mode
        'refresh'
    """

    gamma: float = 0.9
    learning_rate: float = 3e-4
    batch_size: int = 256
    target_mode: str = "refresh"
    refresh_every: int = 500
    refresh_blend: float = 1.0
    target_update: str = "copy"
    copy_every: int = 0
    tau: float = 0.005
    loss: str = "cross_entropy"
    huber_delta: float = 1.0
    grad_clip: float = 10.0
    conservative_weight: float = 0.0
    conservative_samples: int = 8
    conservative_temperature: float = 1.0
    conservative_on: str = "raw"
    conservative_at_maximum: bool = True
    conservative_maximum: str = "online"
    anchor_weight: float = 0.0
    ema_decay: float = 0.0
    reward_scale: float = 1.0
    reward_shift: float = 0.0
    q_limit: float = 1e4
    refresh_chunk: int = 512

    def __post_init__(self) -> None:
        _check("gamma", _is_num(self.gamma) and 0.0 <= self.gamma < 1.0, self.gamma,
               "a number in [0, 1)")
        _check("learning_rate", _is_num(self.learning_rate) and self.learning_rate > 0,
               self.learning_rate, "a positive number")
        _check("batch_size", _is_int(self.batch_size) and self.batch_size >= 1,
               self.batch_size, "a positive integer")
        _check("target_mode", self.target_mode in TARGET_MODES, self.target_mode,
               f"one of {', '.join(TARGET_MODES)}")
        _check("refresh_every", _is_int(self.refresh_every) and self.refresh_every >= 1,
               self.refresh_every, "a positive integer")
        _check("refresh_blend", _is_num(self.refresh_blend) and 0 < self.refresh_blend <= 1,
               self.refresh_blend, "a number in (0, 1]")
        _check("target_update", self.target_update in TARGET_UPDATES, self.target_update,
               f"one of {', '.join(TARGET_UPDATES)}")
        _check("copy_every", _is_int(self.copy_every) and self.copy_every >= 0,
               self.copy_every, "a non-negative integer (0: at every refresh)")
        if self.target_update == "copy" and self.copy_every == 0:
            _check("copy_every", self.target_mode == "refresh", self.copy_every,
                   "a positive integer when target_mode is per_batch")
        _check("tau", _is_num(self.tau) and 0.0 < self.tau <= 1.0, self.tau,
               "a number in (0, 1]")
        _check("loss", self.loss in LOSSES, self.loss, f"one of {', '.join(LOSSES)}")
        _check("huber_delta", _is_num(self.huber_delta) and self.huber_delta > 0,
               self.huber_delta, "a positive number")
        _check("grad_clip", _is_num(self.grad_clip) and self.grad_clip >= 0, self.grad_clip,
               "a non-negative number")
        for name in ("conservative_weight", "anchor_weight"):
            value = getattr(self, name)
            _check(name, _is_num(value) and value >= 0, value, "a non-negative number")
        _check("conservative_samples",
               _is_int(self.conservative_samples) and self.conservative_samples >= 1,
               self.conservative_samples, "a positive integer")
        _check("conservative_temperature",
               _is_num(self.conservative_temperature) and self.conservative_temperature > 0,
               self.conservative_temperature, "a positive number")
        _check("conservative_maximum", self.conservative_maximum in ("online", "cached"),
               self.conservative_maximum, "'online' or 'cached'")
        _check("conservative_on", self.conservative_on in ("raw", "value"),
               self.conservative_on, "'raw' or 'value'")
        _check("ema_decay", _is_num(self.ema_decay) and 0.0 <= self.ema_decay < 1.0,
               self.ema_decay, "a number in [0, 1)")
        _check("reward_scale", _is_num(self.reward_scale) and self.reward_scale > 0,
               self.reward_scale, "a positive number")
        _check("reward_shift", _is_num(self.reward_shift), self.reward_shift, "a finite number")
        _check("q_limit", _is_num(self.q_limit) and self.q_limit > 0, self.q_limit,
               "a positive number")
        _check("refresh_chunk", _is_int(self.refresh_chunk) and self.refresh_chunk >= 1,
               self.refresh_chunk, "a positive integer")

    def to_dict(self) -> dict:
        return asdict(self)

    def original_value(self, q: float) -> float:
        """A Q-value learnt on the scaled rewards, in the data's own units: the learner sees
        ``scale * r + shift``, so its Q is ``scale * Q_data + shift / (1 - gamma)`` for an
        endless episode (episodes that end earlier carry less of the shift).

        Example:
            >>> round(LearnerConfig(reward_scale=0.5, reward_shift=1.0).original_value(12.0), 9)
            4.0
        """
        return in_reward_units(q, self.gamma, self.reward_scale, self.reward_shift)
