"""The init strategies by name: what ``init=NAME`` on the command line selects.

Holds:
    INIT_STRATEGIES -- strategy name -> strategy class, in the order help texts list them.
    init_strategy -- the configured strategy for an ``InitSettings`` node (or a bare name).
"""

from __future__ import annotations

from typing import Any

from qadapt.errors import BadInput
from qadapt.learner.init.auxiliary import SupervisedTorso
from qadapt.learner.init.contract import InitStrategy
from qadapt.learner.init.scratch import FromScratch
from qadapt.learner.init.shrink_perturb import ShrinkPerturb
from qadapt.learner.init.torso import FrozenTorso, TorsoTransfer
from qadapt.learner.init.warm import AnchoredWarmStart, WarmStart

INIT_STRATEGIES: dict[str, type[InitStrategy]] = {
    cls.name: cls
    for cls in (WarmStart, FromScratch, TorsoTransfer, FrozenTorso, SupervisedTorso,
                AnchoredWarmStart, ShrinkPerturb)
}


def init_strategy(settings: Any) -> InitStrategy:
    """The strategy ``settings.name`` names, configured from ``settings`` (an InitSettings);
    a plain name gives the strategy with its default settings.

    Example:
        >>> init_strategy("frozen_torso").frozen_parts
        frozenset({'torso'})
    """
    if isinstance(settings, str):
        from qadapt.learner.init.settings import InitSettings

        settings = InitSettings(name=settings)
    name = settings.name
    if name not in INIT_STRATEGIES:
        raise BadInput(f"init: got {name!r}, expected one of {', '.join(INIT_STRATEGIES)}")
    return INIT_STRATEGIES[name].from_settings(settings)
