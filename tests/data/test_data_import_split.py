"""Importing users' arrays and splitting datasets by episode."""

from __future__ import annotations

import json

import gymnasium
import numpy as np
import pytest

from qadapt.data import import_arrays, open_dataset, split_dataset
from qadapt.errors import BadInput

SPACES = {
    "observation_space": gymnasium.spaces.Box(-np.inf, np.inf, (3,)),
    "action_space": gymnasium.spaces.Box(-1.0, 1.0, (2,)),
}
ENV = {"id": "Pendulum-v1", "kwargs": {"g": 9.81}, "wrappers": [{"name": "TimeLimit"}]}
OURS = ("observations", "actions", "rewards", "next_observations", "terminated", "truncated")


@pytest.fixture
def their_arrays(episode_arrays):
    """``their_arrays(lengths)``: episodes under a user's own names (``my_<field>``)."""

    def build(lengths=(4, 6, 5)):
        return _rename(episode_arrays(lengths))

    return build


def _rename(arrays):
    lengths = arrays.pop("episode_lengths")
    # Their episode numbers start at 10: ours are renumbered 0, 1, 2, ...
    arrays["episode_index"] = np.repeat(np.arange(10, 10 + len(lengths)), lengths)
    return {f"my_{k}": v for k, v in arrays.items()}


def _mapping(with_index=True, with_success=True):
    names = (
        OURS + (("episode_index",) if with_index else ()) + (("success",) if with_success else ())
    )
    return {name: f"my_{name}" for name in names}


def test_import_npz_keeps_values_and_records_the_source(tmp_path, their_arrays):
    arrays = their_arrays()
    np.savez(tmp_path / "theirs.npz", **arrays)
    path = import_arrays(
        tmp_path / "theirs.npz",
        _mapping(),
        tmp_path / "out",
        env_record=ENV,
        collector_record={"kind": "scripted", "noise": 0.3},
        seed=4,
        **SPACES,
    )
    dataset = open_dataset(path)
    for name in OURS + ("success",):
        np.testing.assert_array_equal(dataset.array(name), arrays[f"my_{name}"])
    np.testing.assert_array_equal(dataset.array("episode_lengths"), [4, 6, 5])
    np.testing.assert_array_equal(dataset.array("episode_index"), np.repeat([0, 1, 2], [4, 6, 5]))
    record = dataset.manifest.collected_by
    assert record["kind"] == "imported" and record["source"] == str(tmp_path / "theirs.npz")
    import hashlib

    file_hash = hashlib.sha256((tmp_path / "theirs.npz").read_bytes()).hexdigest()
    assert record["source_files"] == {"theirs.npz": file_hash}
    assert (
        record["source_sha256"] == hashlib.sha256(f"theirs.npz {file_hash}\n".encode()).hexdigest()
    )
    assert record["original_collector"] == {"kind": "scripted", "noise": 0.3}
    assert dataset.manifest.environment.wrappers == [{"name": "TimeLimit"}]


def test_import_directory_and_list_of_npy_files(tmp_path, their_arrays):
    arrays = their_arrays()
    folder = tmp_path / "npys"
    folder.mkdir()
    for key, value in arrays.items():
        np.save(folder / f"{key}.npy", value)
    from_dir = open_dataset(
        import_arrays(folder, _mapping(), tmp_path / "a", env_record=ENV, **SPACES)
    )
    files = [folder / f"{key}.npy" for key in arrays]
    from_list = open_dataset(
        import_arrays(files, _mapping(), tmp_path / "b", env_record=ENV, **SPACES)
    )
    np.testing.assert_array_equal(from_dir.array("observations"), from_list.array("observations"))
    assert len(from_dir.manifest.collected_by["source_files"]) == len(arrays)


def test_episode_index_is_derived_from_done_flags(tmp_path, their_arrays):
    arrays = their_arrays(lengths=(3, 5, 2, 4))
    arrays.pop("my_episode_index")
    np.savez(tmp_path / "t.npz", **arrays)
    dataset = open_dataset(
        import_arrays(
            tmp_path / "t.npz", _mapping(with_index=False), tmp_path / "o", env_record=ENV, **SPACES
        )
    )
    np.testing.assert_array_equal(dataset.array("episode_lengths"), [3, 5, 2, 4])


def test_derivation_refused_when_an_episode_ends_without_a_flag(tmp_path, their_arrays):
    arrays = their_arrays(lengths=(3, 5))
    arrays.pop("my_episode_index")
    arrays["my_terminated"] = arrays["my_terminated"].copy()
    arrays["my_truncated"] = arrays["my_truncated"].copy()
    arrays["my_terminated"][2] = False  # episode 0 now ends with no flag
    arrays["my_truncated"][2] = False
    np.savez(tmp_path / "t.npz", **arrays)
    with pytest.raises(BadInput, match="cannot derive episode_index: row 2 has no done flag"):
        import_arrays(
            tmp_path / "t.npz", _mapping(with_index=False), tmp_path / "o", env_record=ENV, **SPACES
        )


def test_a_trailing_unfinished_episode_is_kept(tmp_path, their_arrays):
    arrays = their_arrays(lengths=(3, 4))
    arrays = {k: v[:-1] for k, v in arrays.items()}  # cut the last episode's final step
    np.savez(tmp_path / "t.npz", **arrays)
    dataset = open_dataset(
        import_arrays(tmp_path / "t.npz", _mapping(), tmp_path / "o", env_record=ENV, **SPACES)
    )
    assert dataset.array("episode_lengths").tolist() == [3, 3]


def test_import_a_large_source_in_several_chunks(tmp_path, monkeypatch, their_arrays):
    import qadapt.data.writing.importing as importing

    monkeypatch.setattr(importing, "_CHUNK_EPISODES_ROWS", 7)
    arrays = their_arrays(lengths=(4, 6, 5, 3, 8, 2))
    np.savez(tmp_path / "t.npz", **arrays)
    dataset = open_dataset(
        import_arrays(tmp_path / "t.npz", _mapping(), tmp_path / "o", env_record=ENV, **SPACES)
    )
    np.testing.assert_array_equal(dataset.array("observations"), arrays["my_observations"])
    assert dataset.array("episode_lengths").tolist() == [4, 6, 5, 3, 8, 2]


def test_split_by_episode(write_dataset, tmp_path):
    lengths = tuple(range(3, 23))  # 20 episodes of different lengths
    parent, arrays = write_dataset(lengths=lengths, chunk_episodes=6)
    train_path, held_path = split_dataset(parent, 0.25, 11, tmp_path / "train", tmp_path / "held")
    train, held = open_dataset(train_path), open_dataset(held_path)
    assert (train.episode_count, held.episode_count) == (15, 5)
    taken = np.concatenate([train.array("parent_episodes"), held.array("parent_episodes")])
    assert sorted(taken.tolist()) == list(range(20))  # disjoint and complete
    rng = np.random.default_rng(11)
    assert sorted(held.array("parent_episodes").tolist()) == sorted(
        rng.permutation(20)[:5].tolist()
    )
    starts = np.concatenate(([0], np.cumsum(lengths)))
    for part in (train, held):
        for local, number in enumerate(part.array("parent_episodes").tolist()):
            rows = slice(starts[number], starts[number + 1])
            mine = part.array("episode_index") == local
            np.testing.assert_array_equal(
                part.array("observations")[mine], arrays["observations"][rows]
            )
            np.testing.assert_array_equal(part.array("success")[mine], arrays["success"][rows])
    for part, name in ((train, "train"), (held, "held_out")):
        split = json.loads((part.path / "manifest.json").read_text())["split"]
        assert split["part"] == name and split["held_out_fraction"] == 0.25
        assert split["seed"] == 11 and split["parent_episode_count"] == 20
        assert split["parent_manifest_sha256"] == open_dataset(parent).fingerprint
        assert part.manifest.collected_by == {"kind": "scripted", "noise": 0.1}


def test_split_refuses_an_empty_part(write_dataset, tmp_path):
    parent, _ = write_dataset(lengths=(3, 4, 5))
    with pytest.raises(BadInput, match="both parts need at least one episode"):
        split_dataset(parent, 0.1, 0, tmp_path / "a", tmp_path / "b")
    with pytest.raises(BadInput, match="held_out_fraction: got 1.5"):
        split_dataset(parent, 1.5, 0, tmp_path / "a", tmp_path / "b")
    with pytest.raises(BadInput, match="three different paths"):
        split_dataset(parent, 0.5, 0, tmp_path / "a", tmp_path / "a")
    assert not (tmp_path / "a").exists() and not (tmp_path / "b").exists()


def test_a_split_part_can_be_split_again(write_dataset, tmp_path):
    parent, _ = write_dataset(lengths=tuple(range(2, 12)))
    train, _ = split_dataset(parent, 0.2, 0, tmp_path / "t", tmp_path / "h")
    inner, _ = split_dataset(train, 0.25, 1, tmp_path / "t2", tmp_path / "h2")
    split = open_dataset(inner).manifest.split
    assert split.parent_split is not None and split.parent_split.part == "train"
