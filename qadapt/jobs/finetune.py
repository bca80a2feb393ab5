"""``qadapt finetune``: adapt a pretrained Q-function on prior plus new data.

Holds:
    run_finetune -- base + init strategy -> learner on the mixture -> checkpoints; the summary.
    finetune_job -- the job body (exit status).
    main -- the console entry point (Hydra overrides on the command line).

The result's lineage names its parent checkpoint (by identity hash) and every dataset by
hash; evaluation runs in the environment the new data was collected in.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import torch

from qadapt.checkpoint import load_checkpoint
from qadapt.config.hydra_entry import run_job
from qadapt.config.training_schema import (
    FinetuneJob,
    register_training_schemas,
)
from qadapt.errors import BadInput
from qadapt.jobs import training_run as run
from qadapt.jobs.outputs import output_dir
from qadapt.layout import resolve_checkpoint
from qadapt.learner.assembly import new_critics, observation_statistics
from qadapt.learner.init import InitContext, init_strategy
from qadapt.learner.source_indicator import SourceIndicator, TaggedDataset, widen_observation_input
from qadapt.nets import QNetworkConfig
from qadapt.spaces import action_bounds


def run_finetune(cfg: FinetuneJob) -> dict:
    """Fine-tune as ``cfg`` says; return the run's summary (also in ``summary.json``)."""
    torch.set_num_threads(cfg.threads)
    torch.use_deterministic_algorithms(True)
    strategy = init_strategy(cfg.init)
    out = output_dir(cfg.out, "finetune")
    new = run.open_sources(cfg.new)
    prior = run.open_sources(cfg.prior) if cfg.prior else []
    datasets = [*prior, *new]
    run.open_sources([str(d.path) for d in datasets])  # one pair of spaces for all
    base_path = resolve_checkpoint(cfg.base, key="base")
    base = load_checkpoint(base_path, expect_observation_space=new[0].observation_space,
                           expect_action_space=new[0].action_space, what="dataset")
    network_config = QNetworkConfig.from_dict(base.metadata.network["q_network"])
    # The base's loss and reward units unless set (checkpoints older than this record give
    # none: its output then decides the loss).
    learner, _ = run.settle_value_head(cfg.learner, network_config.output, datasets,
                                       base=base.metadata.network.get("value"))
    # The base's maximiser settings too, unless set.
    maximizer = run.settle_maximizer(cfg.maximizer, base.metadata.network.get("maximizer"))
    cfg = run.with_settled(cfg, learner=learner, maximizer=maximizer)
    indicator, base_weights = _indicator_and_weights(cfg, base, str(base_path), len(prior),
                                                     len(new), int(new[0].obs_dim))
    width = 0 if indicator is None else indicator.width
    if prior:
        shares = [(1.0 - cfg.share) / len(prior)] * len(prior) + [cfg.share / len(new)] * len(new)
    else:
        shares = [1.0 / len(new)] * len(new)
    act_space = new[0].action_space.to_space()

    def make_critics(arrays):
        # A strategy that keeps the base's normalisation gets it with the base weights.
        statistics = None if strategy.uses_base_statistics else observation_statistics(arrays)
        critics = new_critics(int(new[0].obs_dim) + width, *action_bounds(act_space),
                              network_config, seed=cfg.seed, statistics=statistics)
        tagged_prior = prior if indicator is None else [
            TaggedDataset(d, indicator.values[i]) for i, d in enumerate(prior)]
        outcome = strategy.initialise(InitContext(
            critics=critics, base_weights=base_weights, where=str(base_path),
            prior=tagged_prior, gamma=cfg.learner.gamma, seed=cfg.seed))
        # The third item is the run's record of how its critics started.
        return critics, outcome.anchor, {**strategy.describe(), **outcome.report}

    settings = {k: run.plain(v) for k, v in dataclasses.asdict(cfg).items()
                if k not in ("out", "progress", "prior", "new", "base")}
    summary = run.run_training(run.TrainingRequest(
        job="finetune", run=cfg, datasets=datasets, shares=shares,
        network_config=network_config, make_critics=make_critics, out=out, settings=settings,
        eval_dataset=new[0], parent={"path": str(base_path), "sha256": base.identity},
        indicator=indicator,
    ))
    print(f"finetune ({strategy.name}): {summary['steps']} gradient steps; "
          f"{run.outcome_text(summary)}; checkpoint {summary['checkpoint']}")
    print(f"outputs written to {out}")
    return summary


def _indicator_and_weights(cfg: FinetuneJob, base, where: str, n_prior: int, n_new: int,
                           obs_dim: int):
    """The run's source indicator (or None) and the base weights widened to its columns
    (zero weights for new columns: the widened base computes exactly the base's Q)."""
    indicator = SourceIndicator.for_sources(cfg.indicator, n_prior, n_new)
    base_indicator = SourceIndicator.from_json(base.metadata.network.get("source_indicator"),
                                               where)
    base_width = 0 if base_indicator is None else base_indicator.width
    width = 0 if indicator is None else indicator.width
    if width < base_width:
        raise BadInput(f"indicator: {where} was trained with a {base_width}-column source "
                       f"indicator ({base_indicator.kind}); this run's indicator={cfg.indicator}"
                       f" has {width} columns; use indicator={base_indicator.kind}")
    return indicator, widen_observation_input(base.weights, obs_dim + base_width,
                                              width - base_width)


def finetune_job(cfg: FinetuneJob) -> int:
    run_finetune(cfg)
    return 0


def main(argv: Sequence[str]) -> int:
    register_training_schemas()
    return run_job("finetune", FinetuneJob, finetune_job, argv)
