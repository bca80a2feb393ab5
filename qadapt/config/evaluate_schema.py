"""Dataclass schema of ``qadapt evaluate``, registered in Hydra's ConfigStore.

Holds:
    EvaluateJob -- checkpoints, environment, variations, episodes and output of an evaluation.
    variation_by_name -- the VariationConfig of one option of the ``variation`` config group.
    register_evaluate_schema -- put EvaluateJob into Hydra's ConfigStore.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

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
    seed: int = 12345
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


def variation_by_name(name: str) -> VariationConfig:
    """The typed config of ``configs/variation/NAME.yaml`` (or a stored option of that group).

    Composed with Hydra's compose API: inside a running job (any launcher) with the job's own
    search path, elsewhere with qadapt's configs/ folder. BadInput names the unknown option and
    the options there are.
    """
    from hydra import compose, initialize_config_dir
    from hydra.core.global_hydra import GlobalHydra

    from qadapt.config.hydra_entry import CONFIG_DIR, _first_line
    from qadapt.config.schema import register_schemas, to_typed

    register_schemas()
    overrides = [f"+variation={name}"]
    try:
        if GlobalHydra.instance().is_initialized():
            cfg = compose(overrides=overrides)
        else:
            with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
                cfg = compose(overrides=overrides)
        return to_typed(cfg.variation, VariationConfig)
    except BadInput:
        raise
    except Exception as err:  # Hydra's composition errors: name the option and the choices
        # "In '<primary config>': Could not find ..." -> "Could not find ..."
        message = re.sub(r"^In '[^']*': ", "", _first_line(err))
        raise BadInput(f"variations: {message}") from err


def register_evaluate_schema() -> None:
    """Store EvaluateJob as ``evaluate_schema`` (idempotent)."""
    from hydra.core.config_store import ConfigStore

    ConfigStore.instance().store(name="evaluate_schema", node=EvaluateJob)
