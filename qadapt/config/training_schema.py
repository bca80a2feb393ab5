"""Dataclass schemas of the training jobs: network, maximiser, learner, evaluation, pretrain.

Holds:
    NetworkSettings -- every nets.QNetworkConfig field, as an editable config node.
    MaximizerSettings -- the maximiser's kind, then every CrossEntropyMaximizer setting but
        the bounds, likewise.
    LearnerSettings -- every learner.LearnerConfig field, likewise.
    build_runtime -- the runtime object from its node: the one place a node becomes it.
    EvalSettings -- in-training evaluation: env, variation, episodes, how often.
    PretrainJob -- ``qadapt pretrain``: train a Q-function from one or more datasets.
    FinetuneJob -- ``qadapt finetune``: adapt a pretrained Q-function on prior + new data
        (its ``init`` node, learner.init.InitSettings, is the configs/init/ group).
    register_training_schemas -- put them into Hydra's ConfigStore.
"""

from __future__ import annotations

import dataclasses
import inspect
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
from qadapt.learner.value_head import AUTO
from qadapt.maximize import CrossEntropyMaximizer
from qadapt.nets import QNetworkConfig


def _editable(annotation: Any) -> Any:
    """The config-node type of a runtime field: tuples become lists (OmegaConf has no tuples)."""
    return list[typing.get_args(annotation)[0]] if typing.get_origin(annotation) is tuple else (
        annotation)


def _node_field(default: Any) -> Any:
    if isinstance(default, tuple | list):
        return field(default_factory=lambda value=tuple(default): list(value))
    return field(default=default)


def _settings_of(name: str, runtime: type, exclude: tuple[str, ...] = (),
                 leading: tuple[tuple[str, type, Any], ...] = (),
                 undecided: dict[str, tuple[type, Any]] | None = None) -> type:
    """An editable config-node dataclass with exactly the runtime object's fields, types and
    defaults: a runtime dataclass's fields, or a class's constructor parameters (after the
    ``leading`` (name, type, default) fields, which choose among runtime objects). The runtime
    object stays the one schema; the node only lets Hydra merge overrides into it.
    ``undecided`` fields get a (type, default) that the job settles before building the object
    ("auto": chosen from the data; None: taken from the base checkpoint, or the runtime's
    default)."""
    if dataclasses.is_dataclass(runtime):
        hints = typing.get_type_hints(runtime)
        specs = [(f.name, hints[f.name], f.default) for f in dataclasses.fields(runtime)]
    else:
        hints = typing.get_type_hints(runtime.__init__)
        specs = [(p.name, hints[p.name], p.default)
                 for p in inspect.signature(runtime).parameters.values()]
    undecided = undecided or {}
    specs = [(n, *undecided.get(n, (t, d))) for n, t, d in specs]
    specs = [*leading, *((n, t, d) for n, t, d in specs if n not in exclude)]
    return dataclasses.make_dataclass(
        name, [(n, _editable(t), _node_field(d)) for n, t, d in specs])


def build_runtime(runtime: type, node: Any, key: str, **extra: Any) -> Any:
    """``runtime(**node)`` (lists back to tuples where the runtime field is a tuple), with a
    failed check reported as BadInput under ``key``. The one place a node becomes the object.

    Example:
        >>> node = NetworkSettings(head=[32], output="linear")
        >>> build_runtime(QNetworkConfig, node, "network").head
        (32,)
    """
    hints = typing.get_type_hints(runtime if dataclasses.is_dataclass(runtime)
                                  else runtime.__init__)
    values = {k: tuple(v) if typing.get_origin(hints.get(k)) is tuple else v
              for k, v in dataclasses.asdict(node).items()}
    try:
        return runtime(**extra, **values)
    except ValueError as err:
        raise BadInput(f"{key}.{err}") from err


# Config nodes of runtime objects: each has exactly the fields of the object it builds.
# ``output`` and the learner's ``loss``: "auto" picks them from the data's rewards
# (learner.value_head); the reward scale and shift: None takes the base's (fine-tuning) or 1, 0.
NETWORK_UNDECIDED = {"output": (str, AUTO)}
NetworkSettings = _settings_of("NetworkSettings", QNetworkConfig, undecided=NETWORK_UNDECIDED)
# ``kind``: "auto" (exhaustive for a Discrete action space, CEM for a Box), "cem" or
# "exhaustive"; the other fields are the CEM's, unused by the exhaustive search.
# The CEM's settings are None until the job settles them: the base checkpoint's when
# fine-tuning, else the CEM's own defaults (jobs.training_run.settle_maximizer).
MAXIMIZER_CHOICE = (("kind", str, "auto"),)
MAXIMIZER_UNDECIDED = {
    name: (int | None, None) if name in ("samples", "elites", "iterations") else
    (float | None, None)
    for name in inspect.signature(CrossEntropyMaximizer).parameters if name not in ("low", "high")}
MaximizerSettings = _settings_of("MaximizerSettings", CrossEntropyMaximizer,
                                 exclude=("low", "high"), leading=MAXIMIZER_CHOICE,
                                 undecided=MAXIMIZER_UNDECIDED)
# None for the CQL weight, learning rate and refresh interval: the value head's settings
# (learner.value_head.SETTINGS_OF_OUTPUT).
LEARNER_UNDECIDED = {
    "loss": (str, AUTO), "reward_scale": (float | None, None),
    "reward_shift": (float | None, None), "conservative_weight": (float | None, None),
    "learning_rate": (float | None, None), "refresh_every": (int | None, None)}
LearnerSettings = _settings_of("LearnerSettings", LearnerConfig, undecided=LEARNER_UNDECIDED)


def build_learner_config(settings: Any) -> LearnerConfig:
    return build_runtime(LearnerConfig, settings, "learner")


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
