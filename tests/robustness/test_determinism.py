"""The same config and seed give byte-identical checkpoint files across separate processes."""

from __future__ import annotations

import pytest

from tests.robustness.crash_trials import checkpoint_digests, reference_run


def test_pretrain_twice_gives_identical_checkpoint_bytes(workspace, tmp_path):
    # The workspace's own run is the first process; this is the second, same command.
    first = checkpoint_digests(workspace.run)
    from tests.robustness.bad_inputs import SMALL_TRAINING, run_in_subprocess

    out = tmp_path / "again"
    argv = ["pretrain", f"data={workspace.dataset}", "steps=20", "eval.every=10",
            "eval.episodes=2", "checkpoint_every=10", f"out={out}", *SMALL_TRAINING]
    done = run_in_subprocess(argv, tmp_path, tmp_path / "hydra")
    assert done.code == 0, done.stderr
    assert {"checkpoints/last/weights.safetensors", "checkpoints/best/weights.safetensors",
            "checkpoints/last/training_state.safetensors"} <= set(first)
    assert checkpoint_digests(out) == first


@pytest.mark.slow  # two training processes, about 15 s
def test_finetune_twice_gives_identical_checkpoint_bytes(workspace, tmp_path):
    a, _ = reference_run("finetune", workspace, tmp_path / "a", steps=20)
    b, _ = reference_run("finetune", workspace, tmp_path / "b", steps=20)
    assert "checkpoints/last/weights.safetensors" in a
    assert a == b
