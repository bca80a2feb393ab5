"""``qadapt pretrain`` end to end: reproducible bytes, exact resume after SIGKILL, bad input."""

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

CHECKPOINT_FILES = ("weights.safetensors", "checkpoint.json", "training_state.safetensors")


def _args(prior: Path, out: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "qadapt.cli", "pretrain", f"data={prior}", "steps=60",
            f"out={out}", "eval.every=30", "eval.episodes=8", "checkpoint_every=20",
            "progress=false", "learner.refresh_every=25", f"hydra.run.dir={out}_hydra", *extra]


def _digests(run: Path) -> dict[str, str]:
    return {p.relative_to(run).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted((run / "checkpoints").rglob("*")) if p.is_file()}


def _run(args, cwd) -> subprocess.CompletedProcess:
    return subprocess.run(args, capture_output=True, text=True, cwd=cwd)


def _kill_after_first_checkpoint(prior: Path, out: Path, cwd: Path) -> None:
    """Start a pretraining run into ``out`` and SIGKILL it once checkpoints/last exists."""
    proc = subprocess.Popen(_args(prior, out), cwd=cwd, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    marker = out / "checkpoints" / "last" / "checkpoint.json"
    deadline = time.monotonic() + 120
    while not marker.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()


def test_same_config_and_seed_give_identical_checkpoint_bytes(prior, tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    for out in (a, b):
        done = _run(_args(prior, out), tmp_path)
        assert done.returncode == 0, done.stderr
        assert f"outputs written to {out}" in done.stdout
    assert _digests(a) == _digests(b)
    assert {"checkpoints/last/weights.safetensors", "checkpoints/best/weights.safetensors"} <= set(
        _digests(a))
    assert (a / "summary.json").exists() and (a / "lineage.json").exists()


def test_a_kill_between_the_renames_of_a_replacement_loses_nothing(prior, tmp_path):
    # Replacing checkpoints/last renames the old copy to .last.replaced-* and then the new
    # one in; a kill in between leaves no checkpoints/last. The resumed run puts the old copy
    # back and ends with the bytes of an uninterrupted run.
    straight, killed = tmp_path / "straight", tmp_path / "killed"
    assert _run(_args(prior, straight), tmp_path).returncode == 0
    _kill_after_first_checkpoint(prior, killed, tmp_path)
    last = killed / "checkpoints" / "last"
    last.rename(last.parent / ".last.replaced-k1ll")
    resumed = _run(_args(prior, killed), tmp_path)
    assert resumed.returncode == 0, resumed.stderr
    assert not list(last.parent.glob(".last.replaced-*"))
    # It continued from the restored checkpoint, not from the start.
    summary = json.loads((killed / "summary.json").read_text())
    assert summary["resumed_from_step"] > 0
    assert _digests(killed) == _digests(straight)


def test_killed_run_resumes_to_the_same_bytes(prior, tmp_path):
    straight, killed = tmp_path / "straight", tmp_path / "killed"
    assert _run(_args(prior, straight), tmp_path).returncode == 0
    _kill_after_first_checkpoint(prior, killed, tmp_path)
    resumed = _run(_args(prior, killed), tmp_path)
    assert resumed.returncode == 0, resumed.stderr
    assert _digests(killed) == _digests(straight)


@pytest.mark.parametrize(
    ("extra", "words"),
    [
        (["data=/no/such/dataset"], ["data", "/no/such/dataset"]),
        (["learner.learning_rate=-1"], ["learning_rate", "-1"]),
        (["network.form=wide"], ["form", "wide"]),
        (["learner=nonsense"], ["learner", "nonsense"]),
        (["eval=pick_cell", "+eval.env.kwargs={max_items: 3}"], ["(51,)", "(61,)"]),
    ],
)
def test_bad_input_exits_2_with_one_line(prior, tmp_path, extra, words):
    args = _args(prior, tmp_path / "run")
    args = [a for a in args if not any(a.startswith(e.split("=")[0] + "=") for e in extra)]
    done = _run([*args, *extra], tmp_path)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    for word in words:
        assert word in lines[0]
    assert not (tmp_path / "run" / "checkpoints").exists()


def test_rerun_with_another_config_refuses_and_keeps_the_checkpoint(prior, tmp_path):
    out = tmp_path / "run"
    assert _run(_args(prior, out), tmp_path).returncode == 0
    before = _digests(out)
    done = _run(_args(prior, out, "learner.learning_rate=0.001"), tmp_path)
    assert done.returncode == 2
    assert "different configuration" in done.stderr
    assert _digests(out) == before


def test_a_checkpoint_policy_collects_a_dataset_that_names_it(prior, tmp_path):
    import json

    run = tmp_path / "run"
    assert _run(_args(prior, run), tmp_path).returncode == 0
    best = run / "checkpoints" / "best"
    out = tmp_path / "explored"
    done = _run([sys.executable, "-m", "qadapt.cli", "collect", "policy=checkpoint",
                 f"policy.checkpoint={best}", "variation=finger_offset", "episodes=6",
                 f"out={out}", "progress=false", f"hydra.run.dir={tmp_path}/h"], tmp_path)
    assert done.returncode == 0, done.stderr
    manifest = json.loads((out / "manifest.json").read_text())
    collected_by = json.dumps(manifest)
    assert str(best) in collected_by and "checkpoint_sha256" in collected_by
    # A checkpoint whose spaces do not match the env is refused in one line.
    wrong = _run([sys.executable, "-m", "qadapt.cli", "collect", "policy=checkpoint",
                  f"policy.checkpoint={best}", "+env.kwargs={max_items: 2}", "episodes=2",
                  f"out={tmp_path}/wrong", "progress=false", f"hydra.run.dir={tmp_path}/h"],
                 tmp_path)
    assert wrong.returncode == 2
    assert len(wrong.stderr.strip().splitlines()) == 1 and "(61,)" in wrong.stderr
