"""Dataclass schema of ``qadapt score``, registered in Hydra's ConfigStore.

Holds:
    ValueFitNode -- fitted Q evaluation's budget as a config node (learner.policy_value's
        ValueFitSettings, field for field).
    ScoreJob -- checkpoints, held-out data, budget and output of an offline scoring.
    register_score_schema -- put ScoreJob into Hydra's ConfigStore.
"""

from __future__ import annotations

import dataclasses
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hydra.core.config_store import ConfigStore

from qadapt.config.schema import _non_negative_int, _positive_int
from qadapt.errors import BadInput
from qadapt.learner.policy_value import ValueFitSettings

_FIT_TYPES = typing.get_type_hints(ValueFitSettings)
ValueFitNode = dataclasses.make_dataclass(
    "ValueFitNode", [(f.name, _FIT_TYPES[f.name], field(default=f.default))
                     for f in dataclasses.fields(ValueFitSettings)])


@dataclass
class ScoreJob:
    """``qadapt score``: each checkpoint's greedy policy valued from held-out data alone.

    ``ckpt`` is one path or a list; a checkpoint directory is scored itself, any other
    directory (a run, chain or study) means every checkpoint found below it. ``data`` is the
    held-out dataset (from ``qadapt split`` or ``qadapt import``). ``fit`` is fitted Q
    evaluation's budget. ``allow_overlap`` scores even when held-out episodes also trained a
    checkpoint (a warning line instead of a refusal). ``seed`` seeds the policy's action
    search and the bootstrap; ``reps`` is the bootstrap's resample count.
    """

    ckpt: Any = "???"
    data: str = "???"
    fit: ValueFitNode = field(default_factory=ValueFitNode)
    allow_overlap: bool = False
    seed: int = 0
    reps: int = 2000
    threads: int = 1
    out: str | None = None

    def __post_init__(self) -> None:
        paths = [self.ckpt] if isinstance(self.ckpt, str) else list(self.ckpt or [])
        if not paths:
            raise BadInput("ckpt: give a checkpoint, run, chain or study directory (or a list)")
        for path in paths:
            if not isinstance(path, str) or not path:
                raise BadInput(f"ckpt: got {path!r}, expected a checkpoint or a directory")
            if not Path(path).is_dir():
                raise BadInput(f"ckpt: {path} is not a directory")
        self.ckpt = [str(p) for p in paths]
        if not Path(self.data).is_dir():
            raise BadInput(f"data: {self.data} is not a dataset directory")
        _non_negative_int("seed", self.seed)
        _positive_int("reps", self.reps)
        _positive_int("threads", self.threads)

    def fit_settings(self) -> ValueFitSettings:
        """The ``fit`` node as learner.policy_value's settings (a bad value is BadInput)."""
        try:
            return ValueFitSettings(**dataclasses.asdict(self.fit))
        except ValueError as err:
            raise BadInput(f"fit.{err}") from err


def register_score_schema() -> None:
    """Store ScoreJob as ``score_schema`` (idempotent)."""
    ConfigStore.instance().store(name="score_schema", node=ScoreJob)
