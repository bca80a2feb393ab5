"""Dataclass schemas for qadapt's config groups and jobs, registered in Hydra's ConfigStore.

Holds:
    EnvConfig -- which gymnasium environment (id and keyword arguments).
    VariationConfig -- what is perturbed: pick-cell families, generic wrappers, reveal.
    PolicyConfig -- what acts while collecting: scripted, random, or a checkpoint.
    CollectJob, ImportJob -- the job schemas so far.
    register_schemas -- put every schema into Hydra's ConfigStore.
    to_typed -- turn a composed DictConfig into its dataclass, running every check.

YAML files under configs/ choose values; the code receives these typed objects, never raw
dicts. Checks that OmegaConf cannot express (ranges, exclusive options, paths) run in
``__post_init__`` when ``to_typed`` builds the object, before any work starts.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hydra.core.config_store import ConfigStore
from omegaconf import DictConfig, OmegaConf

from qadapt.checks import non_negative_int, positive_int
from qadapt.errors import BadInput

PICK_CELL = "demo_envs/PickCell-v0"


def _positive_int(key: str, value: object, allow_none: bool = False) -> None:
    if not (value is None and allow_none):
        positive_int(key, value, BadInput)


def _non_negative_int(key: str, value: object) -> None:
    non_negative_int(key, value, BadInput)


@dataclass
class EnvConfig:
    """A gymnasium environment: ``id`` plus constructor ``kwargs``."""

    id: str = PICK_CELL
    kwargs: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if not isinstance(self.id, str) or not self.id:
            raise BadInput(f"env.id: got {self.id!r}, expected a gymnasium environment id")
        # gymnasium reads "module:EnvId" as "import module first": a config or a dataset's
        # manifest could then make qadapt import any installed module.
        if ":" in self.id:
            raise BadInput(f"env.id: got {self.id!r}; ids of the form module:Name would import "
                           "a module, give a registered id (e.g. Pendulum-v1)")


@dataclass
class VariationConfig:
    """A variation of the environment.

    ``perturbations`` are pick-cell families with magnitudes (docs/pick_cell.md);
    ``wrappers`` are generic perturbation wrappers for any Box-space env
    (``qadapt.wrappers.apply_perturbations``); ``reveal`` shows what a sensor could see.
    """

    name: str = "none"
    perturbations: dict[str, float] = field(default_factory=dict)
    wrappers: dict[str, dict[str, Any]] = field(default_factory=dict)
    reveal: bool = False


@dataclass
class PolicyConfig:
    """What acts during collection.

    kind: "scripted" (the pick cell's scripted picker), "random" (uniform over the action
    space) or "checkpoint" (a Q-function's greedy CEM policy; ``checkpoint`` is its path).
    noise: scripted picker's Gaussian action noise, or the checkpoint policy's Gaussian
    exploration (fraction of the half-range). random_rate: share of uniform random actions.
    """

    kind: str = "scripted"
    noise: float = 0.15
    random_rate: float = 0.0
    checkpoint: str | None = None

    def __post_init__(self) -> None:
        kinds = ("scripted", "random", "checkpoint")
        if self.kind not in kinds:
            raise BadInput(f"policy.kind: got {self.kind!r}, expected one of {', '.join(kinds)}")
        if not 0.0 <= self.noise <= 2.0:
            raise BadInput(f"policy.noise: got {self.noise!r}, expected a number in [0, 2]")
        if not 0.0 <= self.random_rate <= 1.0:
            raise BadInput(
                f"policy.random_rate: got {self.random_rate!r}, expected a number in [0, 1]"
            )
        if self.kind == "checkpoint":
            if not self.checkpoint:
                raise BadInput("policy.checkpoint: a checkpoint policy needs a checkpoint path")
            if not Path(self.checkpoint).exists():
                raise BadInput(f"policy.checkpoint: {self.checkpoint} does not exist")


@dataclass
class CollectJob:
    """``qadapt collect``: run a policy in an environment and write a dataset."""

    env: EnvConfig = field(default_factory=EnvConfig)
    variation: VariationConfig = field(default_factory=VariationConfig)
    policy: PolicyConfig = field(default_factory=PolicyConfig)
    episodes: int | None = 200
    transitions: int | None = None
    seed: int = 0
    out: str | None = None
    num_envs: int = 256
    overwrite: bool = False
    progress: bool = True

    def __post_init__(self) -> None:
        if self.transitions is not None:
            _positive_int("transitions", self.transitions)
            if self.episodes is not None:
                raise BadInput(
                    "episodes and transitions: give one of them (set episodes=null to count "
                    "transitions)"
                )
        else:
            _positive_int("episodes", self.episodes)
        _non_negative_int("seed", self.seed)
        _positive_int("num_envs", self.num_envs)


@dataclass
class ImportJob:
    """``qadapt import``: build a dataset from a user's own ``.npz`` or ``.npy`` arrays."""

    source: str = "???"
    out: str | None = None
    fields: dict[str, str] = field(default_factory=dict)
    env: EnvConfig = field(default_factory=EnvConfig)
    variation: VariationConfig = field(default_factory=VariationConfig)
    seed: int | None = None
    overwrite: bool = False

    def __post_init__(self) -> None:
        if not Path(self.source).exists():
            raise BadInput(f"source: {self.source} does not exist")


@dataclass
class SplitJob:
    """``qadapt split``: divide a dataset by episode into a training and a held-out part.

    ``out_train`` / ``out_held_out`` default to ``<source>_train`` / ``<source>_held_out``
    beside the source (filled in here, so the job always gets both paths).
    """

    source: str = "???"
    held_out_fraction: float = 0.1
    seed: int = 0
    out_train: str | None = None
    out_held_out: str | None = None
    overwrite: bool = False

    def __post_init__(self) -> None:
        if not Path(self.source).is_dir():
            what = "is not a directory" if Path(self.source).exists() else "does not exist"
            raise BadInput(f"source: {self.source} {what}; expected a dataset directory")
        fraction = self.held_out_fraction
        # `not 0 < x < 1` also refuses NaN, which fails every comparison.
        if isinstance(fraction, bool) or not 0.0 < fraction < 1.0:
            raise BadInput(
                f"held_out_fraction: got {fraction!r}, expected a number between 0 and 1 "
                "(exclusive)"
            )
        _non_negative_int("seed", self.seed)
        # abspath first so "data/run/" and "." still give a sibling name, never "run/_train".
        stem = os.path.abspath(self.source)
        if not self.out_train:
            self.out_train = f"{stem}_train"
        if not self.out_held_out:
            self.out_held_out = f"{stem}_held_out"


SCHEMAS: dict[str, tuple[str | None, type]] = {
    "collect_schema": (None, CollectJob),
    "import_schema": (None, ImportJob),
    "split_schema": (None, SplitJob),
    "env_schema": ("env", EnvConfig),
    "variation_schema": ("variation", VariationConfig),
    "policy_schema": ("policy", PolicyConfig),
}


def register_schemas() -> None:
    """Store every schema in Hydra's ConfigStore (idempotent)."""
    store = ConfigStore.instance()
    for name, (group, node) in SCHEMAS.items():
        store.store(name=name, node=node, group=group)


def to_typed(cfg: DictConfig, schema: type) -> Any:
    """The dataclass instance for a composed config (runs every ``__post_init__`` check)."""
    plain = OmegaConf.to_container(cfg, resolve=True, throw_on_missing=True)
    plain.pop("hydra", None)
    merged = OmegaConf.merge(OmegaConf.structured(schema), plain)
    return OmegaConf.to_object(merged)
