"""The ``init`` config node of ``qadapt finetune``: which strategy, and its settings.

Holds:
    InitSettings -- strategy name (checked against the registry) plus the settings of the
        strategies that have any (the auxiliary start's regression phase, shrink and
        perturb's factors).
    init_strategy -- the configured strategy for an ``InitSettings`` node (or a bare name).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from qadapt.errors import BadInput
from qadapt.learner.init.contract import InitStrategy
from qadapt.learner.init.registry import INIT_STRATEGIES
from qadapt.learner.init.regression import RegressionSettings
from qadapt.learner.init.shrink_perturb import ShrinkSettings


@dataclass
class InitSettings:
    """``init=NAME`` picks configs/init/NAME.yaml; ``init.regression.steps=...`` etc. tune it.

    Example:
        >>> InitSettings(name="torso").name
        'torso'
        >>> InitSettings(name="x")
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: init: got 'x', expected one of warm, scratch, torso, \
frozen_torso, auxiliary, anchored, shrink_perturb
    """

    name: str = "warm"
    regression: RegressionSettings = field(default_factory=RegressionSettings)
    shrink: ShrinkSettings = field(default_factory=ShrinkSettings)

    def __post_init__(self) -> None:
        if self.name not in INIT_STRATEGIES:
            raise BadInput(f"init: got {self.name!r}, expected one of "
                           f"{', '.join(INIT_STRATEGIES)}")

    def check_run(self, anchor_weight: float, has_prior: bool) -> None:
        """Refuse a learner anchor weight or missing prior data the strategy cannot use.

        The anchor penalty's weight is the learner's ``anchor_weight``: positive with
        ``init=anchored`` (whose config sets 0.1), zero with every other strategy (they give
        no anchor weights).
        """
        strategy = INIT_STRATEGIES[self.name]
        if strategy.gives_anchor and not anchor_weight > 0:
            raise BadInput(f"learner.anchor_weight: got {anchor_weight!r}, but init "
                           f"'{self.name}' needs a positive weight for its L2 penalty "
                           "(configs/init/anchored.yaml sets 0.1)")
        if not strategy.gives_anchor and anchor_weight > 0:
            raise BadInput(f"learner.anchor_weight: got {anchor_weight!r}, but init "
                           f"'{self.name}' gives no anchor weights; use init=anchored or "
                           "learner.anchor_weight=0")
        if strategy.needs_prior and not has_prior:
            raise BadInput(f"init: '{self.name}' trains on the prior data; give prior=...")


def init_strategy(settings: Any) -> InitStrategy:
    """The strategy ``settings.name`` names, configured from ``settings`` (an InitSettings);
    a plain name gives the strategy with its default settings.

    Example:
        >>> init_strategy("frozen_torso").frozen_parts
        frozenset({'torso'})
    """
    if isinstance(settings, str):
        settings = InitSettings(name=settings)
    name = settings.name
    if name not in INIT_STRATEGIES:
        raise BadInput(f"init: got {name!r}, expected one of {', '.join(INIT_STRATEGIES)}")
    return INIT_STRATEGIES[name].from_settings(settings)
