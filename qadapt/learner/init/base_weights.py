"""Copying parts of a base checkpoint's critics into fresh ones, and holding parts fixed.

Holds:
    copy_from_base -- copy chosen parts of each online critic from the base weights, then
        make the targets equal the online critics.
    freeze -- turn off gradients for chosen parts of every online critic.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import torch

from qadapt.errors import BadInput
from qadapt.learner.init.contract import network_part
from qadapt.nets import CriticPair


@torch.no_grad()
def copy_from_base(critics: CriticPair, base_weights: Mapping[str, torch.Tensor],
                   parts: Iterable[str], where: str) -> None:
    """Copy ``parts`` of online critic j from ``critics.online.j.*`` in ``base_weights``.

    The targets are then set equal to the online critics: the base's own targets lag its
    online critics by an amount that only mattered to its training run.
    Raises BadInput naming ``where`` when a needed weight is missing or has another shape.
    """
    parts = set(parts)
    for j, net in enumerate(critics.online):
        prefix = f"critics.online.{j}."
        own = net.state_dict()
        keys = [k for k in own if network_part(k) in parts]
        for key in keys:
            if prefix + key not in base_weights:
                raise BadInput(f"{where}: holds no weight {prefix + key} to start from")
            source = base_weights[prefix + key]
            if tuple(source.shape) != tuple(own[key].shape):
                raise BadInput(f"{where}: its critics do not fit this network: {prefix + key} "
                               f"has shape {list(source.shape)}, this network "
                               f"{list(own[key].shape)}")
            own[key].copy_(source)
    critics.hard_update()


def freeze(critics: CriticPair, parts: Iterable[str]) -> None:
    """requires_grad False for every parameter of ``parts`` in each online critic (the
    targets never take gradients)."""
    parts = set(parts)
    for net in critics.online:
        for name, param in net.named_parameters():
            if network_part(name) in parts:
                param.requires_grad_(False)
