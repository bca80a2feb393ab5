"""Bad input to any job: exit status 2, one line on stderr naming the key or file, and nothing
already on disk touched (every file hashed before and after)."""

from __future__ import annotations

import numpy as np
import pytest

from tests.jobs.conftest import export_npz, run_qadapt, tree_fingerprint


@pytest.fixture(scope="module")
def workspace(pick_cell_dataset, tmp_path_factory):
    """A folder of earlier outputs: a dataset, exported arrays (good and broken), a non-dataset."""
    root = tmp_path_factory.mktemp("workspace")
    export_npz(pick_cell_dataset, root / "good.npz")
    with np.load(root / "good.npz", allow_pickle=False) as archive:
        arrays = dict(archive.items())
    rewards = arrays["rewards"].copy()
    rewards[7] = np.nan
    np.savez(root / "nan_reward.npz", **{**arrays, "rewards": rewards})
    np.savez(root / "no_actions.npz", **{k: v for k, v in arrays.items() if k != "actions"})
    (root / "notes").mkdir()
    (root / "notes" / "readme.txt").write_text("not a dataset\n")
    return {"root": root, "dataset": pick_cell_dataset}


# (arguments with {dataset}/{root}/{new} filled in, text the error line must contain)
CASES = {
    "unknown variation": (["collect", "variation=sideways_gantry", "out={new}"],
                          ["variation", "sideways_gantry"]),
    "unknown policy": (["collect", "policy=oracle", "out={new}"], ["policy", "oracle"]),
    "negative episodes": (["collect", "episodes=-5", "out={new}"], ["episodes", "-5"]),
    "episodes not a number": (["collect", "episodes=abc", "out={new}"], ["episodes", "abc"]),
    "unknown key": (["collect", "episods=5", "out={new}"], ["episods"]),
    "existing dataset": (["collect", "episodes=3", "out={dataset}"], ["{dataset}"]),
    "missing import source": (["import", "source={root}/absent.npz", "out={new}"],
                              ["source", "absent.npz"]),
    "NaN reward": (["import", "source={root}/nan_reward.npz", "out={new}"],
                   ["nan_reward.npz", "rewards", "NaN"]),
    "missing field": (["import", "source={root}/no_actions.npz", "out={new}"],
                      ["no_actions.npz", "actions"]),
    "held-out fraction too big": (["split", "source={dataset}", "held_out_fraction=1.5",
                                   "out_train={new}", "out_held_out={new}_2"],
                                  ["held_out_fraction", "1.5"]),
    "split onto an existing dataset": (["split", "source={dataset}", "out_train={new}",
                                        "out_held_out={dataset}"], ["{dataset}"]),
    "inspect a non-dataset": (["inspect", "{root}/notes"], ["{root}/notes"]),
    "unknown gymnasium id": (["collect", "env=gym", "env.id=NoSuchEnv-v0", "policy=random",
                              "episodes=3", "out={new}"], ["env.id", "NoSuchEnv-v0"]),
    "pick-cell variation on another env": (["collect", "env=gym", "variation=drive_lag",
                                            "policy=random", "episodes=3", "out={new}"],
                                           ["drive_lag"]),
}


@pytest.mark.parametrize("case", list(CASES), ids=list(CASES))
def test_bad_input_exits_2_with_one_line_and_touches_nothing(case, workspace, tmp_path):
    places = {"root": workspace["root"], "dataset": workspace["dataset"],
              "new": workspace["root"] / "fresh_output"}
    args, expected = CASES[case]
    before = {name: tree_fingerprint(workspace[name]) for name in ("root", "dataset")}
    done = run_qadapt(*(a.format(**places) for a in args), cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.splitlines()
    assert len(lines) == 1, done.stderr
    for text in expected:
        assert text.format(**places) in lines[0], lines[0]
    assert lines[0].startswith(f"qadapt {args[0]}: ")
    assert {name: tree_fingerprint(workspace[name]) for name in before} == before
    assert not places["new"].exists() and not (workspace["root"] / "fresh_output_2").exists()
