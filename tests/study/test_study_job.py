"""``qadapt study`` end to end on a tiny grid: plan, cells, results, resume, report, bad input."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from qadapt.study.results import read_results

TINY = [
    "make_base.episodes=24", "make_base.pretrain_steps=30", "variations=[finger_offset]",
    "strategies=[warm,scratch_new]", "seeds=[0,1]", "episodes=6", "steps=20",
    "budgets.values=[3]", "budgets.strategies=[warm]", "shares.values=[0.3]",
    "shares.strategies=[warm,scratch_new]", "chain.variations=[finger_offset,drive_lag]",
    "chain.strategies=[warm]", "rounds.variation=finger_offset", "rounds.count=2",
    "rounds.episodes=4", "rounds.steps=10", "rounds.retrain=[scratch_mix]",
    "launcher=local", "eval_episodes=6", "filmstrip_episodes=1",
    "report_reps=50",
    "finetune=['eval.every=10','eval.episodes=4','checkpoint_every=10',"
    "'learner.refresh_every=10','init.regression.steps=5']",
]


def _study(out: Path, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "qadapt.cli", "study", *TINY, *extra, f"out={out}"],
        capture_output=True, text=True, cwd=out.parent, timeout=600)


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> tuple[Path, subprocess.CompletedProcess]:
    out = tmp_path_factory.mktemp("study") / "tiny"
    done = _study(out)
    assert done.returncode == 0, done.stderr[-3000:]
    return out, done


def test_the_study_writes_nothing_beside_its_out_folder(study):
    # configs/study.yaml switches Hydra's dated run folder, .hydra/ and log file off; the
    # cells' sweep logs go under the study's own sweeps/ folder.
    out, _ = study
    assert [p.name for p in out.parent.iterdir()] == [out.name]
    assert (out / "sweeps").is_dir()


def test_every_cell_gives_rows_with_raw_counts(study):
    out, done = study
    rows = read_results(out / "results.jsonl")
    ids = {row.run_id for row in rows}
    # base: one row per variation (none, finger_offset, drive_lag); 2 arms x 2 seeds headline;
    # budget 3 for warm (2 seeds); share 0.3 for warm only (scratch_new has no share to
    # sweep); a two-step chain per seed; two rounds on finger_offset per seed, each followed
    # by one scratch_mix run on the two rounds' data.
    assert {"base__none", "base__finger_offset", "base__drive_lag"} <= ids
    assert {f"warm__finger_offset__n6__share0.5__seed{s}" for s in (0, 1)} <= ids
    assert {f"scratch_new__finger_offset__n6__share1__seed{s}" for s in (0, 1)} <= ids
    assert {f"warm__finger_offset__n3__share0.5__seed{s}" for s in (0, 1)} <= ids
    assert {f"warm__finger_offset__n6__share0.3__seed{s}" for s in (0, 1)} <= ids
    assert {f"chain__warm__seed{s}__step{k}" for s in (0, 1) for k in (1, 2)} <= ids
    rounds = {f"rounds__warm__finger_offset__seed{s}__step{k}" for s in (0, 1) for k in (1, 2)}
    assert rounds <= ids
    retrains = {f"rounds__warm__finger_offset__seed{s}__retrain_scratch_mix" for s in (0, 1)}
    assert retrains <= ids
    assert len(rows) == 3 + 4 + 2 + 2 + 4 + 4 + 2
    for run_id in retrains:
        row = next(r for r in rows if r.run_id == run_id)
        assert row.strategy == "scratch_mix" and row.chain_step is None
        assert row.extra == {"trained_on_rounds": 2, "rounds_strategy": "warm"}
        assert row.steps == 20 and row.new_episodes == 4  # both rounds' steps, in one run
        seed = row.seed
        chain = out / "cells" / f"rounds__warm__finger_offset__seed{seed}" / "chain"
        lineage = json.loads((Path(row.run_dir) / "lineage.json").read_text())
        # The last round's mixture: prior and round 1 on the prior side, round 2 as new data.
        assert [(Path(d["path"]).name, d["share"]) for d in lineage["datasets"]] == [
            ("prior", 0.25), ("new_data", 0.25), ("new_data", 0.5)]
        assert [Path(d["path"]) for d in lineage["datasets"][1:]] == [
            chain / "step_01_finger_offset" / "new_data",
            chain / "step_02_finger_offset" / "new_data"]
        assert lineage["initialisation"]["name"] == "scratch"
    for row in rows:
        assert ("round" in row.extra) == (row.run_id in rounds)
        if row.run_id in rounds:  # rounds' own budget and run length
            assert row.extra["round"] == row.chain_step
            assert row.new_episodes == 4 and row.steps == 10
    for row in rows:
        for evaluation in row.evaluations:
            assert evaluation.episodes == 6 and len(evaluation.returns) == 6
    chain_rows = [r for r in rows if r.chain_step is not None and "round" not in r.extra]
    assert {e.variation for e in chain_rows[0].evaluations} == {
        "none", "finger_offset", "drive_lag"}
    warm = next(r for r in rows if r.run_id == "warm__finger_offset__n6__share0.5__seed0")
    assert [p.step for p in warm.curve] == [10, 20] and warm.steps == 20
    # Fine-tuning cells ran on the dataset their budget names, collected in their variation.
    manifest = json.loads((out / "data" / "finger_offset__n3__seed0" / "manifest.json")
                          .read_text())
    assert manifest["episode_count"] == 3
    assert manifest["environment"]["kwargs"]["perturbations"] == {"finger_offset": 0.07}
    assert "success rate, pooled over seeds" in done.stdout


def test_the_report_and_filmstrips_are_written(study):
    out, _ = study
    html = (out / "report" / "report.html").read_text()
    assert "Forgetting" in html and "Data budget" in html and "Rounds of adaptation" in html
    assert (out / "report" / "summary.md").exists()
    assert {p.name for p in (out / "filmstrips").glob("*.png")} == {
        "base.png", "warm.png", "scratch_new.png"}


def test_a_finished_study_rerun_launches_nothing_and_changes_no_result(study):
    out, _ = study
    before = (out / "results.jsonl").read_bytes()
    sweeps = sorted((out / "sweeps").iterdir())
    again = _study(out)
    assert again.returncode == 0, again.stderr[-2000:]
    assert "running" not in again.stdout
    assert sorted((out / "sweeps").iterdir()) == sweeps
    assert (out / "results.jsonl").read_bytes() == before


def test_a_lost_cell_is_rerun_alone(study):
    out, _ = study
    rows = out / "cells" / "warm__finger_offset__n3__share0.5__seed1" / "rows.json"
    kept = rows.read_bytes()
    rows.unlink()
    again = _study(out)
    assert again.returncode == 0, again.stderr[-2000:]
    assert "running 1 cells" in again.stdout
    # Same command, same seed, finished run resumed: the same figures again.
    assert json.loads(rows.read_bytes()) == json.loads(kept)


def test_a_directory_holding_another_study_is_refused(study):
    out, _ = study
    done = _study(out, "episodes=5")
    assert done.returncode == 2
    assert "holds a different study" in done.stderr and len(done.stderr.splitlines()) == 1


@pytest.mark.parametrize("override, key", [
    ("strategies=[warm,oracle]", "strategies"),
    ("seeds=[]", "seeds"),
    ("launcher=everywhere", "launcher"),
    ("budgets.values=[2.5]", "budgets.values"),
    ("variations=[no_such_variation]", "variations"),
    ("chain.strategies=[scratch_new]", "chain.strategies"),
    ("rounds.count=0", "rounds.count"),
    ("rounds.strategies=[scratch_new]", "rounds.strategies"),
    ("rounds.variation=nowhere", "rounds.variation"),
    ("rounds.retrain=[scratch_new]", "rounds.retrain"),
    ("rounds.retrain=[oracle]", "rounds.retrain"),
    ("rounds.count=1 rounds.retrain=[scratch_mix]", "rounds.retrain"),
    ("share=0", "share"),
])
def test_bad_study_settings_exit_2_naming_the_key(tmp_path, override, key):
    out = tmp_path / "bad"
    done = _study(out, *override.split())
    assert done.returncode == 2, done.stderr
    assert done.stderr.startswith("qadapt study: ") and key in done.stderr, done.stderr
    assert len(done.stderr.splitlines()) == 1
    assert not out.exists()
