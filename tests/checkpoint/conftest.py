"""Shared pieces of the checkpoint tests: metadata, small weights, a saved checkpoint."""

from __future__ import annotations

from datetime import UTC, datetime

import gymnasium
import numpy as np
import pytest
import torch

from qadapt.checkpoint import CheckpointMetadata, save_checkpoint

FIXED_TIME = datetime(2024, 3, 1, 12, 30, 0, 250000, tzinfo=UTC)


def make_metadata(obs_dim: int = 61, act_dim: int = 4, **overrides) -> CheckpointMetadata:
    """Pick-cell style metadata with a fixed creation time."""
    settings = dict(
        observation_space=gymnasium.spaces.Box(-np.inf, np.inf, (obs_dim,), dtype=np.float32),
        action_space=gymnasium.spaces.Box(-1.0, 1.0, (act_dim,), dtype=np.float32),
        network={"form": "late_fusion", "torso": [32], "head": [16, 16], "output": "sigmoid",
                 "initial_value": 0.1, "layer_norm": False},
        env_id="demo_envs/PickCell-v0",
        env_kwargs={"perturbations": {"finger_offset": 0.07}, "max_items": 4},
        gradient_step=1200,
        config_digest="9f" * 32,
        parent_checkpoint="ab" * 32,
        datasets=[{"path": "data/prior", "sha256": "01" * 32},
                  {"path": "data/cell-b", "sha256": "23" * 32}],
        source_indicator={"enabled": True, "sources": 2},
        extra={"note": "tote B, new fingers", "ratio": [0.5, 0.5]},
        created_at=FIXED_TIME,
    )
    settings.update(overrides)
    return CheckpointMetadata(**settings)


def make_weights(seed: int = 0) -> dict[str, torch.Tensor]:
    g = torch.Generator().manual_seed(seed)
    return {
        "online.0.torso.0.weight": torch.randn(32, 61, generator=g),
        "online.0.torso.0.bias": torch.randn(32, generator=g),
        "acting.head.weight": torch.randn(1, 16, generator=g),
        "obs_mean": torch.randn(61, generator=g, dtype=torch.float64),
        "count": torch.tensor(7, dtype=torch.int64),
    }


def make_training_state(seed: int = 0) -> dict:
    g = torch.Generator().manual_seed(seed)
    return {
        "step": 1200,
        "optimizer": {
            "state": {0: {"step": torch.tensor(1200.0), "exp_avg": torch.randn(4, generator=g)}},
            "param_groups": [{"lr": 3e-4, "betas": (0.9, 0.999), "params": [0], "foreach": None}],
        },
        "generator": g.get_state(),
        "cache": {"targets": [torch.rand(5, generator=g), torch.rand(3, generator=g)]},
        "sampler": {"generator_now": np.random.default_rng(seed).bit_generator.state},
    }


@pytest.fixture
def saved(tmp_path):
    """A training checkpoint at tmp_path / "ckpt": (path, info, weights, metadata, state)."""
    path = tmp_path / "ckpt"
    weights, metadata, state = make_weights(), make_metadata(), make_training_state()
    info = save_checkpoint(path, weights, metadata, training_state=state)
    return path, info, weights, metadata, state
