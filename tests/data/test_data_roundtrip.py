"""Write a dataset, read it back: arrays, manifest, per-episode arrays, memory maps."""

from __future__ import annotations

import json

import gymnasium
import numpy as np
import pytest

from qadapt.data import open_dataset
from qadapt.data.format.manifest import FORMAT_NAME
from qadapt.data.writing.writer import DatasetWriter
from qadapt.errors import BadInput


def test_arrays_come_back_exactly(write_dataset):
    path, arrays = write_dataset(lengths=(5, 7, 3, 4))
    dataset = open_dataset(path)
    for name in (
        "observations",
        "actions",
        "rewards",
        "next_observations",
        "terminated",
        "truncated",
    ):
        np.testing.assert_array_equal(dataset.array(name), arrays[name])
    np.testing.assert_array_equal(
        dataset.array("episode_index"), np.repeat(np.arange(4), [5, 7, 3, 4])
    )
    np.testing.assert_array_equal(dataset.array("episode_lengths"), [5, 7, 3, 4])
    ends = np.cumsum([5, 7, 3, 4])
    expected_returns = [
        arrays["rewards"][a:b].astype(np.float64).sum()
        for a, b in zip(np.r_[0, ends[:-1]], ends, strict=True)
    ]
    np.testing.assert_allclose(dataset.array("episode_returns"), expected_returns, rtol=1e-12)
    np.testing.assert_array_equal(dataset.array("success"), arrays["success"])
    expected_success = [
        arrays["success"][a:b].any() for a, b in zip(np.r_[0, ends[:-1]], ends, strict=True)
    ]
    np.testing.assert_array_equal(dataset.array("episode_success"), expected_success)


def test_arrays_are_read_only_memory_maps(write_dataset):
    path, _ = write_dataset()
    observations = open_dataset(path).array("observations")
    assert isinstance(observations, np.memmap)
    assert observations.dtype == np.float32 and not observations.flags.writeable


def test_manifest_records_provenance_and_checksums(write_dataset):
    path, _ = write_dataset(lengths=(5, 7, 3))
    manifest = json.loads((path / "manifest.json").read_text())
    assert manifest["format"] == FORMAT_NAME and manifest["format_version"] == 1
    assert manifest["transition_count"] == 15 and manifest["episode_count"] == 3
    assert manifest["environment"] == {"id": "Pendulum-v1", "kwargs": {"g": 9.81}, "wrappers": []}
    assert manifest["collected_by"] == {"kind": "scripted", "noise": 0.1}
    assert manifest["observation_space"]["low"] == ["-inf"] * 3  # strict JSON: no Infinity
    assert manifest["action_space"] == {
        "type": "box",
        "shape": [2],
        "dtype": "float32",
        "low": [-1.0, -1.0],
        "high": [1.0, 1.0],
    }
    assert manifest["fields"]["observations"]["shape"] == [15, 3]
    assert manifest["fields"]["terminated"]["dtype"] == "bool"
    assert all(len(entry["sha256"]) == 64 for entry in manifest["fields"].values())
    assert manifest["split"] is None and manifest["seed"] == 0
    # The sha256 recorded is the SHA-256 of the file's bytes (hashlib as the reference).
    import hashlib

    rewards_file = path / manifest["fields"]["rewards"]["file"]
    assert (
        hashlib.sha256(rewards_file.read_bytes()).hexdigest()
        == manifest["fields"]["rewards"]["sha256"]
    )


def test_no_success_fields_when_the_env_reports_none(write_dataset):
    path, _ = write_dataset(with_success=False)
    dataset = open_dataset(path)
    assert not dataset.has_success
    assert "success" not in dataset.field_names and "episode_success" not in dataset.field_names


def test_terminated_and_truncated_stay_distinct(write_dataset):
    path, arrays = write_dataset(lengths=(4, 4, 4, 4))
    dataset = open_dataset(path)
    ends = np.cumsum([4, 4, 4, 4]) - 1
    assert dataset.array("terminated")[ends].tolist() == [True, False, True, False]
    assert dataset.array("truncated")[ends].tolist() == [False, True, False, True]


def test_discrete_actions_are_one_float_column(tmp_path):
    writer = DatasetWriter(
        tmp_path / "d",
        environment={"id": "CartPole-v1", "kwargs": {}, "wrappers": []},
        observation_space=gymnasium.spaces.Box(-1, 1, (2,)),
        action_space=gymnasium.spaces.Discrete(3),
        collected_by={"kind": "random"},
    )
    obs = np.zeros((3, 2), np.float32)
    writer.add_episodes(
        observations=obs,
        actions=np.array([[0], [2], [1]], np.float32),
        rewards=np.zeros(3),
        next_observations=obs,
        terminated=np.array([0, 0, 1], bool),
        truncated=np.zeros(3, bool),
        episode_lengths=[3],
    )
    dataset = open_dataset(writer.finish())
    assert dataset.array("actions").tolist() == [[0.0], [2.0], [1.0]]
    assert dataset.action_space.to_json() == {"type": "discrete", "n": 3, "start": 0}


def test_verify_false_defers_verification_to_first_access(write_dataset):
    path, _ = write_dataset()
    target = path / "rewards.npy"
    data = bytearray(target.read_bytes())
    data[-1] ^= 0x01
    target.write_bytes(bytes(data))
    dataset = open_dataset(path, verify=False)  # structure only: opens
    assert not dataset.verified
    with pytest.raises(BadInput, match="rewards.npy.*checksum mismatch"):
        dataset.array("observations")  # any array access verifies first
    with pytest.raises(BadInput, match="checksum mismatch"):
        dataset.verify()


def test_existing_dataset_is_not_overwritten_unless_asked(write_dataset):
    path, _ = write_dataset(name="same", seed=1)
    with pytest.raises(BadInput, match=f"{path}.*already exists"):
        write_dataset(name="same", seed=2)
    assert open_dataset(path).manifest.seed == 1
    writer = DatasetWriter(
        path,
        environment={"id": "x", "kwargs": {}, "wrappers": []},
        observation_space=gymnasium.spaces.Box(-1, 1, (3,)),
        action_space=gymnasium.spaces.Box(-1, 1, (2,)),
        collected_by={"kind": "random"},
        seed=5,
        overwrite=True,
    )
    obs = np.zeros((2, 3), np.float32)
    writer.add_episodes(
        observations=obs,
        actions=np.zeros((2, 2)),
        rewards=np.zeros(2),
        next_observations=obs,
        terminated=np.array([0, 1], bool),
        truncated=np.zeros(2, bool),
        episode_lengths=[2],
    )
    writer.finish()
    assert open_dataset(path).manifest.seed == 5
    assert sorted(p.name for p in path.parent.iterdir()) == ["same"]  # nothing left behind


def test_a_non_dataset_directory_is_never_replaced(tmp_path):
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep me")
    with pytest.raises(BadInput, match="not a dataset"):
        DatasetWriter(
            tmp_path / "mine",
            environment={"id": "x", "kwargs": {}, "wrappers": []},
            observation_space=gymnasium.spaces.Box(-1, 1, (3,)),
            action_space=gymnasium.spaces.Box(-1, 1, (2,)),
            collected_by={"kind": "random"},
            overwrite=True,
        )
    assert (tmp_path / "mine" / "notes.txt").read_text() == "keep me"


def test_unfinished_writer_leaves_no_complete_looking_dataset(tmp_path):
    writer = DatasetWriter(
        tmp_path / "half",
        environment={"id": "x", "kwargs": {}, "wrappers": []},
        observation_space=gymnasium.spaces.Box(-1, 1, (3,)),
        action_space=gymnasium.spaces.Box(-1, 1, (2,)),
        collected_by={"kind": "random"},
    )
    obs = np.zeros((2, 3), np.float32)
    writer.add_episodes(
        observations=obs,
        actions=np.zeros((2, 2)),
        rewards=np.zeros(2),
        next_observations=obs,
        terminated=np.array([0, 1], bool),
        truncated=np.zeros(2, bool),
        episode_lengths=[2],
    )
    writer.commit_chunk()
    writer.keep_for_resume()  # as if the process stopped here
    assert not (tmp_path / "half").exists()
    with pytest.raises(BadInput, match="not a dataset directory"):
        open_dataset(tmp_path / "half")
