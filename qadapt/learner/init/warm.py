"""Warm starts: every pretrained weight, optionally held near the start by an L2 penalty.

Holds:
    WarmStart -- online critics and normalisation copied from the base; targets = online.
    AnchoredWarmStart -- a warm start plus the L2-SP penalty (Li, Grandvalet and Davoine,
        2018) towards the base weights, at the learner's ``anchor_weight``.
"""

from __future__ import annotations

from qadapt.learner.init.base_weights import copy_from_base
from qadapt.learner.init.contract import InitContext, InitOutcome, InitStrategy


class WarmStart(InitStrategy):
    """Start from every pretrained weight: online critics and normalisation.

    Example:
        >>> import torch
        >>> from qadapt.nets import CriticPair, QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> base, fresh = CriticPair(make, seed=0), CriticPair(make, seed=1)
        >>> weights = {f"critics.{k}": v for k, v in base.state_dict().items()}
        >>> WarmStart().initialise(InitContext(fresh, weights)).anchor is None
        True
        >>> torch.equal(fresh.online[1].torso[0].weight, base.online[1].torso[0].weight)
        True
    """

    name = "warm"
    uses_base_statistics = True
    base_parts = frozenset({"torso", "head"})

    def initialise(self, context: InitContext) -> InitOutcome:
        copy_from_base(context.critics, context.base_weights,
                       ("torso", "head", "normaliser"), context.where)
        return InitOutcome()


class AnchoredWarmStart(WarmStart):
    """A warm start whose every parameter is pulled back towards its pretrained value.

    Each online critic is anchored to its own base weights (all parameters, head included:
    here the head was pretrained on the same kind of task, not a different label set). The
    learner adds ``anchor_weight * 0.5 * ||w - w_base||^2`` per critic;
    configs/init/anchored.yaml sets ``learner.anchor_weight: 0.1``.

    Example:
        >>> import torch
        >>> from qadapt.nets import CriticPair, QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> base, fresh = CriticPair(make, seed=0), CriticPair(make, seed=1)
        >>> weights = {f"critics.{k}": v for k, v in base.state_dict().items()}
        >>> anchor = AnchoredWarmStart().initialise(InitContext(fresh, weights)).anchor
        >>> len(anchor), torch.equal(anchor[1]["head_out.weight"], base.online[1].head_out.weight)
        (2, True)
    """

    name = "anchored"
    gives_anchor = True

    def initialise(self, context: InitContext) -> InitOutcome:
        super().initialise(context)
        anchor = [{k: p.detach().clone() for k, p in net.named_parameters()}
                  for net in context.critics.online]
        return InitOutcome(anchor=anchor)
