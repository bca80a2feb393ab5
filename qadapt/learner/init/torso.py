"""Torso transfer: the pretrained state torso and normaliser under a fresh head.

Holds:
    TorsoTransfer -- torso and normaliser copied from the base; the head keeps its fresh
        random initialisation; everything trains.
    FrozenTorso -- the same start, with the torso held fixed: only the head trains.
"""

from __future__ import annotations

from qadapt.learner.init.base_weights import copy_from_base, freeze
from qadapt.learner.init.contract import InitContext, InitOutcome, InitStrategy


class TorsoTransfer(InitStrategy):
    """Pretrained torso (and observation normaliser), fresh head.

    Online critic j takes base critic j's torso, so the two critics still differ. The
    head's fresh weights come from the run's seed.

    Example:
        >>> import torch
        >>> from qadapt.nets import CriticPair, QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> base, fresh = CriticPair(make, seed=0), CriticPair(make, seed=1)
        >>> weights = {f"critics.{k}": v for k, v in base.state_dict().items()}
        >>> _ = TorsoTransfer().initialise(InitContext(fresh, weights))
        >>> torch.equal(fresh.online[0].torso[0].weight, base.online[0].torso[0].weight)
        True
        >>> torch.equal(fresh.online[0].head_state.weight, base.online[0].head_state.weight)
        False
    """

    name = "torso"
    uses_base_statistics = True
    base_parts = frozenset({"torso"})

    def initialise(self, context: InitContext) -> InitOutcome:
        copy_from_base(context.critics, context.base_weights, ("torso", "normaliser"),
                       context.where)
        return InitOutcome()


class FrozenTorso(TorsoTransfer):
    """Pretrained torso held fixed, fresh head trained.

    The torso's parameters get requires_grad False, so the learner's optimiser never sees
    them; the targets' torso starts equal to it and stays equal (a Polyak step or a copy
    between equal tensors changes nothing).

    Example:
        >>> import torch
        >>> from qadapt.nets import CriticPair, QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> base, fresh = CriticPair(make, seed=0), CriticPair(make, seed=1)
        >>> weights = {f"critics.{k}": v for k, v in base.state_dict().items()}
        >>> _ = FrozenTorso().initialise(InitContext(fresh, weights))
        >>> net = fresh.online[0]
        >>> net.torso[0].weight.requires_grad, net.head_out.bias.requires_grad
        (False, True)
    """

    name = "frozen_torso"
    frozen_parts = frozenset({"torso"})

    def initialise(self, context: InitContext) -> InitOutcome:
        outcome = super().initialise(context)
        freeze(context.critics, self.frozen_parts)
        return outcome
