"""``qadapt evaluate``: intervals by a second method, the job end to end, bad input, launchers."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from omegaconf import OmegaConf

from qadapt.stats import bootstrap_mean_interval, wilson_interval
from tests.jobs.conftest import run_ok, run_qadapt
from tests.test_stats import wilson_closed_form

RESULT_KEYS = {"checkpoint", "checkpoint_sha256", "variation", "env", "successes", "episodes",
               "success_rate", "wilson_low", "wilson_high", "returns", "lengths", "mean_return",
               "return_low", "return_high", "mean_length"}


def _pretrain(data: Path, run: Path, cwd: Path) -> Path:
    """A tiny checkpoint: 20 gradient steps of a small network, no in-training evaluation."""
    run_ok("pretrain", f"data={data}", "steps=20", f"out={run}", "eval.every=0",
           "checkpoint_every=20", "progress=false", "learner.refresh_every=10",
           "learner.batch_size=64", "network.torso=[32]", "network.head=[16]",
           f"hydra.run.dir={run}_hydra", cwd=cwd)
    return run


@pytest.fixture(scope="module")
def run_dir(pick_cell_dataset, tmp_path_factory) -> Path:
    """A run directory trained on finger_offset data (so its checkpoint records that env)."""
    root = tmp_path_factory.mktemp("evaluate")
    return _pretrain(pick_cell_dataset, root / "base", root)


@pytest.fixture(scope="module")
def pendulum_run(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("pendulum")
    run_ok("collect", "env=gym", "env.id=Pendulum-v1", "policy=random", "episodes=4",
           f"out={root / 'data'}", "progress=false", f"hydra.run.dir={root}/h", cwd=root)
    return _pretrain(root / "data", root / "run", root)


# -- the intervals --------------------------------------------------------------------------
@pytest.mark.parametrize(("successes", "trials"),
                         [(0, 1), (1, 1), (0, 20), (20, 20), (7, 20), (1, 200), (199, 200),
                          (0, 1000), (1000, 1000), (517, 1000)])
def test_wilson_interval_matches_the_closed_form_including_none_and_all(successes, trials):
    # Reference: the closed-form Wilson (1927) score interval as written by Agresti and Coull
    # (1998), computed with the standard library in tests/test_stats.py; 95% by default.
    want_low, want_high = wilson_closed_form(successes, trials, 0.95)
    low, high = wilson_interval(successes, trials)
    assert low == pytest.approx(want_low, abs=1e-9)
    assert high == pytest.approx(want_high, abs=1e-9)
    # None and all: the bounds are exactly 0 and 1 (Wilson, 1927), not 0 and 1 to rounding.
    assert (successes > 0 or low == 0.0) and (successes < trials or high == 1.0)


@pytest.mark.parametrize("size", [1, 60, 300])  # 300 values: resampled in several blocks
def test_bootstrap_interval_holds_the_mean_and_is_seeded(size):
    values = np.random.default_rng(7).normal(1.0, 2.0, size=size)
    low, high = bootstrap_mean_interval(values, seed=3)
    assert low <= values.mean() <= high
    assert bootstrap_mean_interval(values, seed=3) == (low, high)
    if size > 1:
        assert bootstrap_mean_interval(values, seed=4) != (low, high)
        # Reference: the percentile bootstrap (Efron, 1979) computed directly with numpy on the
        # same resamples: 10,000 rows of integers(0, n, n) from default_rng(seed), as the
        # docstring states, each row's mean, then the 2.5% and 97.5% quantiles of the means.
        picks = np.random.default_rng(3).integers(0, size, size=(10_000, size))
        want_low, want_high = np.quantile(values[picks].mean(axis=1), [0.025, 0.975])
        assert low == pytest.approx(want_low, rel=1e-12, abs=1e-12)
        assert high == pytest.approx(want_high, rel=1e-12, abs=1e-12)
    else:
        assert (low, high) == (values[0], values[0])


def test_bootstrap_interval_rejects_bad_input():
    for values, word in (([], "values"), ([1.0, float("nan")], "values"), ([[1.0]], "values")):
        with pytest.raises(ValueError, match=word):
            bootstrap_mean_interval(values)
    with pytest.raises(ValueError, match="confidence"):
        bootstrap_mean_interval([1.0, 2.0], confidence=1.0)
    with pytest.raises(ValueError, match="resamples"):
        bootstrap_mean_interval([1.0, 2.0], resamples=0)


# -- the job --------------------------------------------------------------------------------
def test_evaluate_writes_counts_per_episode_figures_and_config(run_dir, tmp_path):
    from qadapt.checkpoint import load_checkpoint

    out = tmp_path / "report"
    last = run_dir / "checkpoints" / "last"
    done = run_ok("evaluate", f"ckpt=[{run_dir},{last}]", "variations=[none,finger_offset]",
                  "episodes=6", "num_envs=4", f"out={out}", f"hydra.run.dir={tmp_path}/h",
                  cwd=tmp_path)
    assert f"outputs written to {out}" in done.stdout
    record = json.loads((out / "evaluation.json").read_text())
    results = record["results"]
    assert [(Path(r["checkpoint"]), r["variation"]) for r in results] == [
        (last, "none"), (last, "finger_offset"), (last, "none"), (last, "finger_offset")]
    identity = load_checkpoint(last).identity
    for r in results:
        assert RESULT_KEYS <= set(r)
        assert r["checkpoint_sha256"] == identity
        assert r["episodes"] == 6 and len(r["returns"]) == 6 and len(r["lengths"]) == 6
        assert r["successes"] == sum(r["success"])
        assert r["success_rate"] == r["successes"] / 6
        assert (r["wilson_low"], r["wilson_high"]) == wilson_interval(r["successes"], 6)
        assert r["mean_length"] == pytest.approx(np.mean(r["lengths"]))
        assert r["return_low"] <= r["mean_return"] <= r["return_high"]
    # The checkpoint records finger_offset data; evaluation applies the variation asked for.
    assert results[0]["env"]["kwargs"] == {}
    assert results[1]["env"]["kwargs"] == {"perturbations": {"finger_offset": 0.07}}
    # Same checkpoint, seed and variation: the same episodes.
    assert results[0]["returns"] == results[2]["returns"]
    config = OmegaConf.load(out / "config.yaml")
    assert list(config.ckpt) == [str(run_dir), str(last)] and config.episodes == 6
    for r in results:
        assert r["variation"] in done.stdout


def test_evaluate_checkpoint_in_process_in_a_gym_env(pendulum_run):
    from qadapt.config.schema import EnvConfig, VariationConfig
    from qadapt.jobs.evaluate import evaluate_checkpoint

    recorded = evaluate_checkpoint(pendulum_run, None, VariationConfig(), episodes=3, seed=1)
    given = evaluate_checkpoint(pendulum_run, EnvConfig(id="Pendulum-v1"), VariationConfig(),
                                episodes=3, seed=1)
    assert recorded == given
    assert recorded["env"]["id"] == "Pendulum-v1"
    # Pendulum-v1 ends every episode by truncation after 200 steps (gymnasium's registration)
    # and reports no success.
    assert recorded["lengths"] == [200, 200, 200] and recorded["successes"] == 0
    assert all(r < 0 for r in recorded["returns"])  # Pendulum's reward is never positive


@pytest.fixture(scope="module")
def sweep(run_dir, tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("sweep")
    run_ok("evaluate", "--multirun", f"ckpt={run_dir}", "variation=none,finger_offset",
           "episodes=4", "launcher=cluster_local", f"hydra.sweep.dir={root}/cells", cwd=root)
    return root / "cells"


def test_a_multirun_through_submitits_local_executor_writes_every_cell(sweep):
    # launcher=cluster_local: each cell in its own process, the Slurm launcher's code path.
    names = []
    for cell in ("0", "1"):
        record = json.loads((sweep / cell / "evaluation" / "evaluation.json").read_text())
        names += [r["variation"] for r in record["results"]]
    assert names == ["none", "finger_offset"]
    assert (sweep / ".submitit").is_dir()


@pytest.mark.parametrize(("job", "launcher", "target"), [
    ("evaluate", "parallel", "JoblibLauncher"),
    ("evaluate", "cluster", "SlurmLauncher"),
    ("pretrain", "parallel", "JoblibLauncher"),
    ("finetune", "cluster_local", "LocalLauncher"),
    ("evaluate", "local", "BasicLauncher"),
])
def test_launcher_choices_set_hydras_launcher(job, launcher, target):
    from hydra import compose, initialize_config_dir

    from qadapt.config.evaluate_schema import register_evaluate_schema
    from qadapt.config.hydra_entry import CONFIG_DIR
    from qadapt.config.schema import register_schemas
    from qadapt.config.training_schema import register_training_schemas

    register_schemas()
    register_training_schemas()
    register_evaluate_schema()
    with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
        cfg = compose(config_name=job, overrides=[f"launcher={launcher}"],
                      return_hydra_config=True)
    assert cfg.hydra.launcher._target_.endswith(target)
    if launcher == "parallel":
        assert cfg.hydra.launcher.n_jobs == 2
    if launcher.startswith("cluster"):
        assert cfg.hydra.launcher.cpus_per_task == 1
    assert "launcher" not in cfg  # the group only sets hydra.launcher


@pytest.mark.parametrize(("args", "words"), [
    (["ckpt=/no/such/run"], ["ckpt", "/no/such/run", "does not exist"]),
    (["ckpt={data}"], ["ckpt", "{data}", "neither a checkpoint nor a run directory"]),
    (["ckpt={run}", "variation=sideways_gantry"], ["variation", "sideways_gantry"]),
    (["ckpt={run}", "variations=[none,sideways_gantry]"], ["variations", "sideways_gantry"]),
    (["ckpt={run}", "episodes=0"], ["episodes", "0"]),
    (["ckpt={run}", "variation=drive_lag", "variations=[none]"], ["variation", "variations"]),
    (["ckpt={run}", "env=gym", "env.id=Pendulum-v1"], ["Pendulum-v1", "(61,)", "(3,)"]),
])
def test_bad_input_exits_2_with_one_line(run_dir, pick_cell_dataset, tmp_path, args, words):
    places = {"run": run_dir, "data": pick_cell_dataset}
    out = tmp_path / "never"
    given = [a.format(**places) for a in args]
    if not any(a.startswith("episodes=") for a in given):
        given.append("episodes=3")
    done = run_qadapt("evaluate", *given, f"out={out}", f"hydra.run.dir={tmp_path}/h",
                      cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert lines[0].startswith("qadapt evaluate: ")
    for word in words:
        assert word.format(**places) in lines[0], lines[0]
    assert not out.exists()
