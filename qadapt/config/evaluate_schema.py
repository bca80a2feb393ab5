"""Dataclass schema of ``qadapt evaluate``, registered in Hydra's ConfigStore.

Holds:
    EvaluateJob -- checkpoints, environment, variations, episodes and output of an evaluation.
    register_evaluate_schema -- put EvaluateJob into Hydra's ConfigStore.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hydra.core.config_store import ConfigStore

from qadapt.config.schema import EnvConfig, VariationConfig, _non_negative_int, _positive_int
from qadapt.errors import BadInput


@dataclass
class EvaluateJob:
    """``qadapt evaluate``: greedy CEM episodes of checkpoints under variations.

    ``ckpt`` is one path or a list; each is a checkpoint directory or a run directory (its
    summary.json names the checkpoint). ``env`` null (the default) evaluates each checkpoint
    in the environment its metadata records (id and constructor arguments; the recorded
    perturbations are dropped, the variation chosen here applies); ``env=NAME`` picks one.
    ``variations`` (a list of ``variation`` group option names) evaluates every checkpoint
    under each of them; when it is null the single ``variation`` node is used.
    ``num_envs`` caps how many episodes run side by side in one vector env.
    """

    ckpt: Any = "???"
    env: EnvConfig | None = None
    variation: VariationConfig = field(default_factory=VariationConfig)
    variations: list[str] | None = None
    episodes: int = 200
    seed: int = 777
    num_envs: int = 256
    threads: int = 1
    out: str | None = None

    def __post_init__(self) -> None:
        paths = [self.ckpt] if isinstance(self.ckpt, str) else list(self.ckpt or [])
        if not paths:
            raise BadInput("ckpt: give a checkpoint or run directory (or a list of them)")
        for path in paths:
            if not isinstance(path, str) or not path:
                raise BadInput(f"ckpt: got {path!r}, expected a checkpoint or run directory")
            if not Path(path).exists():
                raise BadInput(f"ckpt: {path} does not exist")
        self.ckpt = [str(p) for p in paths]
        _positive_int("episodes", self.episodes)
        _non_negative_int("seed", self.seed)
        _positive_int("num_envs", self.num_envs)
        _positive_int("threads", self.threads)
        if self.variations is not None:
            if not self.variations:
                raise BadInput("variations: got an empty list, expected variation names")
            if self.variation.name != "none":
                raise BadInput(
                    f"variation={self.variation.name} and variations={self.variations}: give "
                    "one of them (variations=[a,b] evaluates under each)"
                )
            self.variations = [str(name) for name in self.variations]


def register_evaluate_schema() -> None:
    """Store EvaluateJob as ``evaluate_schema`` (idempotent)."""
    ConfigStore.instance().store(name="evaluate_schema", node=EvaluateJob)
