"""What the training jobs share: datasets in, a Trainer out, a summary and lineage written.

Holds:
    open_sources -- open and verify datasets, checking they share one pair of spaces.
    config_digest -- SHA-256 of the settings that decide a run's result.
    settle_maximizer -- the maximiser's unset settings from the base checkpoint or the CEM.
    build_maximizer -- the maximiser the settings ask for, for a dataset's action space.
    with_settled -- a job config with some nodes replaced, without re-running its checks.
    settle_value_head -- the learner's loss and reward scale and the network's output, "auto"
        and inherited settings made concrete (one line says what was chosen).
    value_record -- what a checkpoint records of them, for fine-tuning to inherit.
    outcome_text -- the selected checkpoint's evaluation in words.
    make_evaluator -- the in-training evaluator (None when evaluation is off).
    write_run_records -- summary.json and lineage.json in the run directory.
    TrainingRequest -- what a training job hands run_training.
    run_training -- train, checkpoint, and write the run records.
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import inspect
import json
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from qadapt import layout
from qadapt.checkpoint import CheckpointMetadata, DatasetReference
from qadapt.config.training_schema import (
    EvalSettings,
    LearnerSettings,
    MaximizerSettings,
    TrainingRunSettings,
    build_learner_config,
)
from qadapt.data import MixtureSampler, open_dataset
from qadapt.envs import make_recorded_env, make_vector_env
from qadapt.errors import BadInput
from qadapt.files import strict_json, write_text_durably
from qadapt.jobs.outputs import check_training_folder
from qadapt.learner import FittedQLearner, LearnerConfig
from qadapt.learner.assembly import transition_arrays
from qadapt.learner.source_indicator import TaggedDataset, TaggedSampler
from qadapt.learner.trainer import (
    GreedyEvaluator,
    Trainer,
    TrainingPlan,
    mean_return,
    success_rate,
)
from qadapt.learner.value_head import settle_learner
from qadapt.locking import hold_directory
from qadapt.maximize import KINDS, CrossEntropyMaximizer, maximizer_for_space, resolve_kind
from qadapt.spaces import check_spaces


def open_sources(paths: list[str]):
    """ReplayDatasets for ``paths`` (verified), all with the first one's spaces."""
    datasets = [open_dataset(p) for p in paths]
    first = datasets[0]
    for other in datasets[1:]:
        check_spaces(other, first.observation_space.to_space(), first.action_space.to_space(),
                     what=f"dataset {first.path}")
    return datasets


def config_digest(settings: dict[str, Any]) -> str:
    text = json.dumps(settings, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def build_maximizer(settings: MaximizerSettings, action_space, say=print):
    """The maximiser the ``maximizer`` node asks for (its kind, "auto" resolved for
    ``action_space``), built by maximize's factory; a bad setting or a kind the space does
    not allow is BadInput. ``say`` gets the one line naming the choice."""
    settings = settle_maximizer(settings)
    values = dataclasses.asdict(settings)
    kind = values.pop("kind")
    try:
        chosen = resolve_kind(kind, action_space)
        maximizer = maximizer_for_space(kind, action_space, values)
    except ValueError as err:
        raise BadInput(f"maximizer.{err}") from err
    why = " (auto: the action space is " + type(action_space).__name__ + ")" if (
        kind == "auto") else ""
    if chosen == "exhaustive":
        say(f"maximizer: exhaustive over the {action_space.n} choices of {action_space}{why}")
    else:
        say(f"maximizer: CEM, {settings.samples} samples x {settings.iterations} iterations"
            f"{why}")
    return maximizer


def settle_maximizer(settings: MaximizerSettings,
                     base: dict[str, Any] | None = None) -> MaximizerSettings:
    """The ``maximizer`` node with nothing left unset: each CEM setting left at None takes
    the base checkpoint's (``base``, its ``network["maximizer"]`` record, when fine-tuning),
    else the CEM's own default; kind "auto" takes the base's kind. Set values are kept.

    Example:
        >>> settle_maximizer(MaximizerSettings(samples=8), {"kind": "cem", "elites": 4}).elites
        4
    """
    base = base or {}
    values = dataclasses.asdict(settings)
    defaults = inspect.signature(CrossEntropyMaximizer).parameters
    for name, value in values.items():
        if value is None:
            inherited = base.get(name)
            values[name] = inherited if inherited is not None else defaults[name].default
    if values["kind"] == "auto" and base.get("kind") in KINDS:
        values["kind"] = base["kind"]
    return type(settings)(**values)


def value_record(learner: LearnerConfig, output: str) -> dict[str, Any]:
    """The units of a run's Q-values, as checkpoints record them (``network["value"]``)."""
    return {"output": output, "loss": learner.loss, "gamma": learner.gamma,
            "reward_scale": learner.reward_scale, "reward_shift": learner.reward_shift}


def settle_value_head(learner: LearnerSettings, output: str, datasets,
                      base: dict[str, Any] | None = None, say=print) -> tuple[Any, str]:
    """(learner node, network output) with nothing left undecided (learner.value_head's
    ``settle_learner``; ``base`` is a base checkpoint's ``value_record``); ``say`` gets the
    line naming the choice. A combination that cannot work is BadInput (one line)."""
    try:
        settled, output, line = settle_learner(learner, output, datasets, base)
    except ValueError as err:
        where = "learner." if str(err).startswith("loss") else "network."
        whose = f" (the base checkpoint has a {output} output)" if base else ""
        raise BadInput(f"{where}{err}{whose}") from err
    say(line)
    return settled, output


def with_settled(cfg, **nodes):
    """A copy of the job config ``cfg`` with ``nodes`` replaced. Not dataclasses.replace: the
    job's __post_init__ has already turned its fields into their checked forms (paths into
    lists, an omitted prior into []) and must not run again on them."""
    settled = copy.copy(cfg)
    for name, node in nodes.items():
        setattr(settled, name, node)
    return settled


def make_evaluator(settings: EvalSettings, maximizer, dataset, acting_columns=None):
    """A GreedyEvaluator on the configured env, refusing one whose spaces differ from the
    training data's."""
    if settings.every == 0:
        return None

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
    return GreedyEvaluator(make, maximizer, settings.episodes, settings.seed,
                           acting_columns=acting_columns)


def outcome_text(summary: dict[str, Any]) -> str:
    """The selected checkpoint's evaluation in words: its greedy success, or (for an env that
    reports none) its mean return; "no evaluation" when evaluation was off."""
    if summary.get("best") is None:
        return "no in-training evaluation"
    rate = summary["best_success_rate"]
    success = "n/a (the env reports no success)" if rate is None else f"{rate:.3f}"
    return f"best greedy success {success}, mean return {summary['best_mean_return']:.4g}"


def write_run_records(run_dir: Path, summary: dict[str, Any], lineage: dict[str, Any]) -> None:
    run_dir.mkdir(parents=True, exist_ok=True)
    write_text_durably(run_dir / layout.SUMMARY, strict_json(summary, indent=2, sort_keys=True))
    write_text_durably(run_dir / layout.LINEAGE, strict_json(lineage, indent=2, sort_keys=True))


def plain(obj: Any) -> Any:
    """Dataclass config -> JSON-able dict."""
    return dataclasses.asdict(obj) if dataclasses.is_dataclass(obj) else obj


# Checkpoints carry a fixed creation time so that the same config and seed give
# byte-identical checkpoints; the wall-clock duration is in summary.json.
def _reproducible_time():
    return datetime(1970, 1, 1, tzinfo=UTC)


@dataclasses.dataclass(frozen=True)
class TrainingRequest:
    """What a training job hands ``run_training``: one object instead of a keyword list.

    ``run`` is the job's typed config (its steps, seed, checkpoint and log intervals, memory
    limit, maximiser, learner and evaluation nodes). ``make_critics(arrays) -> (critics,
    anchor)`` builds the starting critics (and the anchor weights for the L2 penalty, or
    None); it may return a third item, a JSON-able record of how the critics started (the init
    strategy and its settings), which summary.json, lineage.json and every checkpoint's
    metadata (``extra["initialisation"]``) then carry. ``settings`` are what the config digest
    covers. ``indicator`` (a learner.source_indicator.SourceIndicator, or None) appends each
    source's columns to its observations (batches, cached targets, ``make_critics``'s arrays)
    and the acting columns in evaluation; checkpoints record it.
    """

    job: str
    run: TrainingRunSettings
    datasets: list
    shares: list[float] | None
    network_config: Any
    make_critics: Callable
    out: Path
    settings: dict[str, Any]
    eval_dataset: Any
    parent: dict[str, Any] | None = None
    indicator: Any = None


def run_training(request: TrainingRequest) -> dict[str, Any]:
    """Train as ``request`` says; write checkpoints, summary.json and lineage.json in its
    ``out``. Returns the summary."""
    cfg = request.run
    check_training_folder(Path(request.out))
    datasets, indicator, parent = request.datasets, request.indicator, request.parent
    network_config, seed = request.network_config, cfg.seed
    maximizer_settings, eval_settings = settle_maximizer(cfg.maximizer), cfg.eval
    learner_config = build_learner_config(cfg.learner)
    first = datasets[0]
    obs_space, act_space = first.observation_space.to_space(), first.action_space.to_space()
    maximizer = build_maximizer(maximizer_settings, act_space)
    if indicator is not None:
        arrays = [transition_arrays(TaggedDataset(d, indicator.values[i]))
                  for i, d in enumerate(datasets)]
    else:
        arrays = [transition_arrays(d) for d in datasets]
    critics, anchor, *record = request.make_critics(arrays)
    initialisation = record[0] if record else None
    learner = FittedQLearner(critics, maximizer, learner_config, arrays, seed=seed,
                             anchor=anchor)
    memory = None if cfg.memory_limit_mb is None else cfg.memory_limit_mb * 2**20
    shares = [float(x) for x in (request.shares or [1.0 / len(datasets)] * len(datasets))]
    sampler = MixtureSampler(datasets, shares=shares, batch_size=learner_config.batch_size,
                             seed=seed, memory_limit_bytes=memory)
    if indicator is not None:
        sampler = TaggedSampler(sampler, indicator)
    evaluator = make_evaluator(eval_settings, maximizer, request.eval_dataset,
                               acting_columns=None if indicator is None else indicator.acting)
    settings = {**request.settings, "datasets": [d.fingerprint for d in datasets],
                "parent": None if parent is None else parent["sha256"]}
    digest = config_digest(settings)
    environment = request.eval_dataset.manifest.environment
    metadata = CheckpointMetadata(
        observation_space=obs_space, action_space=act_space,
        network={"q_network": network_config.to_dict(),
                 "maximizer": {**dataclasses.asdict(maximizer_settings),
                               "kind": resolve_kind(maximizer_settings.kind, act_space)},
                 "source_indicator": None if indicator is None else indicator.to_json(),
                 "value": value_record(learner_config, network_config.output)},
        env_id=environment.id, env_kwargs=dict(environment.kwargs),
        gradient_step=0, config_digest=digest,
        parent_checkpoint=None if parent is None else parent["sha256"],
        datasets=tuple(DatasetReference(path=str(d.path), sha256=d.fingerprint)
                       for d in datasets),
        created_at=_reproducible_time(),
        extra={} if initialisation is None else {"initialisation": initialisation},
    )
    plan = TrainingPlan(steps=cfg.steps, eval_every=eval_settings.every if evaluator else 0,
                        checkpoint_every=cfg.checkpoint_every, log_every=cfg.log_every,
                        progress_bar=cfg.progress)
    with hold_directory(request.out, request.job):
        outcome = Trainer(learner, sampler, plan, request.out, metadata, evaluator).run()
        summary = _summary(request, outcome, digest)
        # Each dataset with its share of every batch: which data the checkpoint came from,
        # and how much of it.
        lineage = {"parent_checkpoint": parent,
                   "datasets": [{"path": str(d.path), "sha256": d.fingerprint, "share": share}
                                for d, share in zip(datasets, shares, strict=True)]}
        if initialisation is not None:
            summary["initialisation"] = lineage["initialisation"] = initialisation
        write_run_records(Path(request.out), summary, lineage)
    return summary


def _summary(request: TrainingRequest, outcome, digest: str) -> dict[str, Any]:
    result = outcome.best_path or outcome.last_path
    summary = {
        "job": request.job,
        "steps": outcome.steps,
        "resumed_from_step": outcome.resumed_from,
        "seconds": round(outcome.seconds, 2),
        "evaluations": outcome.history,
        "best": outcome.best,
        "best_success_rate": success_rate(outcome.best),
        "last_success_rate": success_rate(outcome.history[-1] if outcome.history else None),
        "best_mean_return": mean_return(outcome.best),
        "checkpoint": str(result),
        "selected": "best" if outcome.best_path else "last",
        "config_digest": digest,
    }
    return summary
