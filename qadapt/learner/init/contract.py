"""What every init strategy promises, and what it is given to keep that promise.

Holds:
    PARTS -- the names of a Q-network's parts: "torso", "head", "normaliser", "action_bounds".
    network_part -- which part a Q-network state-dict entry belongs to.
    InitContext -- what a strategy may use: the critics, the base weights, the prior data, ...
    InitOutcome -- what a strategy returns: anchor weights (or None) and a JSON-able report.
    InitStrategy -- the contract: ``initialise(context) -> InitOutcome`` plus what it claims.
"""

from __future__ import annotations

import abc
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import torch

from qadapt.nets import CriticPair

PARTS = ("torso", "head", "normaliser", "action_bounds")
_NORMALISER = ("obs_mean", "obs_std")
_ACTION_BOUNDS = ("action_centre", "action_half_range")


def network_part(name: str) -> str:
    """The part a Q-network state-dict key belongs to.

    The torso is every entry under ``torso.`` (late fusion: the state MLP; concat: the whole
    MLP over state and action); the head is every other parameter (late fusion: the fusion
    layer and what follows it; concat: the output layer).

    Example:
        >>> network_part("torso.0.weight"), network_part("head_out.bias")
        ('torso', 'head')
    """
    if name.startswith("torso."):
        return "torso"
    if name in _NORMALISER:
        return "normaliser"
    if name in _ACTION_BOUNDS:
        return "action_bounds"
    return "head"


@dataclass(frozen=True)
class InitContext:
    """Everything a strategy may draw on while it sets up freshly built critics.

    Args:
        critics: the freshly built CriticPair (seeded; normaliser set from the fine-tuning
            data when the strategy does not use the base's statistics).
        base_weights: the base checkpoint's weights (``critics.online.0.torso.0.weight``, ...).
        where: names the base checkpoint in error messages.
        prior: the prior datasets (objects with ``array(name)`` as ``ReplayDataset`` has).
        gamma: the learner's discount.
        seed: the run's seed.
    """

    critics: CriticPair
    base_weights: Mapping[str, torch.Tensor]
    where: str = "base"
    prior: Sequence[Any] = ()
    gamma: float = 0.9
    seed: int = 0


@dataclass(frozen=True)
class InitOutcome:
    """What ``initialise`` returns.

    ``anchor``: None, or one mapping per online critic (parameter name -> tensor) for the
    learner's L2 penalty. ``report``: JSON-able figures worth keeping in the run's records
    (e.g. the auxiliary regression's losses).
    """

    anchor: list[dict[str, torch.Tensor]] | None = None
    report: dict[str, Any] = field(default_factory=dict)


class InitStrategy(abc.ABC):
    """Sets up freshly built critics for fine-tuning.

    Claims each strategy states (the contract test in tests/learner/test_init_contract.py
    holds every registered strategy to them):

    - ``uses_base_statistics``: the observation normaliser comes from the base checkpoint
      (True) or stays as the job set it from the fine-tuning data (False).
    - ``base_parts``: network parts copied exactly from the base ("torso", "head"); every
      other parameter differs from the base's.
    - ``frozen_parts``: parts the learner must not change (requires_grad False).
    - ``gives_anchor``: ``initialise`` returns anchor weights, so the learner's
      ``anchor_weight`` must be positive (and must be zero for every other strategy).
    - ``needs_prior``: it reads the prior datasets.

    After ``initialise`` the target critics equal the online ones.
    """

    name: str
    uses_base_statistics: bool
    base_parts: frozenset[str] = frozenset()
    frozen_parts: frozenset[str] = frozenset()
    gives_anchor: bool = False
    needs_prior: bool = False

    @classmethod
    def from_settings(cls, settings: Any) -> InitStrategy:
        """The strategy configured by an ``InitSettings`` node (most need nothing from it)."""
        return cls()

    def describe(self) -> dict[str, Any]:
        """JSON-able record of the strategy and the settings it uses (for run records)."""
        return {"name": self.name}

    @abc.abstractmethod
    def initialise(self, context: InitContext) -> InitOutcome: ...
