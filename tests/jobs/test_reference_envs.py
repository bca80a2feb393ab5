"""Every job family on two of gymnasium's reference environments, from the command line.

CartPole-v1 has a Discrete(2) action space and a reward of +1 per step; Pendulum-v1 a Box(-2, 2,
(1,)) action space and rewards in [-16.3, 0]; neither reports ``is_success`` (gymnasium's
documentation of both). So these runs take the paths the pick cell never does: the exhaustive
maximiser, a linear value head, selection by mean return, "n/a" for success.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from tests.jobs.conftest import run_ok

TINY = ("network.torso=[16,16]", "network.head=[8]", "learner.batch_size=32",
        "maximizer.samples=8", "learner.refresh_every=10", "progress=false")
ENVS = {
    "CartPole-v1": ("exhaustive over the 2 choices", "random_rate=0.2"),
    "Pendulum-v1": ("CEM, 8 samples", "noise=0.1"),
}


def _json(path):
    # Strict JSON: no NaN or Infinity anywhere (json.loads would accept them).
    def refuse(token):
        raise ValueError(f"{path}: holds {token}")
    return json.loads(path.read_text(), parse_constant=refuse)


@pytest.mark.parametrize("env_id", sorted(ENVS))
def test_every_job_family_runs_on_a_reference_env(env_id, tmp_path):
    maximizer_line, exploration = ENVS[env_id]
    gym_env = ("env=gym", f"env.id={env_id}")
    run_ok("collect", *gym_env, "policy=random", "episodes=12", "num_envs=4", "out=prior",
           "progress=false", cwd=tmp_path)
    run_ok("split", "source=prior", "held_out_fraction=0.25", "out_train=fit",
           "out_held_out=check", cwd=tmp_path)
    run_ok("inspect", "prior", cwd=tmp_path)

    base = run_ok("pretrain", "data=prior", "steps=30", "eval.every=15", "eval.episodes=3",
                  "out=base", *TINY, cwd=tmp_path)
    assert f"maximizer: {maximizer_line}" in base.stdout
    assert "value head: linear output, huber loss (auto: " in base.stdout
    assert "best greedy success n/a (the env reports no success)" in base.stdout
    summary = _json(tmp_path / "base" / "summary.json")
    assert summary["best_success_rate"] is None
    assert math.isfinite(summary["best_mean_return"])
    assert all(not e["success_reported"] for e in summary["evaluations"])
    # The selected evaluation has the highest mean return of all (ties: the earlier one).
    returns = [e["mean_return"] for e in summary["evaluations"]]
    assert summary["best"]["step"] == summary["evaluations"][returns.index(max(returns))]["step"]

    run_ok("collect", *gym_env, "policy=checkpoint", "policy.checkpoint=base",
           f"policy.{exploration}", "episodes=6", "num_envs=3", "seed=1", "out=new",
           "progress=false", cwd=tmp_path)
    tuned = run_ok("finetune", "base=base", "prior=prior", "new=new", "steps=20",
                   "eval.every=10", "eval.episodes=3", "learner.refresh_every=10",
                   "learner.batch_size=32", "out=tuned", "progress=false", cwd=tmp_path)
    # The base's linear head and Huber loss carry over without being named, and so do its
    # maximiser settings (8 CEM samples, not the CEM's default 64).
    assert "value head: linear output, huber loss" in tuned.stdout
    assert f"maximizer: {maximizer_line}" in tuned.stdout
    for init in ("scratch", "torso"):
        run_ok("finetune", "base=base", "prior=prior", "new=new", "steps=10", f"init={init}",
               "eval.every=0", "learner.refresh_every=5", "learner.batch_size=32",
               "maximizer.samples=8", f"out=tuned_{init}", "progress=false", cwd=tmp_path)

    chained = run_ok("chain", "base=base", "prior=prior", *gym_env, "variations=[none]",
                     "episodes=3", "steps=10", "eval_episodes=3", "eval.every=5",
                     "eval.episodes=2", "learner.refresh_every=5", "learner.batch_size=32",
                     "maximizer.samples=8", "explore.num_envs=3", "out=chain", cwd=tmp_path)
    assert "each cell is the mean return" in chained.stdout
    assert "return " in chained.stdout.splitlines()[-3]

    shown = run_ok("evaluate", "ckpt=[base,tuned]", "episodes=3", "num_envs=3", "out=scores",
                   cwd=tmp_path)
    assert "n/a (no success flag)" in shown.stdout and "0.0%" not in shown.stdout
    scores = _json(tmp_path / "scores" / "evaluation.json")
    assert [r["success_rate"] for r in scores["results"]] == [None, None]


def test_one_output_per_choice_network_on_cartpole(tmp_path):
    run_ok("collect", "env=gym", "env.id=CartPole-v1", "policy=random", "episodes=8",
           "num_envs=4", "out=data", "progress=false", cwd=tmp_path)
    done = run_ok("pretrain", "data=data", "steps=20", "eval.every=10", "eval.episodes=2",
                  "network=per_action", "network.torso=[16]", "learner.batch_size=32",
                  "learner.refresh_every=10", "out=base", "progress=false", cwd=tmp_path)
    assert "maximizer: exhaustive" in done.stdout
    meta = _json(tmp_path / "base" / "checkpoints" / "best" / "checkpoint.json")
    assert meta["network"]["q_network"]["form"] == "per_action"
    assert meta["network"]["value"]["loss"] == "huber"


@pytest.mark.slow
def test_cartpole_defaults_learn_from_random_episodes(tmp_path):
    """Issue target: CartPole-v1 from 150 random episodes, defaults only, at least twice the
    random policy's mean return. The random policy's return is the collected data's own (its
    manifest); CartPole-v1 caps an episode at 500 steps, +1 each (gymnasium's registration)."""
    run_ok("collect", "env=gym", "env.id=CartPole-v1", "policy=random", "episodes=150",
           "out=data", "progress=false", cwd=tmp_path)
    random_return = float(np.mean(np.load(tmp_path / "data" / "episode_returns.npy",
                                          allow_pickle=False)))
    run_ok("pretrain", "data=data", "steps=3000", "eval.episodes=50", "out=base",
           "progress=false", cwd=tmp_path)
    run_ok("evaluate", "ckpt=base", "episodes=100", "out=scores", cwd=tmp_path)
    learned = _json(tmp_path / "scores" / "evaluation.json")["results"][0]
    assert 15.0 < random_return < 30.0  # about 22 for uniform random actions (from memory)
    assert learned["return_low"] >= 2 * random_return, (learned["mean_return"], random_return)
