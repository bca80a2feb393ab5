"""``qadapt finetune indicator=...``: a base without an indicator, widened exactly."""

from __future__ import annotations

import json

import torch

from .test_finetune_job import _finetune, base_and_new  # noqa: F401  (module fixture)


def test_finetune_with_a_flag_starts_exactly_at_the_base_and_records_it(
        prior, base_and_new, tmp_path):  # noqa: F811
    from qadapt.checkpoint import load_checkpoint
    from qadapt.learner.loading import load_q_network

    base, new = base_and_new
    out = tmp_path / "flag"
    done = _finetune(prior, base, new, out, "indicator=flag", "steps=2", "eval.every=1",
                     "eval.episodes=4", "checkpoint_every=1", "learner.learning_rate=1e-12")
    assert done.returncode == 0, done.stderr
    result = load_checkpoint(out / "checkpoints" / "last")
    assert result.metadata.network["source_indicator"]["acting"] == [1.0]
    # The widened first layer has one more input column; its weights start at zero (one
    # step at learning rate 1e-12 moves them by about 1e-12).
    first = result.weights["critics.online.0.torso.0.weight"]
    assert first[:, -1].abs().max() < 1e-9
    tagged, _ = load_q_network(out / "checkpoints" / "last")
    plain, _ = load_q_network(json.loads((base / "summary.json").read_text())["checkpoint"])
    obs = torch.randn(6, plain.obs_dim)
    actions = torch.rand(6, plain.action_dim) * 2 - 1
    assert tagged.obs_dim == plain.obs_dim
    assert torch.allclose(tagged(obs, actions), plain(obs, actions), atol=1e-5)

    # Its greedy policy runs in an env that knows nothing of indicators.
    from .conftest import run_qadapt

    evaluated = run_qadapt("evaluate", f"ckpt={out}", "variation=finger_length", "episodes=4",
                           f"out={tmp_path / 'eval'}", cwd=tmp_path)
    assert evaluated.returncode == 0, evaluated.stderr
    assert json.loads((tmp_path / "eval" / "evaluation.json").read_text())

    # A run from it must keep an indicator; without one it stops before any work.
    again = _finetune(prior, out, new, tmp_path / "none", "indicator=none")
    assert again.returncode == 2 and "indicator" in again.stderr
    assert len(again.stderr.strip().splitlines()) == 1
