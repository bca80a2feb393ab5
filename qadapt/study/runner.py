"""``qadapt study``: prior data and base, new datasets, every cell through a launcher, report.

Holds:
    study_job -- the job body: make or reuse the base, collect new data, run missing cells
        with Hydra's multirun and the configured launcher, gather results.jsonl, report.
    main -- the console entry point.

Everything a study makes lives in its directory (``out=``): ``prior/``, ``base/``,
``data/``, ``cells.json`` (the plan), ``cells/<id>/`` (runs and ``rows.json``),
``results.jsonl`` (one row per run), ``filmstrips/`` and ``report/``. Re-running the same
command skips every finished piece, so an interrupted study continues where it stopped.
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from collections.abc import Sequence
from pathlib import Path

import torch
from hydra.core.hydra_config import HydraConfig

from qadapt import layout
from qadapt.config.compose import compose_typed
from qadapt.config.hydra_entry import run_job
from qadapt.config.schema import CollectJob
from qadapt.config.training_schema import PretrainJob, register_training_schemas
from qadapt.data import open_dataset
from qadapt.errors import TrainingFailed
from qadapt.files import strict_json, write_text_durably
from qadapt.jobs.collect import collect_job
from qadapt.jobs.outputs import output_dir
from qadapt.jobs.pretrain import pretrain_job
from qadapt.locking import hold_directory
from qadapt.study.arms import STUDY_ARMS
from qadapt.study.cells import _quoted, cell_dir
from qadapt.study.filmstrip import write_filmstrips
from qadapt.study.plan import StudyPlan, build_plan
from qadapt.study.report import build_report
from qadapt.study.schema import StudyJob, register_study_schemas


def _complete_dataset(path: Path) -> bool:
    if not (path / "manifest.json").exists():
        return False
    open_dataset(path)  # verifies; a damaged dataset stops the study with its message
    return True


def _collect(overrides: list[str], out: Path) -> None:
    if _complete_dataset(out):
        return
    collect_job(compose_typed("collect", [*overrides, _quoted("out", str(out)),
                                          "progress=false"], CollectJob, key=str(out)))


def _make_base(cfg: StudyJob, study_dir: Path) -> tuple[str, str]:
    """The study's prior dataset and base checkpoint (made here unless given)."""
    if cfg.base is not None:
        return cfg.base, cfg.prior
    plan = cfg.make_base
    prior, base = study_dir / "prior", study_dir / "base"
    print(f"study: prior data ({plan.episodes} scripted episodes) -> {prior}")
    _collect(["policy=scripted", f"policy.noise={plan.noise}", f"episodes={plan.episodes}",
              f"seed={plan.seed}"], prior)
    if not (base / layout.SUMMARY).exists():
        print(f"study: pretraining the base ({plan.pretrain_steps} steps) -> {base}")
        register_training_schemas()
        pretrain_job(compose_typed("pretrain", [
            _quoted("data", str(prior)), f"steps={plan.pretrain_steps}", f"seed={plan.seed}",
            _quoted("out", str(base)), "progress=false", "threads=1", *plan.pretrain],
            PretrainJob,
            key="make_base"))
    return str(base), str(prior)


def _collect_new_data(cfg: StudyJob, plan: StudyPlan) -> None:
    for request in plan.data:
        _collect(["policy=checkpoint", _quoted("policy.checkpoint", plan.base),
                  f"policy.noise={cfg.explore_noise}", f"variation={request.variation}",
                  f"episodes={request.episodes}", f"seed={request.collection_seed}",
                  "num_envs=128"], Path(request.path))


def _launcher_choice() -> str:
    """The ``launcher`` group option this study was started with (configs/launcher/)."""
    return HydraConfig.get().runtime.choices.get("launcher") or "local"


def _launch(cfg: StudyJob, study_dir: Path, pending: list[str]) -> int:
    """Run the pending cells as one Hydra multirun sweep; its exit status."""
    launcher = _launcher_choice()
    sweep = study_dir / "sweeps" / time.strftime("%Y%m%d-%H%M%S")
    command = [sys.executable, "-m", "qadapt.cli", "cell", "--multirun",
               _quoted("study", str(study_dir)), f"cell={','.join(pending)}",
               f"launcher={launcher}", _quoted("hydra.sweep.dir", str(sweep)),
               *cfg.launcher_overrides]
    print(f"study: running {len(pending)} cells with launcher={launcher} "
          f"(logs in {sweep})", flush=True)
    return subprocess.run(command).returncode


def _gather(study_dir: Path, plan: StudyPlan) -> tuple[list[dict], list[str]]:
    rows, missing = [], []
    for cell in plan.cells:
        path = cell_dir(study_dir, cell.id) / layout.CELL_ROWS
        if path.exists():
            rows.extend(json.loads(path.read_text()))
        else:
            missing.append(cell.id)
    return rows, missing


def _write_results(study_dir: Path, rows: list[dict]) -> Path:
    path = study_dir / layout.RESULTS
    write_text_durably(path, "".join(strict_json(row, sort_keys=True) + "\n" for row in rows))
    return path


def _short_table(cfg: StudyJob, rows: list[dict]) -> str:
    """Success on each row's own variation, pooled over seeds: the base and the headline
    runs (``episodes`` new episodes at ``share``); the report has everything else."""
    pooled: dict[tuple[str, str], list[int]] = {}
    for row in rows:
        arm = STUDY_ARMS.get(row["strategy"])
        headline = (arm is not None and row["new_episodes"] == cfg.episodes
                    and not row["indicator"]
                    and row["share"] == (cfg.share if arm.uses_prior else 1.0))
        if (row["chain_step"] is not None or "trained_on_rounds" in row
                or not (headline or row["strategy"] == "base")):
            continue
        for evaluation in row["evaluations"]:
            if evaluation["variation"] != row["variation"]:
                continue
            key = (evaluation["variation"], row["strategy"])
            counts = pooled.setdefault(key, [0, 0])
            counts[0] += evaluation["successes"]
            counts[1] += evaluation["episodes"]
    variations = list(dict.fromkeys(v for v, _ in pooled))
    strategies = list(dict.fromkeys(s for _, s in pooled))
    width = max(12, *(len(s) for s in strategies))
    lines = ["success rate, pooled over seeds (episodes)",
             "variation".ljust(16) + "".join(s.rjust(width + 2) for s in strategies)]
    for variation in variations:
        cells = []
        for strategy in strategies:
            s, n = pooled.get((variation, strategy), (0, 0))
            cells.append(f"{100 * s / n:.1f}% ({n})" if n else "-")
        lines.append(variation.ljust(16) + "".join(c.rjust(width + 2) for c in cells))
    return "\n".join(lines)


def study_job(cfg: StudyJob) -> int:
    torch.set_num_threads(1)
    study_dir = output_dir(cfg.out, "study").resolve()
    with hold_directory(study_dir, "study"):
        return _run_study(cfg, study_dir)


def _run_study(cfg: StudyJob, study_dir: Path) -> int:
    study_dir.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    base, prior = _make_base(cfg, study_dir)
    plan = build_plan(cfg, str(Path(base).resolve()), str(Path(prior).resolve()), study_dir)
    plan.write(study_dir)
    _collect_new_data(cfg, plan)
    _, pending = _gather(study_dir, plan)
    # Chains (and rounds) are the longest cells: start them first so that the workers do
    # not end with one long cell running alone.
    pending.sort(key=lambda cell_id: plan.cell(cell_id).kind != "chain")
    if pending:
        _launch(cfg, study_dir, pending)
    rows, missing = _gather(study_dir, plan)
    if not rows:
        raise TrainingFailed(f"no cell of the study in {study_dir} finished; see the sweep "
                             "logs in its sweeps/ folder")
    results = _write_results(study_dir, rows)
    write_filmstrips(study_dir, plan, rows, episodes=cfg.filmstrip_episodes)
    report, _ = build_report(study_dir, out=study_dir / "report", level=cfg.level,
                          base_variation="none", reps=cfg.report_reps, seed=0)
    print(_short_table(cfg, rows))
    print(f"study: {len(rows)} runs in {time.perf_counter() - started:.0f} s; results "
          f"{results}; report {report}")
    print(f"outputs written to {study_dir}")
    if missing:
        failed = cell_dir(study_dir, missing[0]) / layout.CELL_FAILURE
        why = json.loads(failed.read_text())["error"] if failed.exists() else "see sweeps/"
        raise TrainingFailed(f"{len(missing)} of {len(plan.cells)} cells did not finish "
                             f"(first: {missing[0]}: {why}); re-run the same command to retry "
                             "them")
    return 0


def main(argv: Sequence[str]) -> int:
    register_training_schemas()
    register_study_schemas()
    return run_job("study", StudyJob, study_job, argv)
