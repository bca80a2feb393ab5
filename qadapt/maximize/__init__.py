"""Action maximisers: for a batch of states, the action that maximises a score (a Q-function).

Holds (one module each):
    base -- the contract: ScoreFn, MaximizerResult, ActionMaximizer.
    checks -- argument checks shared by the maximisers.
    cem -- CrossEntropyMaximizer, the cross-entropy method over a Box.
    exhaustive -- ExhaustiveMaximizer, the exact argmax over a finite candidate set.
    factory -- MAXIMIZERS (the registry), build_maximizer(kind, action_space, **settings), and
        maximizer_for_space (a job's kind, "auto" included, plus CEM settings).
"""

from qadapt.maximize.base import ActionMaximizer, MaximizerResult, ScoreFn
from qadapt.maximize.cem import CrossEntropyMaximizer
from qadapt.maximize.exhaustive import ExhaustiveMaximizer
from qadapt.maximize.factory import (
    KINDS,
    MAXIMIZERS,
    build_maximizer,
    maximizer_for_space,
    resolve_kind,
)

__all__ = [
    "KINDS",
    "MAXIMIZERS",
    "ActionMaximizer",
    "CrossEntropyMaximizer",
    "ExhaustiveMaximizer",
    "MaximizerResult",
    "ScoreFn",
    "build_maximizer",
    "maximizer_for_space",
    "resolve_kind",
]
