"""``qadapt score`` from the command line: checkpoints ranked from held-out data alone.

The value estimate itself is checked against published values in
tests/learner/test_policy_value.py (Sutton and Barto's random walk and gridworld); here the
job's plumbing: which checkpoints a directory means, the record it writes, the ranks, the
refusal of held-out episodes that trained a checkpoint. CartPole-v1 (gymnasium's reference
env, Discrete actions) stands in for a logged robot: no env is run by the scoring.
"""

from __future__ import annotations

import json

from tests.jobs.conftest import inspect_json, run_ok, run_qadapt

TINY = ("network.torso=[16,16]", "network.head=[8]", "learner.batch_size=32",
        "learner.refresh_every=10", "eval.every=0", "progress=false")
FIT = ("fit.fits=4", "fit.steps_per_fit=20", "reps=200")


def test_score_ranks_every_checkpoint_below_the_given_folders(tmp_path):
    run_ok("collect", "env=gym", "env.id=CartPole-v1", "policy=random", "episodes=24",
           "num_envs=4", "out=logged", "progress=false", cwd=tmp_path)
    run_ok("split", "source=logged", "held_out_fraction=0.25", "out_train=fit",
           "out_held_out=check", cwd=tmp_path)
    for name, steps in (("short", 10), ("long", 40)):
        run_ok("pretrain", "data=fit", f"steps={steps}", f"out=runs/{name}", *TINY, cwd=tmp_path)

    shown = run_ok("score", "ckpt=runs", "data=check", *FIT, "out=scored", cwd=tmp_path)
    record = json.loads((tmp_path / "scored" / "score.json").read_text())
    held_out = inspect_json(tmp_path / "check", tmp_path)
    # Every checkpoint below runs/ (one per run: evaluation off keeps only last).
    assert sorted(r["checkpoint"] for r in record["results"]) == [
        "runs/long/checkpoints/last", "runs/short/checkpoints/last"]
    assert record["episodes"] == held_out["episodes"]
    for key in ("fqe", "td_error", "own_q"):
        assert sorted(r[f"rank_{key}"] for r in record["results"]) == [1, 2]
    for r in record["results"]:
        assert r["fqe_low"] <= r["fqe_value"] <= r["fqe_high"]
        assert len(r["fqe_start_values"]) == held_out["episodes"]
        assert r["datasets"][0]["sha256"] and r["overlap"]["episodes"] == 0
        assert r["td_error"] >= 0
    # The table lists the FQE ranking first.
    table = shown.stdout.splitlines()
    first = min(record["results"], key=lambda r: r["rank_fqe"])
    assert table[2].split()[:2] == ["1", first["checkpoint"]]

    # Episodes that trained the checkpoints are refused as held-out data, unless insisted on.
    refused = run_qadapt("score", "ckpt=runs/long", "data=fit", *FIT, "out=again", cwd=tmp_path)
    assert refused.returncode == 2 and "also trained" in refused.stderr
    assert not (tmp_path / "again").exists()
    insisted = run_ok("score", "ckpt=runs/long", "data=fit", *FIT, "allow_overlap=true",
                      "out=again", cwd=tmp_path)
    assert "warning:" in insisted.stdout and "optimistic" in insisted.stdout
