"""What the training jobs share: datasets in, a Trainer out, a summary and lineage written.

Holds:
    open_sources -- open and verify datasets, checking they share one pair of spaces.
    config_digest -- SHA-256 of the settings that decide a run's result.
    build_maximizer -- the CEM maximiser for a dataset's action space.
    make_evaluator -- the in-training evaluator (None when evaluation is off).
    write_run_records -- summary.json and lineage.json in the run directory.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path
from typing import Any

from qadapt.config.training_schema import EvalSettings, MaximizerSettings
from qadapt.errors import BadInput


def open_sources(paths: list[str]):
    """ReplayDatasets for ``paths`` (verified), all with the first one's spaces."""
    from qadapt.data import check_spaces, open_dataset

    datasets = [open_dataset(p) for p in paths]
    first = datasets[0]
    for other in datasets[1:]:
        check_spaces(other, first.observation_space.to_space(), first.action_space.to_space(),
                     what=f"dataset {first.path}")
    return datasets


def config_digest(settings: dict[str, Any]) -> str:
    text = json.dumps(settings, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def build_maximizer(settings: MaximizerSettings, action_space):
    import gymnasium as gym

    from qadapt.maximize import CrossEntropyMaximizer

    if not isinstance(action_space, gym.spaces.Box):
        raise BadInput(f"the CEM maximiser needs a Box action space, got {action_space}")
    try:
        return CrossEntropyMaximizer(action_space.low, action_space.high, **settings.as_kwargs())
    except ValueError as err:
        raise BadInput(f"maximizer.{err}") from err


def make_evaluator(settings: EvalSettings, maximizer, dataset):
    """A GreedyEvaluator on the configured env, refusing one whose spaces differ from the
    training data's."""
    if settings.every == 0:
        return None
    from qadapt.data import check_spaces
    from qadapt.envs import make_recorded_env, make_vector_env
    from qadapt.learner.trainer import GreedyEvaluator

    if settings.env_from == "data":
        record = dataset.manifest.environment
        def make(n):
            return make_recorded_env(record, n)
        name = record.id
    else:
        def make(n):
            return make_vector_env(settings.env, settings.variation, n)
        name = settings.env.id
    probe = make(1)
    check_spaces(dataset, probe.single_observation_space, probe.single_action_space,
                 what=f"evaluation env {name}")
    return GreedyEvaluator(make, maximizer, settings.episodes, settings.seed)


def write_run_records(run_dir: Path, summary: dict[str, Any], lineage: dict[str, Any]) -> None:
    from qadapt.data.files import write_text_durably

    run_dir.mkdir(parents=True, exist_ok=True)
    write_text_durably(run_dir / "summary.json", json.dumps(summary, indent=2, sort_keys=True))
    write_text_durably(run_dir / "lineage.json", json.dumps(lineage, indent=2, sort_keys=True))


def plain(obj: Any) -> Any:
    """Dataclass config -> JSON-able dict."""
    return dataclasses.asdict(obj) if dataclasses.is_dataclass(obj) else obj
