"""Hydra's own features through qadapt's jobs: ``--cfg job`` and ``--help``."""

from __future__ import annotations

import re

from omegaconf import OmegaConf

from tests.jobs.conftest import run_ok


def test_cfg_job_prints_the_composed_config_and_runs_nothing(tmp_path):
    out = tmp_path / "never"
    done = run_ok("collect", "--cfg", "job", "variation=drive_lag", "policy=random",
                  "episodes=7", f"out={out}", cwd=tmp_path)
    cfg = OmegaConf.create(done.stdout)
    assert cfg.env.id == "demo_envs/PickCell-v0"
    # drive_lag's default magnitude from configs/variation/drive_lag.yaml.
    assert cfg.variation.name == "drive_lag" and cfg.variation.perturbations.drive_lag == 0.7
    assert cfg.policy.kind == "random" and cfg.episodes == 7 and cfg.out == str(out)
    assert "hydra" not in cfg
    assert not out.exists() and not (tmp_path / "outputs").exists()


def test_cfg_job_for_split_shows_its_keys(tmp_path):
    cfg = OmegaConf.create(run_ok("split", "--cfg", "job", cwd=tmp_path).stdout)
    assert set(cfg) == {"source", "held_out_fraction", "seed", "out_train", "out_held_out",
                        "overwrite"}
    assert cfg.held_out_fraction == 0.1 and OmegaConf.is_missing(cfg, "source")


def test_help_names_the_job_and_lists_the_config_groups(tmp_path):
    text = run_ok("collect", "--help", cwd=tmp_path).stdout
    assert text.splitlines()[0].startswith("collect ")
    groups = dict(re.findall(r"^(env|variation|policy): (.+)$", text, flags=re.MULTILINE))
    assert set(groups) == {"env", "variation", "policy"}
    assert {"gym", "pick_cell"} <= set(groups["env"].split(", "))
    assert {"none", "finger_offset", "drive_lag"} <= set(groups["variation"].split(", "))
    assert {"scripted", "random"} <= set(groups["policy"].split(", "))
