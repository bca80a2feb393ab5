"""``qadapt finetune``: warm and scratch starts, lineage, and bad input."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
import torch

from qadapt.checkpoint import load_checkpoint

from .test_pretrain_job import _args, _run


def _qadapt(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    return _run([sys.executable, "-m", "qadapt.cli", *args, "progress=false",
                 f"hydra.run.dir={cwd}/hydra"], cwd)


@pytest.fixture(scope="module")
def base_and_new(prior, tmp_path_factory):
    root = tmp_path_factory.mktemp("ft")
    assert _run(_args(prior, root / "base"), root).returncode == 0
    done = _qadapt("collect", "policy=checkpoint", f"policy.checkpoint={root / 'base'}",
                   "variation=finger_length", "episodes=12", f"out={root / 'new'}", cwd=root)
    assert done.returncode == 0, done.stderr
    return root / "base", root / "new"


def _finetune(prior, base, new, out, *extra):
    return _qadapt("finetune", f"base={base}", f"prior={prior}", f"new={new}", "steps=30",
                   f"out={out}", "eval.every=15", "eval.episodes=8", "checkpoint_every=10",
                   "learner.refresh_every=10", *extra, cwd=out.parent)


@pytest.mark.parametrize("init", ["warm", "scratch"])
def test_finetune_writes_a_checkpoint_whose_lineage_names_parent_and_data(
        prior, base_and_new, tmp_path, init):
    base, new = base_and_new
    out = tmp_path / init
    done = _finetune(prior, base, new, out, f"init={init}")
    assert done.returncode == 0, done.stderr
    lineage = json.loads((out / "lineage.json").read_text())
    parent = load_checkpoint(lineage["parent_checkpoint"]["path"])
    assert lineage["parent_checkpoint"]["sha256"] == parent.identity
    assert [d["path"] for d in lineage["datasets"]] == [str(prior), str(new)]
    assert [d["share"] for d in lineage["datasets"]] == [0.5, 0.5]  # the default share
    result = load_checkpoint(out / "checkpoints" / "last")
    assert result.metadata.parent_checkpoint == parent.identity
    # Evaluation ran in the environment the new data came from (the perturbed cell).
    assert result.metadata.env_kwargs == {"perturbations": {"finger_length": 0.055}}


def test_warm_start_begins_exactly_at_the_base_weights(prior, base_and_new, tmp_path):
    base, new = base_and_new
    out = tmp_path / "zero"
    done = _finetune(prior, base, new, out, "init=warm", "steps=1", "eval.every=0",
                     "checkpoint_every=1", "learner.learning_rate=1e-12")
    assert done.returncode == 0, done.stderr
    before = load_checkpoint(json.loads((base / "summary.json").read_text())["checkpoint"])
    after = load_checkpoint(out / "checkpoints" / "last")
    for name, tensor in before.weights.items():
        if name.startswith("critics.target"):
            # Targets are copied from the online critics at the first refresh.
            continue
        assert torch.allclose(after.weights[name], tensor, atol=1e-6), name


@pytest.mark.parametrize(
    ("extra", "words"),
    [
        (["init=bogus"], ["init", "bogus", "warm"]),
        (["base=/no/such/checkpoint"], ["base", "/no/such/checkpoint"]),
        (["share=1.5"], ["share", "1.5"]),
    ],
)
def test_bad_input_exits_2_with_one_line(prior, base_and_new, tmp_path, extra, words):
    base, new = base_and_new
    out = tmp_path / "bad"
    done = _finetune(prior, base, new, out, *extra)
    assert done.returncode == 2, done.stderr
    line = done.stderr.strip()
    assert len(line.splitlines()) == 1
    for word in words:
        assert word in line
    assert not out.exists()
