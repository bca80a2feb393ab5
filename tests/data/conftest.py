"""Shared fixtures for the replay-dataset tests: small datasets built in temporary dirs."""

from __future__ import annotations

import json
from pathlib import Path

import gymnasium
import numpy as np
import pytest

from qadapt.data.writing.writer import DatasetWriter

ENV_RECORD = {"id": "Pendulum-v1", "kwargs": {"g": 9.81}, "wrappers": []}


def make_episodes(lengths, obs_dim=3, act_dim=2, seed=0, terminal_every=2):
    """Arrays of whole episodes with next_observations[t] == observations[t+1] inside each."""
    rng = np.random.default_rng(seed)
    lengths = np.asarray(lengths, dtype=np.int64)
    obs, nxt, term, trunc = [], [], [], []
    for number, length in enumerate(lengths):
        states = rng.standard_normal((length + 1, obs_dim)).astype(np.float32)
        obs.append(states[:-1])
        nxt.append(states[1:])
        t = np.zeros(length, bool)
        u = np.zeros(length, bool)
        (t if number % terminal_every == 0 else u)[-1] = True
        term.append(t)
        trunc.append(u)
    rows = int(lengths.sum())
    return {
        "observations": np.concatenate(obs),
        "actions": rng.uniform(-1, 1, (rows, act_dim)).astype(np.float32),
        "rewards": rng.standard_normal(rows).astype(np.float32),
        "next_observations": np.concatenate(nxt),
        "terminated": np.concatenate(term),
        "truncated": np.concatenate(trunc),
        "success": rng.random(rows) < 0.1,
        "episode_lengths": lengths,
    }


@pytest.fixture
def episode_arrays():
    """``episode_arrays(lengths, obs_dim=3, act_dim=2, seed=0)``: see make_episodes."""
    return make_episodes


@pytest.fixture
def write_dataset(tmp_path):
    """``write_dataset(name, lengths=..., with_success=True, **options) -> (path, arrays)``."""

    def write(
        name="ds",
        lengths=(5, 7, 3),
        obs_dim=3,
        act_dim=2,
        with_success=True,
        seed=0,
        chunk_episodes=2,
    ):
        arrays = make_episodes(lengths, obs_dim, act_dim, seed)
        if not with_success:
            arrays.pop("success")
        writer = DatasetWriter(
            tmp_path / name,
            environment=ENV_RECORD,
            observation_space=gymnasium.spaces.Box(-np.inf, np.inf, (obs_dim,)),
            action_space=gymnasium.spaces.Box(-1.0, 1.0, (act_dim,)),
            collected_by={"kind": "scripted", "noise": 0.1},
            seed=seed,
        )
        ends = np.concatenate(([0], np.cumsum(arrays["episode_lengths"])))
        for first in range(0, len(lengths), chunk_episodes):
            last = min(first + chunk_episodes, len(lengths))
            rows = slice(ends[first], ends[last])
            block = {k: v[rows] for k, v in arrays.items() if k != "episode_lengths"}
            writer.add_episodes(**block, episode_lengths=arrays["episode_lengths"][first:last])
            writer.commit_chunk()
        return writer.finish(), arrays

    return write


@pytest.fixture
def edit_manifest():
    """``edit_manifest(path, function)``: ``function`` mutates the manifest JSON in place."""

    def edit(path: Path, function) -> None:
        manifest_path = Path(path) / "manifest.json"
        manifest = json.loads(manifest_path.read_text())
        function(manifest)
        manifest_path.write_text(json.dumps(manifest, indent=2))

    return edit
