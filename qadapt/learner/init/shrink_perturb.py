"""Shrink and perturb: the pretrained weights scaled down, plus a scaled fresh initialisation.

Holds:
    ShrinkSettings -- the two factors, checked at the door.
    ShrinkPerturb -- each online critic's trainable weight becomes
        ``factor * w_base + noise * w_fresh`` (Ash and Adams, 2020, "On Warm-Starting Neural
        Network Training"), where ``w_fresh`` is the critic's own seeded initialisation;
        normalisation comes from the base unchanged.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass
from typing import Any

import torch

from qadapt.errors import BadInput
from qadapt.learner.init.base_weights import copy_from_base
from qadapt.learner.init.contract import InitContext, InitOutcome, InitStrategy, network_part

_MOVED_PARTS = ("torso", "head")


def _check_fraction(key: str, value: object, *, zero_allowed: bool) -> None:
    """Refuse anything but a finite number in [0, 1] (or (0, 1]), naming ``key``."""
    number = (isinstance(value, int | float) and not isinstance(value, bool)
              and math.isfinite(value))
    if not (number and (0 <= value if zero_allowed else 0 < value) and value <= 1):
        interval = "[0, 1]" if zero_allowed else "(0, 1]"
        raise BadInput(f"{key}: got {value!r}, expected a number in {interval}")


@dataclass
class ShrinkSettings:
    """``init.shrink.factor`` scales the pretrained weights, ``init.shrink.noise`` the fresh ones.

    factor 1 with noise 0 is the plain warm start; factor 0 with noise 1 is a fresh start with
    the base's normalisation. The defaults (factor 0.5, noise 0.5: halfway between the two) are
    our own starting point, not a published recommendation.

    Example:
        >>> ShrinkSettings().factor
        0.5
        >>> ShrinkSettings(factor=1.5)
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: init.shrink.factor: got 1.5, expected a number in (0, 1]
    """

    factor: float = 0.5
    noise: float = 0.5

    def __post_init__(self) -> None:
        _check_fraction("init.shrink.factor", self.factor, zero_allowed=False)
        _check_fraction("init.shrink.noise", self.noise, zero_allowed=True)
        if self.factor == 1 and self.noise == 0:
            raise BadInput("init.shrink: factor 1 with noise 0 is the plain warm start; "
                           "use init=warm")


class ShrinkPerturb(InitStrategy):
    """Pretrained weights shrunk towards zero plus a fresh seeded initialisation, scaled.

    Every torso and head parameter (the output layer's bias too) becomes
    ``factor * w_base + noise * w_fresh``; the observation normaliser is the base's. The two
    critics get different fresh parts (each is seeded on its own), so they still differ.

    Example:
        >>> import torch
        >>> from qadapt.nets import CriticPair, QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> base, fresh = CriticPair(make, seed=0), CriticPair(make, seed=1)
        >>> start = fresh.online[0].torso[0].weight.detach().clone()
        >>> weights = {f"critics.{k}": v for k, v in base.state_dict().items()}
        >>> _ = ShrinkPerturb(ShrinkSettings(0.5, 0.5)).initialise(InitContext(fresh, weights))
        >>> expected = 0.5 * base.online[0].torso[0].weight + 0.5 * start
        >>> torch.allclose(fresh.online[0].torso[0].weight, expected)
        True
    """

    name = "shrink_perturb"
    uses_base_statistics = True

    def __init__(self, shrink: ShrinkSettings | None = None) -> None:
        shrink = ShrinkSettings() if shrink is None else shrink
        if not isinstance(shrink, ShrinkSettings):
            raise ValueError(f"shrink: got {shrink!r}, expected ShrinkSettings")
        self.shrink = shrink

    @classmethod
    def from_settings(cls, settings: Any) -> ShrinkPerturb:
        return cls(settings.shrink)

    def describe(self) -> dict[str, Any]:
        return {"name": self.name,
                "shrink": {"factor": self.shrink.factor, "noise": self.shrink.noise}}

    def initialise(self, context: InitContext) -> InitOutcome:
        critics = context.critics
        fresh = [copy.deepcopy(net.state_dict()) for net in critics.online]
        copy_from_base(critics, context.base_weights, (*_MOVED_PARTS, "normaliser"),
                       context.where)
        with torch.no_grad():
            for net, start in zip(critics.online, fresh, strict=True):
                for key, param in net.named_parameters():
                    if network_part(key) in _MOVED_PARTS:
                        param.mul_(self.shrink.factor).add_(start[key], alpha=self.shrink.noise)
        critics.hard_update()
        return InitOutcome()
