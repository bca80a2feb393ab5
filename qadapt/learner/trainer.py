"""A training run: gradient steps with evaluation, logging, kept checkpoints and exact resume.

Holds:
    TrainingPlan -- how long to train and how often to evaluate, log and checkpoint.
    GreedyEvaluator -- greedy success of a Q-network on a batched env (cheap, seeded).
    TrainingOutcome -- what a run produced: steps, evaluation history, best and last.
    Trainer -- drives a FittedQLearner over a sampler; resumes from its last checkpoint.

The run directory holds ``checkpoints/last`` (weights plus the full training state: learner,
sampler, evaluation history; rewritten atomically every ``checkpoint_every`` steps and at the
end) and ``checkpoints/best`` (the weights, critics and acting network, that scored best in
evaluation), plus tensorboard logs under ``logs/`` (Q figures in the data's own reward
units). Because evaluation draws from its own seeded streams, a run that is killed and
resumed from ``last`` ends with the same bytes as one that never stopped.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import torch
from torch.utils.tensorboard import SummaryWriter
from tqdm import tqdm

from qadapt import layout
from qadapt.checkpoint import CheckpointMetadata, load_checkpoint, save_checkpoint
from qadapt.checkpoint.durable import restore_replaced
from qadapt.errors import BadInput
from qadapt.learner.fqi import FittedQLearner, TrainingDiverged
from qadapt.learner.policy import QPolicy
from qadapt.learner.source_indicator import ActingTag
from qadapt.maximize import ActionMaximizer
from qadapt.rollout import EpisodeResults, run_episodes

# Logged learner figures that are Q-values; they are logged in the data's reward units.
IN_REWARD_UNITS = ("q_mean", "q_max", "target_mean")


@dataclass(frozen=True)
class TrainingPlan:
    """Schedule of a run (all in gradient steps).

    Example:
        >>> TrainingPlan(steps=1000, eval_every=250).evaluations
        4
    """

    steps: int
    eval_every: int = 0
    checkpoint_every: int = 1000
    log_every: int = 100
    progress_bar: bool = True

    def __post_init__(self) -> None:
        for name in ("steps", "eval_every", "checkpoint_every", "log_every"):
            value = getattr(self, name)
            minimum = 1 if name in ("steps", "log_every") else 0
            if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
                raise BadInput(f"{name}: got {value!r}, expected an integer >= {minimum}")

    @property
    def evaluations(self) -> int:
        return 0 if self.eval_every == 0 else self.steps // self.eval_every


class GreedyEvaluator:
    """Greedy success of a network on ``make_env(episodes)``, one episode per sub-env.

    Every call resets the env with the same ``seed`` and uses a fresh policy stream, so the
    figures of two networks are paired and evaluation never touches the learner's RNG.
    """

    def __init__(
        self,
        make_env: Callable[[int], Any],
        maximizer: ActionMaximizer,
        episodes: int,
        seed: int,
        acting_columns: tuple[float, ...] | None = None,
    ) -> None:
        if isinstance(episodes, bool) or not isinstance(episodes, int) or episodes < 1:
            raise BadInput(f"eval episodes: got {episodes!r}, expected a positive integer")
        self.make_env = make_env
        self.maximizer = maximizer
        self.episodes = episodes
        self.seed = seed
        self.acting_columns = acting_columns
        self._envs = None

    def __call__(self, network: torch.nn.Module) -> EpisodeResults:
        if self._envs is None:
            self._envs = self.make_env(self.episodes)
        if self.acting_columns is not None:  # trained with a source indicator

            network = ActingTag(network, self.acting_columns)
        policy = QPolicy(network, self.maximizer, seed=self.seed)
        return run_episodes(self._envs, policy, seed=self.seed)


@dataclass
class TrainingOutcome:
    """What a run produced. ``history`` rows: {"step", "successes", "episodes"}."""

    steps: int
    history: list[dict[str, int]] = field(default_factory=list)
    best: dict[str, int] | None = None
    last_path: Path | None = None
    best_path: Path | None = None
    resumed_from: int = 0
    seconds: float = 0.0

    def to_json(self) -> dict[str, Any]:
        data = dataclasses.asdict(self)
        data["last_path"] = None if self.last_path is None else str(self.last_path)
        data["best_path"] = None if self.best_path is None else str(self.best_path)
        return data


def _prefixed(prefix: str, state: dict[str, torch.Tensor]) -> dict[str, torch.Tensor]:
    return {f"{prefix}.{name}": tensor.detach().contiguous() for name, tensor in state.items()}


class Trainer:
    """Runs ``plan.steps`` gradient steps of ``learner`` on batches from ``sampler``.

    Args:
        learner: the FittedQLearner (critics, optimiser, targets).
        sampler: an object with ``sample()`` and ``state_dict``/``load_state_dict``.
        plan: TrainingPlan.
        run_dir: where checkpoints and logs go.
        metadata: what every checkpoint records (its gradient step is filled in here).
        evaluator: optional GreedyEvaluator; the best evaluated weights are kept.
    """

    def __init__(
        self,
        learner: FittedQLearner,
        sampler: Any,
        plan: TrainingPlan,
        run_dir: str | Path,
        metadata: CheckpointMetadata,
        evaluator: GreedyEvaluator | None = None,
    ) -> None:
        self.learner = learner
        self.sampler = sampler
        self.plan = plan
        self.run_dir = Path(run_dir)
        self.metadata = metadata
        self.evaluator = evaluator
        self.outcome = TrainingOutcome(steps=plan.steps)
        self.last_path = layout.last_checkpoint(self.run_dir)
        self.best_path = layout.best_checkpoint(self.run_dir)
        self._saved_step = -1

    # -- checkpoints -------------------------------------------------------------------
    def _weights(self) -> dict[str, torch.Tensor]:
        weights = _prefixed("critics", self.learner.critics.state_dict())
        weights.update(_prefixed("acting", self.learner.acting_network().state_dict()))
        return weights

    def _meta(self, **extra: Any) -> CheckpointMetadata:
        merged = {**self.metadata.extra, **extra}
        return dataclasses.replace(
            self.metadata, gradient_step=self.learner.step, extra=merged
        )

    def _save_last(self) -> None:
        state = {
            "learner": self.learner.state_dict(),
            "sampler": self.sampler.state_dict(),
            "history": list(self.outcome.history),
            "best": self.outcome.best,
        }
        save_checkpoint(self.last_path, self._weights(), self._meta(kind="training"),
                        training_state=state, overwrite=True)
        self.outcome.last_path = self.last_path
        self._saved_step = self.learner.step

    def _save_best(self, record: dict[str, int]) -> None:
        save_checkpoint(self.best_path, self._weights(),
                        self._meta(kind="best", selected_by="greedy evaluation", **record),
                        overwrite=True)
        self.outcome.best_path = self.best_path

    def _resume(self) -> None:
        # A kill in the middle of replacing a checkpoint leaves the previous one aside.
        restore_replaced(self.last_path)
        restore_replaced(self.best_path)
        if not self.last_path.exists():
            return
        loaded = load_checkpoint(self.last_path, load_training_state=True)
        if loaded.metadata.config_digest != self.metadata.config_digest:
            raise BadInput(
                f"{self.last_path}: made by a different configuration (digest "
                f"{loaded.metadata.config_digest[:12]}, this run "
                f"{self.metadata.config_digest[:12]}); choose another output directory"
            )
        state = loaded.training_state
        self.learner.load_state_dict(state["learner"])
        self.sampler.load_state_dict(state["sampler"])
        self.outcome.history = list(state["history"])
        self.outcome.best = state["best"]
        self.outcome.resumed_from = self.learner.step
        self.outcome.last_path = self.last_path
        self._saved_step = self.learner.step
        if self.best_path.exists():
            self.outcome.best_path = self.best_path

    # -- the loop ----------------------------------------------------------------------
    def _evaluate(self, log) -> None:
        result = self.evaluator(self.learner.acting_network())
        record = {"step": self.learner.step, "successes": result.successes,
                  "episodes": result.episodes,
                  "mean_return": round(float(np.mean(result.returns)), 6),
                  "success_reported": bool(result.success_reported)}
        self.outcome.history.append(record)
        if log is not None:
            if result.success_reported:
                log.add_scalar("eval/success_rate", result.successes / result.episodes,
                               self.learner.step)
            log.add_scalar("eval/mean_return", record["mean_return"], self.learner.step)
        if better_evaluation(record, self.outcome.best):
            self.outcome.best = record
            self._save_best(record)

    def run(self) -> TrainingOutcome:
        """Train to ``plan.steps`` (continuing a killed run from ``checkpoints/last``)."""
        self._resume()
        start = time.perf_counter()
        plan = self.plan
        log = SummaryWriter(str(layout.logs_dir(self.run_dir)))
        bar = tqdm(total=plan.steps, initial=self.learner.step, disable=not plan.progress_bar,
                   desc="gradient steps", dynamic_ncols=True)
        last_log_time, last_log_step = time.perf_counter(), self.learner.step
        try:
            while self.learner.step < plan.steps:
                try:
                    metrics = self.learner.update(self.sampler.sample())
                except TrainingDiverged as err:
                    kept = (f"; the last checkpoint ({self._saved_step} steps) is kept at "
                            f"{self.last_path}" if self._saved_step >= 0 else
                            "; no checkpoint was written")
                    raise TrainingDiverged(err.step, f"{err.reason}{kept}") from None
                step = self.learner.step
                bar.update(1)
                if step % plan.log_every == 0:
                    now = time.perf_counter()
                    values = {k: float(v) for k, v in metrics.items()}
                    # Q figures in the data's own reward units (the learner may train on
                    # scaled rewards; identity for the default scale 1, shift 0).
                    for name in IN_REWARD_UNITS:
                        values[name] = self.learner.config.original_value(values[name])
                    for name, value in values.items():
                        log.add_scalar(f"train/{name}", value, step)
                    log.add_scalar("train/steps_per_second",
                                   (step - last_log_step) / max(now - last_log_time, 1e-9), step)
                    log.add_scalar("train/refresh_seconds", self.learner.last_refresh_seconds,
                                   step)
                    last_log_time, last_log_step = now, step
                    bar.set_postfix(loss=f"{values['td_loss']:.4f}", q=f"{values['q_mean']:.3f}")
                if self.evaluator is not None and plan.eval_every and step % plan.eval_every == 0:
                    self._evaluate(log)
                if plan.checkpoint_every and step % plan.checkpoint_every == 0:
                    self._save_last()
            if self._saved_step != self.learner.step:
                self._save_last()
        finally:
            bar.close()
            log.close()
        self.outcome.seconds = time.perf_counter() - start
        return self.outcome


def better_evaluation(record: dict[str, Any], best: dict[str, Any] | None) -> bool:
    """The selection rule for ``checkpoints/best``: more greedy successes when the env
    reports success, a higher mean return when it does not (older records without the key
    count as reporting). Strictly better only: on a tie the earlier checkpoint stays.

    Example:
        >>> better_evaluation({"successes": 3, "mean_return": -200.0, "success_reported": False},
        ...                   {"successes": 3, "mean_return": -250.0, "success_reported": False})
        True
    """
    if best is None:
        return True
    if record.get("success_reported", True):
        return record["successes"] > best["successes"]
    return record["mean_return"] > best.get("mean_return", -math.inf)


def success_rate(record: dict[str, Any] | None) -> float | None:
    """Greedy success of an evaluation record; None without one, or when the env reports no
    success."""
    if not record or not record.get("success_reported", True):
        return None
    return record["successes"] / record["episodes"]


def mean_return(record: dict[str, Any] | None) -> float | None:
    return None if not record else record.get("mean_return")
