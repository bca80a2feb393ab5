"""``qadapt collect``: the dataset it writes, as ``qadapt inspect`` and the arrays show it."""

from __future__ import annotations

import json

import numpy as np

from tests.jobs.conftest import dataset_arrays, inspect_json, run_ok, run_qadapt


def test_collect_writes_a_verified_dataset_with_its_variation(pick_cell_dataset, tmp_path):
    report = inspect_json(pick_cell_dataset, cwd=tmp_path)
    arrays = dataset_arrays(pick_cell_dataset)
    assert report["checksums_ok"] is True and report["problem"] is None
    assert report["episodes"] == 20
    # Counts re-derived from the arrays themselves, not from the manifest the job wrote.
    assert report["transitions"] == len(arrays["rewards"]) == int(arrays["episode_lengths"].sum())
    assert len(arrays["episode_lengths"]) == 20
    # Every episode ends in exactly one done flag (20 episodes were asked for and finished).
    done = arrays["terminated"] | arrays["truncated"]
    assert int(done.sum()) == 20 and done[np.cumsum(arrays["episode_lengths"]) - 1].all()
    assert report["success_rate"] == float(arrays["episode_success"].mean())
    assert 0.0 <= report["success_rate"] <= 1.0
    env = report["environment"]
    assert env["id"] == "demo_envs/PickCell-v0"
    # 0.07 is the magnitude configs/variation/finger_offset.yaml sets.
    assert env["kwargs"]["perturbations"] == {"finger_offset": 0.07}
    assert report["collected_by"]["kind"] == "scripted" and report["seed"] == 3


def test_collect_prints_its_summary_once_and_where_the_dataset_went(tmp_path):
    out = tmp_path / "runs" / "small"
    done = run_ok("collect", "episodes=4", "seed=1", f"out={out}", cwd=tmp_path)  # progress on
    lines = done.stdout.splitlines()
    assert sum(line.startswith("collected 4 episodes") for line in lines) == 1
    assert lines[-1] == f"dataset written to {out}"
    assert (out / "manifest.json").is_file()


def test_same_seed_same_arrays_other_seed_other_arrays(pick_cell_dataset, tmp_path):
    again, other = tmp_path / "again", tmp_path / "other"
    common = ("collect", "env=pick_cell", "variation=finger_offset", "policy=scripted",
              "episodes=20", "progress=false")
    run_ok(*common, "seed=3", f"out={again}", cwd=tmp_path)
    run_ok(*common, "seed=4", f"out={other}", cwd=tmp_path)
    first, second = dataset_arrays(pick_cell_dataset), dataset_arrays(again)
    assert first.keys() == second.keys()
    for name in first:
        np.testing.assert_array_equal(first[name], second[name], err_msg=name)
    # A different seed must change the data, or the comparison above proves nothing.
    different = dataset_arrays(other)
    assert first["actions"].shape != different["actions"].shape or not np.array_equal(
        first["actions"], different["actions"])


def test_random_policy_in_the_pick_cell(tmp_path):
    out = tmp_path / "random"
    run_ok("collect", "policy=random", "episodes=5", "seed=0", f"out={out}", "progress=false",
           cwd=tmp_path)
    report = inspect_json(out, cwd=tmp_path)
    assert report["checksums_ok"] and report["episodes"] == 5
    assert report["collected_by"]["kind"] == "random"
    assert report["collected_by"]["distribution"] == "uniform"
    actions = dataset_arrays(out)["actions"]
    # Uniform over the Box [-1, 1]^4: inside the bounds and spread over them.
    assert actions.min() >= -1.0 and actions.max() <= 1.0 and actions.std() > 0.3


def test_any_gymnasium_env_and_its_kwargs_reach_the_env(tmp_path):
    out = tmp_path / "pendulum"
    run_ok("collect", "env=gym", "env.id=Pendulum-v1", "policy=random", "episodes=3",
           "+env.kwargs={g: 12.0}", f"out={out}", "progress=false", cwd=tmp_path)
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["environment"]["id"] == "Pendulum-v1"
    assert manifest["environment"]["kwargs"] == {"g": 12.0}
    report = inspect_json(out, cwd=tmp_path)
    # Pendulum-v1 episodes are cut at 200 steps by its TimeLimit (gymnasium registration).
    assert report["episodes"] == 3 and report["transitions"] == 600
    # Recover g from the transitions with Pendulum's update rule (gymnasium
    # envs/classic_control/pendulum.py: thdot' = thdot + (3g/(2l) sin th + 3/(m l^2) u) dt,
    # m = l = 1, dt = 0.05, |thdot'| clipped at 8, u clipped at 2; obs = [cos th, sin th, thdot]).
    arrays = dataset_arrays(out)
    obs, nxt = arrays["observations"].astype(np.float64), arrays["next_observations"]
    u = np.clip(arrays["actions"][:, 0].astype(np.float64), -2.0, 2.0)
    sin_th, thdot, thdot_next = obs[:, 1], obs[:, 2], nxt[:, 2].astype(np.float64)
    use = (np.abs(thdot_next) < 7.9) & (np.abs(sin_th) > 0.2)
    assert use.sum() > 100
    g = (2.0 / 3.0) * ((thdot_next - thdot)[use] / 0.05 - 3.0 * u[use]) / sin_th[use]
    assert abs(float(np.median(g)) - 12.0) < 0.05  # the default would give 10


def test_a_job_writes_nothing_in_the_working_directory(tmp_path):
    # Hydra's own outputs (dated run folders, .hydra/, log files) are switched off in the job
    # configs: only out= is written (common practice for tools run from a read-only folder).
    work = tmp_path / "work"
    work.mkdir()
    result = run_qadapt("collect", "policy=random", "episodes=2", "num_envs=2",
                        f"out={tmp_path / 'data'}", "progress=false", cwd=work)
    assert result.returncode == 0, result.stderr
    assert list(work.iterdir()) == []
    assert (tmp_path / "data" / "manifest.json").is_file()
