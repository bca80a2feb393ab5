"""Dataclass schema of ``qadapt chain``: an ordered list of adaptations, one per variation.

Holds:
    ExploreSettings -- which policy collects each step's new data, and its exploration noise.
    ChainJob -- the chain's plan: base checkpoint, prior data, variations, per-step budgets.
    register_chain_schemas -- put them into Hydra's ConfigStore.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hydra.core.config_store import ConfigStore

from qadapt.config.compose import variation_by_name
from qadapt.config.schema import EnvConfig, _positive_int
from qadapt.config.training_schema import (
    FinetuneJob,
    TrainingRunSettings,
    _paths,
    register_training_schemas,
)
from qadapt.errors import BadInput
from qadapt.learner.init.settings import InitSettings

EXPLORE_POLICIES = ("base", "latest")


@dataclass
class ExploreSettings:
    """How a chain step collects its new data.

    ``policy``: "base" explores with the chain's base checkpoint at every step (the policy
    running on the robot when the change arrived), "latest" with the previous step's result.
    ``noise``: Gaussian exploration, a fraction of each action dimension's half-range;
    ``random_rate``: share of uniform random actions.
    """

    policy: str = "base"
    noise: float = 0.1
    random_rate: float = 0.0
    num_envs: int = 256

    def __post_init__(self) -> None:
        if self.policy not in EXPLORE_POLICIES:
            raise BadInput(f"explore.policy: got {self.policy!r}, expected one of "
                           f"{', '.join(EXPLORE_POLICIES)}")
        if not 0.0 <= self.noise <= 2.0:
            raise BadInput(f"explore.noise: got {self.noise!r}, expected a number in [0, 2]")
        if not 0.0 <= self.random_rate <= 1.0:
            raise BadInput(f"explore.random_rate: got {self.random_rate!r}, expected a number "
                           "in [0, 1]")
        if self.num_envs < 1:
            raise BadInput(f"explore.num_envs: got {self.num_envs!r}, expected a positive "
                           "integer")


@dataclass
class ChainJob(TrainingRunSettings):
    """``qadapt chain``: for each variation in order, explore it, fine-tune, evaluate.

    Step k fine-tunes from step k-1's checkpoint (step 1 from ``base``) on the prior data plus
    step k's new data (plus every earlier step's new data with ``keep_earlier``) at ``share``
    new, for ``steps`` gradient steps, then evaluates on every variation of the chain and the
    unperturbed cell (``eval_episodes`` each, scenes from ``eval_seed``: not the in-training
    evaluation's scenes, so picking the best checkpoint does not flatter its final score).
    ``episodes`` new episodes per step. ``rounds`` adapts each variation in that many
    steps: the first explores with ``explore.policy``'s checkpoint, every later round with
    the previous round's result, and trains on the prior data plus the earlier rounds' data
    of the same variation, which join the batch side ``earlier_rounds`` names ("prior", or
    "new" beside the round's own data).
    Re-running the same command continues an interrupted chain.
    """

    steps: int = 3000
    base: str = "???"
    prior: Any = "???"
    variations: list[str] = field(default_factory=list)
    episodes: int = 100
    rounds: int = 1
    earlier_rounds: str = "prior"
    share: float = 0.5
    keep_earlier: bool = False
    init: InitSettings = field(default_factory=InitSettings)
    eval_episodes: int = 200
    eval_seed: int = 777
    env: EnvConfig = field(default_factory=EnvConfig)
    explore: ExploreSettings = field(default_factory=ExploreSettings)

    def __post_init__(self) -> None:
        super().__post_init__()
        if not Path(self.base).exists():
            raise BadInput(f"base: {self.base} does not exist")
        self.prior = _paths("prior", self.prior)
        if not self.variations:
            raise BadInput("variations: give the chain's variations, e.g. "
                           "'variations=[finger_offset,drive_lag]'")
        self.variations = [str(v) for v in self.variations]
        for name in self.variations:
            variation_by_name(name)
        _positive_int("episodes", self.episodes)
        _positive_int("rounds", self.rounds)
        if self.earlier_rounds not in ("prior", "new"):
            raise BadInput(f"earlier_rounds: got {self.earlier_rounds!r}, expected prior or new")
        _positive_int("eval_episodes", self.eval_episodes)
        if not 0.0 < self.share < 1.0:
            raise BadInput(f"share: got {self.share!r}, expected a number in (0, 1): a chain "
                           "trains on prior and new data")

    def finetune_settings(self, *, base: str, prior: list[str], new: list[str], out: str,
                          seed: int) -> FinetuneJob:
        """The fine-tuning job of one chain step (validated like ``qadapt finetune``'s)."""
        # Every setting training jobs share carries over as it is; only seed and out differ.
        shared = {f.name: getattr(self, f.name) for f in dataclasses.fields(TrainingRunSettings)}
        return FinetuneJob(**{**shared, "seed": seed, "out": out}, base=base, prior=prior,
                           new=new, share=self.share, init=self.init)


CHAIN_SCHEMAS: dict[str, tuple[str | None, type]] = {
    "chain_schema": (None, ChainJob),
    "explore_schema": ("explore", ExploreSettings),
}


def register_chain_schemas() -> None:
    register_training_schemas()
    store = ConfigStore.instance()
    for name, (group, node) in CHAIN_SCHEMAS.items():
        store.store(name=name, node=node, group=group)
