"""A run directory keeps working after it is copied or moved (its summary.json is resolved
inside the directory it sits in, not at the path it was written from)."""

from __future__ import annotations

import json
import shutil

from tests.jobs.conftest import run_ok

TINY = ("network.torso=[16]", "network.head=[8]", "learner.batch_size=16",
        "maximizer.samples=8", "learner.refresh_every=10", "progress=false")


def test_a_moved_run_is_evaluated_and_fine_tuned_from_its_new_place(tmp_path):
    run_ok("collect", "policy=scripted", "episodes=8", "num_envs=8", "out=data",
           "progress=false", cwd=tmp_path)
    run_ok("pretrain", "data=data", "steps=20", "eval.every=10", "eval.episodes=2",
           "out=original", *TINY, cwd=tmp_path)
    shutil.copytree(tmp_path / "original", tmp_path / "elsewhere" / "moved")
    shutil.rmtree(tmp_path / "original")

    run_ok("evaluate", "ckpt=elsewhere/moved", "episodes=2", "num_envs=2", "out=scores",
           cwd=tmp_path)
    result = json.loads((tmp_path / "scores" / "evaluation.json").read_text())["results"][0]
    assert result["checkpoint"] == "elsewhere/moved/checkpoints/best"
    run_ok("finetune", "base=elsewhere/moved", "prior=data", "new=data", "steps=5",
           "eval.every=0", "learner.refresh_every=5", "learner.batch_size=16",
           "maximizer.samples=8", "out=tuned", "progress=false", cwd=tmp_path)
    lineage = json.loads((tmp_path / "tuned" / "lineage.json").read_text())
    assert lineage["parent_checkpoint"]["path"] == "elsewhere/moved/checkpoints/best"
