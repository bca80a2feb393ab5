"""Fitted Q-iteration: configuration, targets, losses, the learner and its policies.

Holds:
    LearnerConfig -- validated hyper-parameters.
    FittedQLearner, TrainingDiverged -- the gradient-step owner and its divergence error.
    TransitionArrays, TargetCache -- source arrays and cached targets for refresh mode.
    QPolicy -- the greedy CEM policy with optional exploration noise.
"""

from qadapt.learner.config import LearnerConfig
from qadapt.learner.fqi import FittedQLearner, TrainingDiverged
from qadapt.learner.policy import QPolicy
from qadapt.learner.targets import TargetCache, TransitionArrays

__all__ = [
    "FittedQLearner",
    "LearnerConfig",
    "QPolicy",
    "TargetCache",
    "TrainingDiverged",
    "TransitionArrays",
]
