"""``qadapt split``: two parts whose episodes add up to the source, recorded in both."""

from __future__ import annotations

import json

import numpy as np

from qadapt.data import open_dataset
from tests.jobs.conftest import dataset_arrays, run_ok, tree_fingerprint


def test_split_into_two_parts_that_add_up(pick_cell_dataset, tmp_path):
    before = tree_fingerprint(pick_cell_dataset)
    train, held = tmp_path / "fit", tmp_path / "check"
    done = run_ok("split", f"source={pick_cell_dataset}", "held_out_fraction=0.25", "seed=5",
                  f"out_train={train}", f"out_held_out={held}", cwd=tmp_path)
    assert str(train) in done.stdout and str(held) in done.stdout
    manifests = {part: json.loads((path / "manifest.json").read_text())
                 for part, path in (("train", train), ("held_out", held))}
    # The parent is named by its fingerprint: the SHA-256 of its manifest without the time.
    parent_sha = open_dataset(pick_cell_dataset).fingerprint
    for part, manifest in manifests.items():
        record = manifest["split"]
        assert record["part"] == part
        assert record["held_out_fraction"] == 0.25 and record["seed"] == 5
        assert record["parent_episode_count"] == 20
        assert record["parent_manifest_sha256"] == parent_sha
    # round(0.25 * 20) = 5 episodes held out.
    assert manifests["held_out"]["episode_count"] == 5
    assert manifests["train"]["episode_count"] == 15
    parent = dataset_arrays(pick_cell_dataset)
    parts = {part: dataset_arrays(path) for part, path in (("train", train), ("held_out", held))}
    assert sum(m["transition_count"] for m in manifests.values()) == len(parent["rewards"])
    # Each parent episode lands in exactly one part, rows unchanged.
    ids = np.concatenate([parts["train"]["parent_episodes"], parts["held_out"]["parent_episodes"]])
    assert sorted(ids.tolist()) == list(range(20))
    starts = np.concatenate(([0], np.cumsum(parent["episode_lengths"])))
    held_rows = np.concatenate([np.arange(starts[e], starts[e + 1])
                                for e in parts["held_out"]["parent_episodes"]])
    np.testing.assert_array_equal(parts["held_out"]["actions"], parent["actions"][held_rows])
    assert tree_fingerprint(pick_cell_dataset) == before  # the source is only read


def test_split_defaults_sit_beside_the_source(pick_cell_dataset, tmp_path):
    source = tmp_path / "runs" / "base"
    source.parent.mkdir()
    run_ok("collect", "episodes=10", "seed=2", f"out={source}", "progress=false", cwd=tmp_path)
    done = run_ok("split", f"source={source}/", "held_out_fraction=0.2", cwd=tmp_path)
    train, held = tmp_path / "runs" / "base_train", tmp_path / "runs" / "base_held_out"
    assert f"written to {train}" in done.stdout and f"written to {held}" in done.stdout
    counts = [json.loads((p / "manifest.json").read_text())["episode_count"] for p in (train, held)]
    assert counts == [8, 2]


def test_same_seed_same_split_and_overwrite(pick_cell_dataset, tmp_path):
    args = ("split", f"source={pick_cell_dataset}", "held_out_fraction=0.3", "seed=9",
            f"out_train={tmp_path / 'a'}", f"out_held_out={tmp_path / 'b'}")
    run_ok(*args, cwd=tmp_path)
    first = dataset_arrays(tmp_path / "b")["parent_episodes"]
    run_ok(*args, "overwrite=true", cwd=tmp_path)
    np.testing.assert_array_equal(dataset_arrays(tmp_path / "b")["parent_episodes"], first)
