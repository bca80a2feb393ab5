"""Dataclass schemas of the training jobs: network, maximiser, learner, evaluation, pretrain.

Holds:
    NetworkSettings -- a Q-network's form and widths (-> nets.QNetworkConfig).
    MaximizerSettings -- the CEM settings used for targets and for acting.
    LearnerSettings -- every learner.LearnerConfig field, as an editable config node.
    EvalSettings -- in-training evaluation: env, variation, episodes, how often.
    PretrainJob -- ``qadapt pretrain``: train a Q-function from one or more datasets.
    FinetuneJob -- ``qadapt finetune``: adapt a pretrained Q-function on prior + new data
        (its ``init`` node, learner.init.InitSettings, is the configs/init/ group).
    register_training_schemas -- put them into Hydra's ConfigStore.
"""

from __future__ import annotations

import dataclasses
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hydra.core.config_store import ConfigStore

from qadapt.config.schema import EnvConfig, VariationConfig
from qadapt.errors import BadInput
from qadapt.learner.config import LearnerConfig
from qadapt.learner.init.settings import InitSettings
from qadapt.learner.source_indicator import INDICATOR_KINDS
from qadapt.nets import QNetworkConfig


@dataclass
class NetworkSettings:
    form: str = "late_fusion"
    torso: list[int] = field(default_factory=lambda: [256, 256])
    head: list[int] = field(default_factory=lambda: [64])
    output: str = "sigmoid"
    initial_value: float = 0.1
    layer_norm: bool = False

    def build(self) -> QNetworkConfig:
        try:
            return QNetworkConfig(form=self.form, torso=tuple(self.torso), head=tuple(self.head),
                                  output=self.output, initial_value=self.initial_value,
                                  layer_norm=self.layer_norm)
        except ValueError as err:
            raise BadInput(f"network.{err}") from err


@dataclass
class MaximizerSettings:
    samples: int = 64
    elites: int = 6
    iterations: int = 2
    initial_std: float = 0.5
    warm_std: float = 0.2
    min_std: float = 0.02

    def as_kwargs(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


def _learner_fields() -> list[tuple[str, Any, Any]]:
    hints = typing.get_type_hints(LearnerConfig)
    return [(f.name, hints[f.name], field(default=f.default))
            for f in dataclasses.fields(LearnerConfig)]


# Every LearnerConfig field, editable (LearnerConfig itself is frozen); checked by build().
LearnerSettings = dataclasses.make_dataclass("LearnerSettings", _learner_fields())


def build_learner_config(settings: Any) -> LearnerConfig:
    try:
        return LearnerConfig(**dataclasses.asdict(settings))
    except ValueError as err:
        raise BadInput(f"learner.{err}") from err


@dataclass
class EvalSettings:
    """Periodic greedy evaluation during training (every ``every`` steps; 0 = off).

    ``env_from``: "data" evaluates in the environment the (new) training data was collected
    in, as its manifest records it; "config" uses ``env`` and ``variation`` below.
    """

    env_from: str = "data"
    env: EnvConfig = field(default_factory=EnvConfig)
    variation: VariationConfig = field(default_factory=VariationConfig)
    episodes: int = 200
    every: int = 500
    seed: int = 12345

    def __post_init__(self) -> None:
        if isinstance(self.episodes, bool) or self.episodes < 1:
            raise BadInput(f"eval.episodes: got {self.episodes!r}, expected a positive integer")
        if self.every < 0:
            raise BadInput(f"eval.every: got {self.every!r}, expected an integer >= 0")
        if self.env_from not in ("data", "config"):
            raise BadInput(f"eval.env_from: got {self.env_from!r}, expected 'data' or 'config'")


def _paths(key: str, value: Any) -> list[str]:
    paths = [value] if isinstance(value, str) else list(value or [])
    if not paths:
        raise BadInput(f"{key}: give a dataset path (or a list of them)")
    for path in paths:
        if not Path(path).exists():
            raise BadInput(f"{key}: {path} does not exist")
    return [str(p) for p in paths]


@dataclass
class TrainingRunSettings:
    """What every training job has: length, seed, output, bookkeeping, learner settings."""

    steps: int = 5000
    seed: int = 0
    out: str | None = None
    checkpoint_every: int = 1000
    log_every: int = 100
    memory_limit_mb: int | None = None
    threads: int = 1
    progress: bool = True
    maximizer: MaximizerSettings = field(default_factory=MaximizerSettings)
    learner: LearnerSettings = field(default_factory=LearnerSettings)
    eval: EvalSettings = field(default_factory=EvalSettings)

    def __post_init__(self) -> None:
        if self.steps < 1:
            raise BadInput(f"steps: got {self.steps!r}, expected a positive integer")
        if self.seed < 0:
            raise BadInput(f"seed: got {self.seed!r}, expected a non-negative integer")
        if self.threads < 1:
            raise BadInput(f"threads: got {self.threads!r}, expected a positive integer")


@dataclass
class PretrainJob(TrainingRunSettings):
    """``qadapt pretrain``: train a Q-function from one or more datasets."""

    data: Any = "???"
    shares: Any = None
    network: NetworkSettings = field(default_factory=NetworkSettings)

    def __post_init__(self) -> None:
        super().__post_init__()
        self.data = _paths("data", self.data)
        if self.shares is not None:
            self.shares = [float(s) for s in self.shares]


@dataclass
class FinetuneJob(TrainingRunSettings):
    """``qadapt finetune``: start from an init strategy and train on prior + new data.

    ``share`` is the share of each batch drawn from the new data (the rest from the prior
    data); ``share=1`` trains on the new data alone (then ``prior`` may be omitted).
    ``indicator``: "none", "flag" (a column, 0 on prior rows and 1 on new ones) or
    "per_source" (one column per dataset) appended to observations so the Q-function can
    tell the worlds apart; acting (evaluation, and later collection with the checkpoint)
    feeds the new data's columns. A base trained without one starts with zero weights on
    the new columns.
    The network's form comes from the base checkpoint, so every strategy trains the same
    architecture.
    """

    steps: int = 3000
    base: str = "???"
    prior: Any = None
    new: Any = "???"
    share: float = 0.5
    init: InitSettings = field(default_factory=InitSettings)
    indicator: str = "none"

    def __post_init__(self) -> None:
        super().__post_init__()
        if not Path(self.base).exists():
            raise BadInput(f"base: {self.base} does not exist")
        self.new = _paths("new", self.new)
        if not 0.0 < self.share <= 1.0:
            raise BadInput(f"share: got {self.share!r}, expected a number in (0, 1]")
        if self.share < 1.0:
            self.prior = _paths("prior", self.prior)
        else:
            self.prior = [] if self.prior is None else _paths("prior", self.prior)
        self.init.check_run(self.learner.anchor_weight, has_prior=bool(self.prior))

        if self.indicator not in INDICATOR_KINDS:
            raise BadInput(f"indicator: got {self.indicator!r}, expected one of "
                           f"{', '.join(INDICATOR_KINDS)}")


TRAINING_SCHEMAS: dict[str, tuple[str | None, type]] = {
    "pretrain_schema": (None, PretrainJob),
    "finetune_schema": (None, FinetuneJob),
    "network_schema": ("network", NetworkSettings),
    "maximizer_schema": ("maximizer", MaximizerSettings),
    "learner_schema": ("learner", LearnerSettings),
    "eval_schema": ("eval", EvalSettings),
    "init_schema": ("init", InitSettings),
}


def register_training_schemas() -> None:
    store = ConfigStore.instance()
    for name, (group, node) in TRAINING_SCHEMAS.items():
        store.store(name=name, node=node, group=group)
