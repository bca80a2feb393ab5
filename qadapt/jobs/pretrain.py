"""``qadapt pretrain``: train a Q-function from one or more datasets; write a checkpoint.

Holds:
    pretrain_job -- the job body: datasets -> critics -> learner -> trainer -> checkpoints.
    main -- the console entry point (Hydra overrides on the command line).

Outputs (in ``out=`` or the Hydra run directory): ``checkpoints/best`` (best greedy success in
the in-training evaluation; the run's result), ``checkpoints/last`` (the end of training,
with everything needed to resume), ``summary.json``, ``lineage.json``, ``logs/``.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path

from qadapt.config.training_schema import PretrainJob, build_learner_config

# Checkpoints carry a fixed creation time so that the same config and seed give
# byte-identical checkpoints; the wall-clock duration is in summary.json.
REPRODUCIBLE_TIME = datetime(1970, 1, 1, tzinfo=UTC)


def pretrain_job(cfg: PretrainJob) -> int:
    import torch

    from qadapt.checkpoint import CheckpointMetadata, DatasetReference
    from qadapt.data import MixtureSampler
    from qadapt.jobs import training_run as run
    from qadapt.jobs.collect import _output_dir
    from qadapt.learner import FittedQLearner
    from qadapt.learner.assembly import new_critics, observation_statistics, transition_arrays
    from qadapt.learner.trainer import Trainer, TrainingPlan, success_rate

    torch.set_num_threads(cfg.threads)
    torch.use_deterministic_algorithms(True)
    out = _output_dir(cfg.out, "pretrain")
    datasets = run.open_sources(cfg.data)
    first = datasets[0]
    obs_space, act_space = first.observation_space.to_space(), first.action_space.to_space()
    network_config = cfg.network.build()
    learner_config = build_learner_config(cfg.learner)
    maximizer = run.build_maximizer(cfg.maximizer, act_space)

    arrays = [transition_arrays(d) for d in datasets]
    critics = new_critics(int(obs_space.shape[0]), act_space.low, act_space.high,
                          network_config, seed=cfg.seed,
                          statistics=observation_statistics(arrays))
    learner = FittedQLearner(critics, maximizer, learner_config, arrays, seed=cfg.seed)
    memory = None if cfg.memory_limit_mb is None else cfg.memory_limit_mb * 2**20
    sampler = MixtureSampler(datasets, shares=cfg.shares, batch_size=learner_config.batch_size,
                             seed=cfg.seed, memory_limit_bytes=memory)
    evaluator = run.make_evaluator(cfg.eval, maximizer, first)

    settings = {k: run.plain(v) for k, v in dataclasses.asdict(cfg).items()
                if k not in ("out", "progress", "data")}
    settings["datasets"] = [d.fingerprint for d in datasets]
    digest = run.config_digest(settings)
    environment = first.manifest.environment
    metadata = CheckpointMetadata(
        observation_space=obs_space, action_space=act_space,
        network={"q_network": network_config.to_dict(), "maximizer": cfg.maximizer.as_kwargs()},
        env_id=environment.id, env_kwargs=dict(environment.kwargs),
        gradient_step=0, config_digest=digest,
        datasets=tuple(DatasetReference(path=str(d.path), sha256=d.fingerprint)
                       for d in datasets),
        created_at=REPRODUCIBLE_TIME,
    )
    plan = TrainingPlan(steps=cfg.steps, eval_every=cfg.eval.every if evaluator else 0,
                        checkpoint_every=cfg.checkpoint_every, log_every=cfg.log_every,
                        progress_bar=cfg.progress)
    outcome = Trainer(learner, sampler, plan, out, metadata, evaluator).run()

    result = outcome.best_path or outcome.last_path
    summary = {
        "job": "pretrain",
        "steps": outcome.steps,
        "resumed_from_step": outcome.resumed_from,
        "seconds": round(outcome.seconds, 2),
        "evaluations": outcome.history,
        "best": outcome.best,
        "best_success_rate": success_rate(outcome.best),
        "last_success_rate": success_rate(outcome.history[-1] if outcome.history else None),
        "checkpoint": str(result),
        "selected": "best" if outcome.best_path else "last",
        "config_digest": digest,
    }
    lineage = {"parent_checkpoint": None,
               "datasets": [{"path": str(d.path), "sha256": d.fingerprint} for d in datasets]}
    run.write_run_records(Path(out), summary, lineage)
    print(f"pretrain: {outcome.steps} gradient steps; best greedy success "
          f"{summary['best_success_rate']:.3f}; checkpoint {result}")
    print(f"outputs written to {out}")
    return 0


def main(argv: Sequence[str]) -> int:
    from qadapt.config.hydra_entry import run_job
    from qadapt.config.training_schema import register_training_schemas

    register_training_schemas()
    return run_job("pretrain", PretrainJob, pretrain_job, argv)
