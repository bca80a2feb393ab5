"""One contract for every way a dataset comes to exist: written, collected, imported, split,
synthetic. Each must satisfy the same format and be usable by the sampler and inspect."""

from __future__ import annotations

import json

import gymnasium
import numpy as np
import pytest
import torch

from qadapt.data import (
    MixtureSampler,
    UniformRandomPolicy,
    collect,
    dataset_statistics,
    import_arrays,
    inspect_dataset,
    open_dataset,
    split_dataset,
    write_synthetic_dataset,
)
from qadapt.data.format.manifest import parse_manifest
from qadapt.data.format.schema import FIELDS, expected_fields, expected_shape
from qadapt.spaces import check_spaces

ENV = {"id": "Pendulum-v1", "kwargs": {}, "wrappers": []}


def _written(tmp_path, write_dataset, episode_arrays):
    return write_dataset("written", lengths=(6, 9, 4, 11))[0]


def _collected(tmp_path, write_dataset, episode_arrays):
    envs = gymnasium.make_vec("Pendulum-v1", 2, vectorization_mode="sync")
    return collect(
        envs,
        UniformRandomPolicy(envs.single_action_space, seed=0),
        transitions=450,
        out=tmp_path / "collected",
        seed=1,
        env_record=ENV,
        progress=False,
    ).path


def _imported(tmp_path, write_dataset, episode_arrays):
    arrays = episode_arrays((5, 8, 3, 6))
    arrays.pop("episode_lengths")
    np.savez(tmp_path / "theirs.npz", **arrays)
    mapping = {name: name for name in arrays}
    return import_arrays(
        tmp_path / "theirs.npz",
        mapping,
        tmp_path / "imported",
        env_record=ENV,
        observation_space=gymnasium.spaces.Box(-np.inf, np.inf, (3,)),
        action_space=gymnasium.spaces.Box(-1.0, 1.0, (2,)),
    )


def _split(part):
    def build(tmp_path, write_dataset, episode_arrays):
        parent = write_dataset("parent", lengths=tuple(range(3, 13)))[0]
        train, held = split_dataset(parent, 0.3, 2, tmp_path / "train", tmp_path / "held")
        return train if part == "train" else held

    return build


def _synthetic(tmp_path, write_dataset, episode_arrays):
    return write_synthetic_dataset(
        tmp_path / "synthetic", transitions=333, episode_length=50, obs_dim=5, act_dim=3
    )


SOURCES = {
    "written": _written,
    "collected": _collected,
    "imported": _imported,
    "split_train": _split("train"),
    "split_held_out": _split("held_out"),
    "synthetic": _synthetic,
}


@pytest.fixture(params=sorted(SOURCES))
def source(request, tmp_path, write_dataset, episode_arrays):
    return open_dataset(SOURCES[request.param](tmp_path, write_dataset, episode_arrays))


def test_fields_dtypes_and_shapes(source):
    manifest = source.manifest
    assert source.verified
    assert source.field_names == expected_fields(
        has_success=manifest.has_success, is_split_part=manifest.split is not None
    )
    for name in source.field_names:
        array = source.array(name)
        assert array.dtype == FIELDS[name].dtype, name
        assert array.shape == expected_shape(
            name,
            transitions=source.transition_count,
            episodes=source.episode_count,
            obs_dim=source.obs_dim,
            act_dim=source.act_dim,
        )


def test_episode_bookkeeping(source):
    index = np.asarray(source.array("episode_index"))
    lengths = np.asarray(source.array("episode_lengths"))
    assert index[0] == 0 and set(np.diff(index).tolist()) <= {0, 1}
    assert index[-1] == source.episode_count - 1
    np.testing.assert_array_equal(np.bincount(index), lengths)
    returns = np.bincount(index, weights=source.array("rewards").astype(np.float64))
    np.testing.assert_array_equal(returns, source.array("episode_returns"))
    ends = np.cumsum(lengths) - 1
    done = np.asarray(source.array("terminated")) | np.asarray(source.array("truncated"))
    interior = np.ones(source.transition_count, bool)
    interior[ends] = False
    assert not done[interior].any()


def test_values_are_finite_and_actions_in_bounds(source):
    for name in ("observations", "actions", "rewards", "next_observations"):
        assert np.isfinite(source.array(name)).all()
    space = source.action_space.to_space()
    actions = np.asarray(source.array("actions"))
    if isinstance(space, gymnasium.spaces.Box):
        assert (actions >= space.low).all() and (actions <= space.high).all()


def test_manifest_round_trips_and_spaces_match_themselves(source):
    stored = json.loads((source.path / "manifest.json").read_text())
    assert parse_manifest(stored).to_json() == stored
    check_spaces(source, source.observation_space.to_space(), source.action_space.to_space())


def test_usable_by_statistics_inspect_and_sampler(source):
    stats = dataset_statistics(source)
    assert (stats.transitions, stats.episodes) == (source.transition_count, source.episode_count)
    report = inspect_dataset(source.path)
    assert report["checksums_ok"] and report["transitions"] == source.transition_count
    batch = MixtureSampler([source], batch_size=17, seed=0).sample()
    rows = batch.row_index.numpy()
    np.testing.assert_array_equal(batch.observations.numpy(), source.array("observations")[rows])
    assert batch.observations.dtype == torch.float32
    assert (batch.source_index == 0).all()
