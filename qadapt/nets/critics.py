"""Two Q-networks for clipped double-Q, with their target copies.

Holds:
    CriticPair -- online critics, target critics, and how the targets follow the online ones.
"""

from __future__ import annotations

import copy
from collections.abc import Callable

import torch
from torch import nn

from qadapt.nets.q_network import QNetwork


class CriticPair(nn.Module):
    """Online critics ``online[0..1]`` and frozen target copies ``target[0..1]``.

    Targets follow by Polyak averaging (``soft_update(tau)``) or by hard copies
    (``hard_update()``); the learner decides which and when.

    Example:
        >>> from qadapt.nets import QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(4, -torch.ones(2), torch.ones(2),
        ...                                QNetworkConfig(torso=(8,), head=(8,)))
        >>> pair = CriticPair(make, seed=0)
        >>> len(pair.online), len(pair.target)
        (2, 2)
    """

    def __init__(self, make_network: Callable[[], QNetwork], seed: int | None = None) -> None:
        super().__init__()
        if seed is not None:
            # The two critics must differ (clipped double-Q needs two opinions) but be
            # reproducible: draw them from one seeded stream.
            with torch.random.fork_rng():
                torch.manual_seed(seed)
                nets = [make_network(), make_network()]
        else:
            nets = [make_network(), make_network()]
        self.online = nn.ModuleList(nets)
        self.target = nn.ModuleList(copy.deepcopy(net) for net in nets)
        self.target.requires_grad_(False)

    @torch.no_grad()
    def soft_update(self, tau: float) -> None:
        """target <- (1 - tau) * target + tau * online, for every parameter."""
        online = [p for net in self.online for p in net.parameters()]
        target = [p for net in self.target for p in net.parameters()]
        torch._foreach_lerp_(target, online, tau)

    @torch.no_grad()
    def hard_update(self) -> None:
        """target <- online (weights and buffers)."""
        for dst, src in zip(self.target, self.online, strict=True):
            dst.load_state_dict(src.state_dict())

    @torch.no_grad()
    def sync_normalizer(self) -> None:
        """Copy critic 0's observation statistics to every other network."""
        src = self.online[0]
        for net in [*self.online[1:], *self.target]:
            net.set_normalizer(src.obs_mean, src.obs_std)
