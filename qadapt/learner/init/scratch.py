"""Starting from nothing: the fine-tuning run trains fresh critics.

Holds:
    FromScratch -- fresh random weights from the run's seed; normalisation from the data.
"""

from __future__ import annotations

from qadapt.learner.init.contract import InitContext, InitOutcome, InitStrategy


class FromScratch(InitStrategy):
    """Ignore the base weights (only its architecture is used): the critics keep their
    seeded random initialisation and the normaliser the job set from the fine-tuning data.

    Example:
        >>> import torch
        >>> from qadapt.nets import CriticPair, QNetworkConfig, build_q_network
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> fresh = CriticPair(make, seed=1)
        >>> FromScratch().initialise(InitContext(fresh, {})).anchor is None
        True
    """

    name = "scratch"
    uses_base_statistics = False

    def initialise(self, context: InitContext) -> InitOutcome:
        context.critics.hard_update()
        return InitOutcome()
