"""How a fine-tuning run's critics start: one registry, one small class per strategy.

Holds:
    InitStrategy -- the contract: ``initialise(critics, base_weights)`` -> anchor or None.
    WarmStart -- every pretrained weight (critics, targets, normalisation) is copied.
    FromScratch -- fresh random weights; normalisation from the fine-tuning data.
    INIT_STRATEGIES -- strategy name -> instance; ``init=NAME`` on the command line.

Adding a strategy is one class here and one config file in configs/init/.
"""

from __future__ import annotations

import abc

import torch

from qadapt.errors import BadInput
from qadapt.nets import CriticPair


def _critic_weights(weights: dict[str, torch.Tensor], where: str) -> dict[str, torch.Tensor]:
    state = {k[len("critics."):]: v for k, v in weights.items() if k.startswith("critics.")}
    if not state:
        raise BadInput(f"{where}: holds no critic weights to start from")
    return state


class InitStrategy(abc.ABC):
    """Sets up freshly built critics for fine-tuning.

    ``initialise`` may copy weights from the base checkpoint and returns the anchor weights
    for the L2 penalty (name -> tensor) or None. ``uses_base_statistics`` tells the job
    whether the observation normalisation comes from the base checkpoint (True) or from the
    fine-tuning data (False).
    """

    name: str
    uses_base_statistics: bool

    @abc.abstractmethod
    def initialise(self, critics: CriticPair, base_weights: dict[str, torch.Tensor],
                   where: str) -> dict[str, torch.Tensor] | None: ...


class WarmStart(InitStrategy):
    """Start from every pretrained weight: online and target critics, normalisation.

    Example:
        >>> from qadapt.nets import QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> base, fresh = CriticPair(make, seed=0), CriticPair(make, seed=1)
        >>> weights = {f"critics.{k}": v for k, v in base.state_dict().items()}
        >>> WarmStart().initialise(fresh, weights, "base") is None
        True
        >>> torch.equal(fresh.online[1].head_out.bias, base.online[1].head_out.bias)
        True
    """

    name = "warm"
    uses_base_statistics = True

    def initialise(self, critics, base_weights, where):
        try:
            critics.load_state_dict(_critic_weights(base_weights, where))
        except RuntimeError as err:
            raise BadInput(f"{where}: its critics do not fit this network: "
                           f"{str(err).splitlines()[0]}") from err
        return None


class FromScratch(InitStrategy):
    """Ignore the base weights: the critics keep their fresh random initialisation."""

    name = "scratch"
    uses_base_statistics = False

    def initialise(self, critics, base_weights, where):
        return None


INIT_STRATEGIES: dict[str, InitStrategy] = {s.name: s for s in (WarmStart(), FromScratch())}


def init_strategy(name: str) -> InitStrategy:
    if name not in INIT_STRATEGIES:
        raise BadInput(f"init: got {name!r}, expected one of {', '.join(INIT_STRATEGIES)}")
    return INIT_STRATEGIES[name]
