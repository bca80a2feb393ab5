"""Running one cell of a study: ``qadapt cell study=DIR cell=ID`` (the launcher calls this).

Holds:
    cell_dir -- where a cell's runs and its rows go.
    run_cell -- run a cell (skipped when its rows exist) and write its results rows.
    cell_job -- the job body; main -- the console entry point.

A fine-tuning cell is exactly ``qadapt finetune`` with the overrides its cell record implies
(composed the same way), then a final evaluation on the unperturbed cell and its variation
on scenes the in-training evaluation never saw. A chain cell is ``qadapt chain``. Rows are
written last, atomically: a cell either has its rows or is run (and resumes) again.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import torch

from qadapt import layout
from qadapt.config.chain_schema import ChainJob, register_chain_schemas
from qadapt.config.compose import compose_typed, variation_by_name
from qadapt.config.hydra_entry import run_job
from qadapt.config.training_schema import FinetuneJob, register_training_schemas
from qadapt.errors import BadInput, TrainingFailed
from qadapt.files import strict_json, write_text_durably
from qadapt.jobs.chain import BASE_CELL, chain_job
from qadapt.jobs.evaluate import evaluate_checkpoint
from qadapt.jobs.finetune import run_finetune
from qadapt.study.arms import study_arm
from qadapt.study.plan import Cell, StudyPlan
from qadapt.study.results import ResultRow
from qadapt.study.schema import CellJob, register_study_schemas


def cell_dir(study_dir: Path, cell_id: str) -> Path:
    return Path(study_dir) / "cells" / cell_id


def _quoted(key: str, value: str) -> str:
    if "'" in value:
        raise BadInput(f"{key}: {value!r} holds a single quote, which an override cannot carry")
    return f"{key}='{value}'"


def _quoted_list(key: str, values: list[str]) -> str:
    """``key=['a','b']``: a list override whose items may hold ``=`` or ``,``."""
    return f"{key}=[{','.join(_quoted(key, v).split('=', 1)[1] for v in values)}]"


def _evaluation(result: dict[str, Any]) -> dict[str, Any]:
    return {k: result[k] for k in ("variation", "successes", "episodes", "returns", "lengths")}


def _evaluate(checkpoint: str, names: list[str], settings: dict[str, Any]) -> list[dict]:
    return [_evaluation(evaluate_checkpoint(checkpoint, None, variation_by_name(name),
                                            settings["eval_episodes"],
                                            seed=settings["eval_seed"]))
            for name in names]


def _row(cell: Cell, **fields: Any) -> dict[str, Any]:
    row = {"run_id": cell.id, "variation": cell.variation or BASE_CELL,
           "strategy": cell.arm or "base", "seed": cell.seed if cell.seed is not None else 0,
           "new_episodes": cell.episodes, "share": cell.share, "indicator": False,
           "steps": 0, "chain_step": None, "curve": [], "logdir": None, **fields}
    return ResultRow.from_dict(row).to_dict()  # validated against the results schema


def _base_rows(plan: StudyPlan, cell: Cell) -> list[dict]:
    """One row per variation (the base's success there and on the unperturbed cell), so the
    base sits beside the strategies in every per-variation table."""
    rounds = plan.settings["rounds"]["variation"]
    names = list(dict.fromkeys([BASE_CELL, *plan.settings["variations"],
                                *plan.settings["chain"]["variations"],
                                *([rounds] if rounds else [])]))
    results = dict(zip(names, _evaluate(plan.base, names, plan.settings), strict=True))
    return [_row(cell, run_id=f"base__{name}", variation=name,
                 evaluations=[results[BASE_CELL]] + ([results[name]] if name != BASE_CELL
                                                     else []),
                 checkpoint=plan.base, run_dir=plan.base)
            for name in names]


def _run_steps(plan: StudyPlan, cell: Cell) -> int:
    """Gradient steps of each of the cell's runs (its own, else the study's)."""
    return cell.steps or plan.settings["steps"]


def _common_overrides(plan: StudyPlan, cell: Cell, out: Path,
                      steps: int | None = None) -> list[str]:
    settings = plan.settings
    steps = steps or _run_steps(plan, cell)
    return [_quoted("base", plan.base), f"steps={steps}", f"seed={cell.seed}",
            _quoted("out", str(out)), "progress=false", "threads=1",
            *settings["finetune"]]


def _finetune_rows(plan: StudyPlan, cell: Cell, where: Path) -> list[dict]:
    arm = study_arm(cell.arm)
    run_dir = where / "run"
    overrides = [*_common_overrides(plan, cell, run_dir), _quoted("new", cell.data),
                 *arm.finetune_overrides(cell.share), f"indicator={cell.indicator}"]
    if arm.uses_prior:
        overrides.append(_quoted("prior", plan.prior))
    register_training_schemas()
    summary = run_finetune(compose_typed("finetune", overrides, FinetuneJob, key=cell.id))
    checkpoint = summary["checkpoint"]
    return [_row(cell, steps=summary["steps"], curve=summary["evaluations"],
                 indicator=cell.indicator != "none",
                 evaluations=_evaluate(checkpoint, [BASE_CELL, cell.variation], plan.settings),
                 checkpoint=checkpoint, run_dir=str(run_dir), logdir=str(layout.logs_dir(run_dir)))]


def _chain_rows(plan: StudyPlan, cell: Cell, where: Path) -> list[dict]:
    settings = plan.settings
    arm = study_arm(cell.arm)
    out = where / "chain"
    # Rounds start from the base policy (later rounds explore with the latest result).
    explore = settings["chain"]["explore"] if cell.rounds == 1 else "base"
    overrides = [*_common_overrides(plan, cell, out), _quoted("prior", plan.prior),
                 f"variations=[{','.join(cell.variations)}]", f"episodes={cell.episodes}",
                 f"init={arm.init}", f"share={cell.share}", f"rounds={cell.rounds}",
                 f"explore.policy={explore}",
                 f"explore.noise={settings['explore_noise']}",
                 f"eval_episodes={settings['eval_episodes']}",
                 f"eval_seed={settings['eval_seed']}"]
    register_chain_schemas()
    chain_job(compose_typed("chain", overrides, ChainJob, key=cell.id))
    record = json.loads((out / layout.CHAIN_RECORD).read_text())
    rows = []
    for step in record["steps"]:
        run_dir = Path(step["checkpoint"]["path"]).parents[1]
        summary = json.loads((run_dir / layout.SUMMARY).read_text())
        rows.append(_row(
            cell, run_id=f"{cell.id}__step{step['index']}", variation=step["variation"],
            steps=summary["steps"], chain_step=step["index"], curve=summary["evaluations"],
            evaluations=[_evaluation(e) for e in step["evaluations"]],
            checkpoint=step["checkpoint"]["path"], run_dir=str(run_dir),
            logdir=str(layout.logs_dir(run_dir)),
            **({"round": step["round"]} if cell.rounds > 1 else {})))
    if cell.rounds > 1:
        rows += [_retrain_row(plan, cell, where, record, name)
                 for name in settings["rounds"]["retrain"]]
    return rows


def _retrain_row(plan: StudyPlan, cell: Cell, where: Path, record: dict, name: str) -> dict:
    """One run of strategy ``name`` from the base on the data the cell's rounds collected,
    mixed as in the last round, for the rounds' gradient steps added up."""
    arm = study_arm(name, key="rounds.retrain")
    datasets = [step["dataset"]["path"] for step in record["steps"]]
    steps = _run_steps(plan, cell) * cell.rounds
    run_dir = where / f"retrain_{name}"
    variation = cell.variations[0]
    overrides = [*_common_overrides(plan, cell, run_dir, steps=steps),
                 _quoted("new", datasets[-1]), _quoted_list("prior", [plan.prior, *datasets[:-1]]),
                 *arm.finetune_overrides(cell.share)]
    register_training_schemas()
    summary = run_finetune(compose_typed("finetune", overrides, FinetuneJob,
                                         key=f"{cell.id} retrain {name}"))
    checkpoint = summary["checkpoint"]
    return _row(cell, run_id=f"{cell.id}__retrain_{name}", strategy=name,
                variation=variation, steps=summary["steps"], curve=summary["evaluations"],
                evaluations=_evaluate(checkpoint, [BASE_CELL, variation], plan.settings),
                checkpoint=checkpoint, run_dir=str(run_dir), logdir=str(layout.logs_dir(run_dir)),
                trained_on_rounds=cell.rounds, rounds_strategy=cell.arm)


def run_cell(study_dir: str | Path, cell_id: str) -> list[dict]:
    """Run cell ``cell_id`` of the study at ``study_dir`` unless its rows exist; its rows."""
    study_dir = Path(study_dir)
    plan = StudyPlan.read(study_dir)
    cell = plan.cell(cell_id)
    where = cell_dir(study_dir, cell.id)
    rows_path = where / layout.CELL_ROWS
    if rows_path.exists():
        print(f"cell {cell.id}: finished earlier, skipped")
        return json.loads(rows_path.read_text())
    where.mkdir(parents=True, exist_ok=True)
    (where / layout.CELL_FAILURE).unlink(missing_ok=True)  # a retry
    if cell.kind == "base":
        rows = _base_rows(plan, cell)
    elif cell.kind == "finetune":
        rows = _finetune_rows(plan, cell, where)
    else:
        rows = _chain_rows(plan, cell, where)
    write_text_durably(rows_path, strict_json(rows, indent=1))
    print(f"cell {cell.id}: done")
    return rows


def cell_job(cfg: CellJob) -> int:
    """Run the cell; a cell that fails (bad input, divergence) records why in
    ``failed.json`` and lets the rest of the sweep go on; the study reports it."""
    torch.set_num_threads(1)  # cells run side by side; one thread each
    try:
        run_cell(cfg.study, cfg.cell)
    except (BadInput, TrainingFailed) as err:
        where = cell_dir(Path(cfg.study), cfg.cell)
        where.mkdir(parents=True, exist_ok=True)
        message = str(err).splitlines()[0] if str(err) else type(err).__name__
        write_text_durably(where / layout.CELL_FAILURE, json.dumps({"cell": cfg.cell,
                                                            "error": message}))
        print(f"cell {cfg.cell}: failed: {message}")
    return 0


def main(argv: Sequence[str]) -> int:
    register_study_schemas()
    return run_job("cell", CellJob, cell_job, argv)
