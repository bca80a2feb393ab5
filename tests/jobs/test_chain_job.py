"""``qadapt chain``: records, reuse of finished steps, resume after SIGKILL, bad input."""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from .conftest import tree_fingerprint
from .test_pretrain_job import _args, _run


@pytest.fixture(scope="module")
def base(prior, tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("chain_base")
    assert _run(_args(prior, root / "base"), root).returncode == 0
    return root / "base"


def _chain_args(base: Path, prior: Path, out: Path, *extra: str,
                variations: str = "[finger_offset,drive_lag]") -> list[str]:
    return [sys.executable, "-m", "qadapt.cli", "chain", f"base={base}", f"prior={prior}",
            f"variations={variations}", "episodes=8", "steps=40",
            "eval_episodes=6", "eval.every=20", "eval.episodes=6", "checkpoint_every=10",
            "learner.refresh_every=15", "explore.num_envs=4", "progress=false",
            f"out={out}", f"hydra.run.dir={out}_hydra", *extra]


def _final_checkpoint_digest(out: Path) -> dict[str, str]:
    record = json.loads((out / "chain.json").read_text())
    final = Path(record["steps"][-1]["checkpoint"]["path"])
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(final.iterdir()) if p.is_file()}


def test_chain_records_each_step_with_lineage_and_evaluations(base, prior, tmp_path):
    out = tmp_path / "chain"
    done = _run(_chain_args(base, prior, out), tmp_path)
    assert done.returncode == 0, done.stderr
    assert f"outputs written to {out}" in done.stdout
    record = json.loads((out / "chain.json").read_text())
    steps = record["steps"]
    assert [s["variation"] for s in steps] == ["finger_offset", "drive_lag"]
    # Step 1 starts from the base, step 2 from step 1's result; both explore with the base.
    assert steps[1]["parent"] == steps[0]["checkpoint"]["path"]
    assert steps[0]["explored_with"] == steps[1]["explored_with"]
    for step in steps:
        assert [e["variation"] for e in step["evaluations"]] == [
            "none", "finger_offset", "drive_lag"]
        for evaluation in step["evaluations"]:
            assert evaluation["episodes"] == 6 and 0 <= evaluation["successes"] <= 6
        lineage = json.loads(
            (Path(step["checkpoint"]["path"]).parents[1] / "lineage.json").read_text())
        assert [d["sha256"] for d in lineage["datasets"]][-1] == step["dataset"]["sha256"]
        assert lineage["parent_checkpoint"]["path"] == step["parent"]
    # The new data of each step was collected in that step's variation.
    manifest = json.loads((Path(steps[1]["dataset"]["path"]) / "manifest.json").read_text())
    assert "drive_lag" in manifest["environment"]["kwargs"]["perturbations"]

    # qadapt inspect prints the lineage: step 2 <- step 1 <- base, each with its data.
    tree = _run([sys.executable, "-m", "qadapt.cli", "inspect", str(out)], tmp_path)
    assert tree.returncode == 0, tree.stderr
    assert "2 of 2 steps finished (finger_offset -> drive_lag)" in tree.stdout
    assert tree.stdout.count("parent: checkpoint") == 2
    assert str(base) in tree.stdout and steps[0]["dataset"]["sha256"][:12] in tree.stdout

    # A finished chain re-run does no work and changes nothing.
    before = tree_fingerprint(out)
    again = _run(_chain_args(base, prior, out), tmp_path)
    assert again.returncode == 0, again.stderr
    assert "finished earlier; hashes checked, reused" in again.stdout
    assert tree_fingerprint(out) == before


def test_rounds_explore_with_the_latest_result_and_keep_the_earlier_rounds_data(
        base, prior, tmp_path):
    out = tmp_path / "rounds"
    done = _run(_chain_args(base, prior, out, "rounds=2", variations="[finger_offset]"),
                tmp_path)
    assert done.returncode == 0, done.stderr
    assert "finger_offset, round 2" in done.stdout
    steps = json.loads((out / "chain.json").read_text())["steps"]
    assert [(s["variation"], s["round"]) for s in steps] == [
        ("finger_offset", 1), ("finger_offset", 2)]
    # Round 1 explores with the base (explore.policy=base), round 2 with round 1's result.
    assert Path(steps[0]["explored_with"]).resolve() == Path(
        steps[0]["parent"]).resolve()
    assert steps[1]["explored_with"] == steps[0]["checkpoint"]["path"] == steps[1]["parent"]
    # Round 2 trains on the prior data, round 1's data and its own (the new side, last).
    lineage = json.loads(
        (Path(steps[1]["checkpoint"]["path"]).parents[1] / "lineage.json").read_text())
    hashes = [d["sha256"] for d in lineage["datasets"]]
    assert hashes[-2:] == [steps[0]["dataset"]["sha256"], steps[1]["dataset"]["sha256"]]
    assert len(hashes) == 3
    # The prior side (prior data and round 1's) splits 1 - share equally; the round's own
    # data is the new side.
    assert [d["share"] for d in lineage["datasets"]] == [0.25, 0.25, 0.5]

    # earlier_rounds=new puts round 1's data beside round 2's on the new side.
    out = tmp_path / "rounds_new"
    done = _run(_chain_args(base, prior, out, "rounds=2", "earlier_rounds=new",
                            variations="[finger_offset]"), tmp_path)
    assert done.returncode == 0, done.stderr
    step = json.loads((out / "chain.json").read_text())["steps"][1]
    lineage = json.loads(
        (Path(step["checkpoint"]["path"]).parents[1] / "lineage.json").read_text())
    assert [d["share"] for d in lineage["datasets"]] == [0.5, 0.25, 0.25]


def test_killed_chain_resumes_to_the_same_final_checkpoint(base, prior, tmp_path):
    # The same command twice, in the same place (checkpoints record their data's paths):
    # first uninterrupted, then killed mid-way and re-run.
    out = tmp_path / "chain"
    assert _run(_chain_args(base, prior, out), tmp_path).returncode == 0
    straight = _final_checkpoint_digest(out)
    out.rename(tmp_path / "uninterrupted")
    proc = subprocess.Popen(_chain_args(base, prior, out), cwd=tmp_path,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    # Kill in the middle of the second step's fine-tuning (after its first checkpoint).
    marker = out / "step_02_drive_lag" / "finetune" / "checkpoints" / "last"
    deadline = time.monotonic() + 240
    while not marker.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert marker.exists(), "the chain finished or failed before it could be killed"
    assert len(json.loads((out / "chain.json").read_text())["steps"]) == 1
    resumed = _run(_chain_args(base, prior, out), tmp_path)
    assert resumed.returncode == 0, resumed.stderr
    assert "chain step 1 (finger_offset): finished earlier" in resumed.stdout
    assert _final_checkpoint_digest(out) == straight


def test_a_directory_of_another_chain_is_refused_untouched(base, prior, tmp_path):
    out = tmp_path / "chain"
    out.mkdir()
    (out / "chain.json").write_text(json.dumps({"plan": {"digest": "0" * 64}, "steps": []}))
    before = tree_fingerprint(out)
    done = _run(_chain_args(base, prior, out), tmp_path)
    assert done.returncode == 2
    assert "holds a different chain" in done.stderr and len(done.stderr.splitlines()) == 1
    assert tree_fingerprint(out) == before


@pytest.mark.parametrize("override, key", [
    ("variations=[finger_offset,no_such_thing]", "variations"),
    ("variations=[]", "variations"),
    ("episodes=0", "episodes"),
    ("rounds=0", "rounds"),
    ("earlier_rounds=both", "earlier_rounds"),
    ("share=1.0", "share"),
    ("explore.policy=oracle", "explore.policy"),
])
def test_bad_chain_settings_exit_2_naming_the_key(base, prior, tmp_path, override, key):
    out = tmp_path / "chain"
    done = _run(_chain_args(base, prior, out, override), tmp_path)
    assert done.returncode == 2, done.stderr
    assert done.stderr.startswith(f"qadapt chain: {key}") and len(done.stderr.splitlines()) == 1
    assert not out.exists()
