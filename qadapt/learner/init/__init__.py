"""How a fine-tuning run's critics start: the strategy contract, the strategies, the registry.

Holds (each from its own module):
    InitStrategy, InitContext, InitOutcome, network_part -- the contract [contract]
    copy_from_base, freeze -- copying base parts into fresh critics, holding parts fixed
        [base_weights]
    WarmStart, AnchoredWarmStart -- every pretrained weight; plus the L2-SP penalty [warm]
    FromScratch -- fresh random weights [scratch]
    TorsoTransfer, FrozenTorso -- pretrained torso, fresh head; torso trained or fixed [torso]
    SupervisedTorso -- torso from return-to-go regression on the prior data [auxiliary]
    RegressionSettings, ReturnRegressionData, fit_return_regression -- that regression
        [regression]
    episode_ends, discounted_return_to_go, dataset_return_to_go -- Monte-Carlo return-to-go
        [return_to_go]
    INIT_STRATEGIES -- name -> strategy class [registry]
    InitSettings, init_strategy -- the ``init`` config node; ``init=NAME`` -> strategy [settings]

Adding a strategy: a class with the contract's claims (``uses_base_statistics``,
``base_parts``, ``frozen_parts``, ``gives_anchor``, ``needs_prior``), an entry in the
registry and a config file configs/init/NAME.yaml; tests/learner/test_init_contract.py then
tests it automatically.
"""

from qadapt.learner.init.auxiliary import SupervisedTorso
from qadapt.learner.init.base_weights import copy_from_base, freeze
from qadapt.learner.init.contract import (
    PARTS,
    InitContext,
    InitOutcome,
    InitStrategy,
    network_part,
)
from qadapt.learner.init.registry import INIT_STRATEGIES
from qadapt.learner.init.regression import (
    RegressionSettings,
    ReturnRegressionData,
    fit_return_regression,
)
from qadapt.learner.init.return_to_go import (
    dataset_return_to_go,
    discounted_return_to_go,
    episode_ends,
)
from qadapt.learner.init.scratch import FromScratch
from qadapt.learner.init.settings import InitSettings, init_strategy
from qadapt.learner.init.torso import FrozenTorso, TorsoTransfer
from qadapt.learner.init.warm import AnchoredWarmStart, WarmStart

__all__ = [
    "INIT_STRATEGIES",
    "PARTS",
    "AnchoredWarmStart",
    "FromScratch",
    "FrozenTorso",
    "InitContext",
    "InitOutcome",
    "InitSettings",
    "InitStrategy",
    "RegressionSettings",
    "ReturnRegressionData",
    "SupervisedTorso",
    "TorsoTransfer",
    "WarmStart",
    "copy_from_base",
    "dataset_return_to_go",
    "discounted_return_to_go",
    "episode_ends",
    "fit_return_regression",
    "freeze",
    "init_strategy",
    "network_part",
]
