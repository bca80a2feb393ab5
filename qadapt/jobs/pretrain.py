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

import gymnasium as gym
import torch

from qadapt.config.hydra_entry import run_job
from qadapt.config.training_schema import (
    PretrainJob,
    build_runtime,
    register_training_schemas,
)
from qadapt.errors import BadInput
from qadapt.jobs import training_run as run
from qadapt.jobs.outputs import output_dir
from qadapt.learner.assembly import new_critics, observation_statistics
from qadapt.nets import QNetworkConfig
from qadapt.spaces import action_bounds


def pretrain_job(cfg: PretrainJob) -> int:
    torch.set_num_threads(cfg.threads)
    torch.use_deterministic_algorithms(True)
    out = output_dir(cfg.out, "pretrain")
    datasets = run.open_sources(cfg.data)
    act_space = datasets[0].action_space.to_space()
    if cfg.network.form == "per_action" and not isinstance(act_space, gym.spaces.Discrete):
        raise BadInput(f"network.form: got 'per_action' for the action space {act_space}, "
                       "expected a Discrete one (use late_fusion or concat for a Box)")
    learner, output = run.settle_value_head(cfg.learner, cfg.network.output, datasets)
    cfg = run.with_settled(cfg, learner=learner, maximizer=run.settle_maximizer(cfg.maximizer),
                           network=dataclasses.replace(cfg.network, output=output))
    network_config = build_runtime(QNetworkConfig, cfg.network, "network")

    def make_critics(arrays):
        critics = new_critics(int(datasets[0].obs_dim), *action_bounds(act_space),
                              network_config, seed=cfg.seed,
                              statistics=observation_statistics(arrays))
        return critics, None

    settings = {k: run.plain(v) for k, v in dataclasses.asdict(cfg).items()
                if k not in ("out", "progress", "data")}
    summary = run.run_training(run.TrainingRequest(
        job="pretrain", run=cfg, datasets=datasets, shares=cfg.shares,
        network_config=network_config, make_critics=make_critics, out=out, settings=settings,
        eval_dataset=datasets[0],
    ))
    print(f"pretrain: {summary['steps']} gradient steps; {run.outcome_text(summary)}; "
          f"checkpoint {summary['checkpoint']}")
    print(f"outputs written to {out}")
    return 0


def main(argv: Sequence[str]) -> int:
    register_training_schemas()
    return run_job("pretrain", PretrainJob, pretrain_job, argv)
