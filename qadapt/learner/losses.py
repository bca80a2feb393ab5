"""Loss terms of the learner, as plain functions of tensors.

Holds:
    td_loss -- cross-entropy (sigmoid outputs), Huber or squared error against targets.
    conservative_penalty -- the CQL(H) regulariser of Kumar et al. (2020) on sampled actions.
    anchor_penalty -- the L2-SP penalty of Li, Grandvalet and Davoine (2018) towards anchors.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import torch
import torch.nn.functional as F
from torch import nn


def td_loss(raw: torch.Tensor, targets: torch.Tensor, kind: str, huber_delta: float = 1.0):
    """Mean loss of raw outputs [B] against targets [B]; for "cross_entropy" the raw outputs
    are logits and targets must lie in [0, 1]."""
    if kind == "cross_entropy":
        return F.binary_cross_entropy_with_logits(raw, targets)
    if kind == "huber":
        return F.huber_loss(raw, targets, delta=huber_delta)
    return F.mse_loss(raw, targets)


def conservative_penalty(
    sampled_values: torch.Tensor, data_values: torch.Tensor, temperature: float = 1.0
) -> torch.Tensor:
    """CQL(H): mean over states of T * logsumexp(Q(s, a_k) / T) - Q(s, a_data).

    ``sampled_values`` [B, K] are Q at actions drawn for each state (uniform and the
    maximiser's), ``data_values`` [B] at the dataset's actions. The log K offset makes the
    penalty zero when every action has the data action's value.
    """
    k = sampled_values.shape[1]
    soft_max = temperature * (
        torch.logsumexp(sampled_values / temperature, dim=1) - math.log(k)
    )
    return (soft_max - data_values).mean()


def anchor_penalty(network: nn.Module, anchor: Mapping[str, torch.Tensor]) -> torch.Tensor:
    """0.5 * sum of squared distances of ``network``'s named parameters from ``anchor``."""
    total = torch.zeros(())
    params = dict(network.named_parameters())
    for name, reference in anchor.items():
        total = total + (params[name] - reference).pow(2).sum()
    return 0.5 * total
