"""The init strategies by name: what ``init=NAME`` on the command line selects.

Holds:
    INIT_STRATEGIES -- strategy name -> strategy class, in the order help texts list them.
"""

from __future__ import annotations

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
