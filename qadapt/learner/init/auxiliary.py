"""A torso pretrained on a different, supervised problem: return-to-go regression.

Holds:
    SupervisedTorso -- each online critic (fresh, seeded) is trained to regress the prior
        data's Monte-Carlo discounted return-to-go from (state, action); its torso is kept
        and its head reset to the fresh initialisation. The base checkpoint gives only the
        architecture.
"""

from __future__ import annotations

import copy
from typing import Any

import torch

from qadapt.errors import BadInput
from qadapt.learner.init.contract import InitContext, InitOutcome, InitStrategy, network_part
from qadapt.learner.init.regression import (
    RegressionSettings,
    ReturnRegressionData,
    fit_return_regression,
)


class SupervisedTorso(InitStrategy):
    """Torso from supervised return-to-go regression on the prior data, fresh head.

    The normaliser is the one the job set from the fine-tuning data (prior and new); the
    regression runs with it. Both online critics see the same minibatches but start from
    their own seeded weights, so their torsos differ.

    Example:
        >>> import numpy as np
        >>> from qadapt.nets import CriticPair, QNetworkConfig, build_q_network
        >>> class Arrays:  # anything with ``array(name)`` as a ReplayDataset has
        ...     def __init__(self, **fields): self.fields = fields
        ...     def array(self, name): return self.fields[name]
        >>> prior = Arrays(observations=np.eye(4, 3, dtype=np.float32),
        ...                actions=np.zeros((4, 1), np.float32),
        ...                rewards=np.array([0, 1, 0, 1], np.float32),
        ...                terminated=np.array([0, 1, 0, 1], bool), truncated=np.zeros(4, bool),
        ...                episode_index=np.array([0, 0, 1, 1]))
        >>> make = lambda: build_q_network(3, -torch.ones(1), torch.ones(1),
        ...                                QNetworkConfig(torso=(4,), head=(4,)))
        >>> strategy = SupervisedTorso(RegressionSettings(steps=20, batch_size=4))
        >>> outcome = strategy.initialise(InitContext(CriticPair(make, seed=1), {},
        ...                                           prior=[prior], gamma=0.5))
        >>> outcome.report["regression_last_loss"] < outcome.report["regression_first_loss"]
        True
    """

    name = "auxiliary"
    uses_base_statistics = False
    needs_prior = True

    def __init__(self, regression: RegressionSettings | None = None) -> None:
        regression = RegressionSettings() if regression is None else regression
        if not isinstance(regression, RegressionSettings):
            raise ValueError(f"regression: got {regression!r}, expected RegressionSettings")
        self.regression = regression

    @classmethod
    def from_settings(cls, settings: Any) -> SupervisedTorso:
        return cls(settings.regression)

    def describe(self) -> dict[str, Any]:
        return {"name": self.name, "regression": {
            "steps": self.regression.steps, "learning_rate": self.regression.learning_rate,
            "batch_size": self.regression.batch_size}}

    def initialise(self, context: InitContext) -> InitOutcome:
        if not context.prior:
            raise BadInput("init: 'auxiliary' trains its torso on the prior data; give prior=...")
        critics = context.critics
        data = ReturnRegressionData.from_datasets(context.prior, context.gamma)
        fresh = [copy.deepcopy(net.state_dict()) for net in critics.online]
        report = fit_return_regression(list(critics.online), data, self.regression,
                                       context.seed)
        with torch.no_grad():
            for net, start in zip(critics.online, fresh, strict=True):
                own = net.state_dict()
                for key, value in start.items():
                    if network_part(key) != "torso":
                        own[key].copy_(value)
        critics.hard_update()
        return InitOutcome(report={"regression_" + k: v for k, v in report.items()})
