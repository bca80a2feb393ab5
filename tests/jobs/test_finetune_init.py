"""``qadapt finetune init=NAME`` end to end, for every registered init strategy.

The runs happen in this process (Hydra's compose API, then the job function) to keep the
file fast; only the bad-input check runs the console script, for its exit status and stderr.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import torch

from qadapt.checkpoint import load_checkpoint
from qadapt.data import open_dataset
from qadapt.learner.init import INIT_STRATEGIES

from .conftest import run_qadapt

FAST = ["progress=false", "eval.every=0", "learner.refresh_every=2", "learner.batch_size=32",
        "maximizer.samples=16", "maximizer.elites=4", "learner.conservative_samples=4"]


def _run_job(job: str, overrides: list[str]) -> int:
    from hydra import compose, initialize_config_dir
    from hydra.core.global_hydra import GlobalHydra

    from qadapt.config.hydra_entry import CONFIG_DIR
    from qadapt.config.schema import register_schemas, to_typed
    from qadapt.config.training_schema import (
        FinetuneJob,
        PretrainJob,
        register_training_schemas,
    )
    from qadapt.jobs.finetune import finetune_job
    from qadapt.jobs.pretrain import pretrain_job

    register_schemas()
    register_training_schemas()
    GlobalHydra.instance().clear()
    try:
        with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
            cfg = compose(config_name=job, overrides=overrides)
    finally:
        GlobalHydra.instance().clear()
    if job == "pretrain":
        return pretrain_job(to_typed(cfg, PretrainJob))
    return finetune_job(to_typed(cfg, FinetuneJob))


@pytest.fixture(scope="module")
def base_and_new(prior, tmp_path_factory):
    """A small base pretrained on ``prior`` and 8 episodes in the finger_length cell."""
    import gymnasium as gym

    import demo_envs
    from demo_envs.pick_cell import ScriptedPicker
    from qadapt.data import collect

    root = tmp_path_factory.mktemp("init_e2e")
    assert _run_job("pretrain", [f"data={prior}", "steps=6", "checkpoint_every=6",
                                 "network.torso=[32]", "network.head=[16]",
                                 f"out={root / 'base'}", *FAST]) == 0
    perturbations = {"finger_length": 0.055}
    envs = gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=8, perturbations=perturbations)
    collect(envs, ScriptedPicker(noise=0.15, seed=1), episodes=8, out=root / "new", seed=1,
            env_record={"id": demo_envs.PICK_CELL_ID,
                        "kwargs": {"perturbations": perturbations}, "wrappers": []},
            progress=False)
    return root / "base" / "checkpoints" / "last", root / "new"


def _finetune(prior, base, new, out: Path, name: str) -> int:
    return _run_job("finetune", [f"base={base}", f"prior={prior}", f"new={new}", "steps=4",
                                 "checkpoint_every=2", f"out={out}", f"init={name}",
                                 "init.regression.steps=5", "init.regression.batch_size=32",
                                 *FAST])


@pytest.mark.parametrize("name", list(INIT_STRATEGIES))
def test_every_strategy_runs_and_its_records_say_how_the_run_started(
        prior, base_and_new, tmp_path, name):
    base, new = base_and_new
    out = tmp_path / name
    assert _finetune(prior, base, new, out, name) == 0
    summary = json.loads((out / "summary.json").read_text())
    lineage = json.loads((out / "lineage.json").read_text())
    result = load_checkpoint(out / "checkpoints" / "last")
    record = result.metadata.extra["initialisation"]
    assert summary["steps"] == 4
    assert record["name"] == name
    assert summary["initialisation"] == lineage["initialisation"] == record
    if name == "auxiliary":
        assert record["regression"]["steps"] == 5
        # The regression read every prior row, and only the prior rows.
        assert record["regression_rows"] == open_dataset(prior).transition_count
    if name == "frozen_torso":
        start = load_checkpoint(base).weights
        for key, tensor in result.weights.items():
            if key.startswith("critics.") and ".torso." in key:
                source = key.replace("critics.target.", "critics.online.")
                assert torch.equal(tensor, start[source]), key


def test_frozen_torso_runs_are_byte_identical(prior, base_and_new, tmp_path):
    base, new = base_and_new
    files = []
    for run in ("a", "b"):
        assert _finetune(prior, base, new, tmp_path / run, "frozen_torso") == 0
        files.append((tmp_path / run / "checkpoints" / "last" / "weights.safetensors")
                     .read_bytes())
    assert files[0] == files[1]


def test_unknown_init_exits_2_with_one_line(prior, base_and_new, tmp_path):
    base, new = base_and_new
    out = tmp_path / "bad"
    done = run_qadapt("finetune", f"base={base}", f"prior={prior}", f"new={new}",
                      "init=nonsense", f"out={out}", cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    line = done.stderr.strip()
    assert len(line.splitlines()) == 1
    # Hydra names the missing option; the one-line report lists the ones there are.
    assert "init/nonsense" in line and all(name in line for name in INIT_STRATEGIES)
    assert not out.exists()
