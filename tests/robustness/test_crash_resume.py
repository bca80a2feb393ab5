"""Killed training jobs resume to the uninterrupted run's checkpoint bytes (a few trials; the
full set of seeded trials is scripts/robustness_report)."""

from __future__ import annotations

import random

import pytest

from tests.robustness.crash_trials import available_jobs, crash_trial, reference_run


@pytest.mark.slow
@pytest.mark.parametrize("job", [j for j in ("pretrain", "finetune") if j in available_jobs()])
def test_sigkill_then_rerun_gives_the_same_checkpoint_bytes(job, workspace, tmp_path):
    reference, seconds = reference_run(job, workspace, tmp_path / "straight", steps=40)
    assert reference, "the reference run wrote no checkpoint"
    kill_after = random.Random(f"{job}-0").uniform(0.5, 0.9) * seconds  # seeded moment
    trial = crash_trial(job, workspace, tmp_path / "killed", 40, kill_after, reference)
    assert trial.identical, trial.detail
    assert trial.nothing_lost, trial
