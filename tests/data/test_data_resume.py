"""Interrupted collection: SIGKILL mid-way, re-run, and get exactly the uninterrupted dataset."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import gymnasium
import numpy as np
import pytest

from qadapt.data import UniformRandomPolicy, collect, open_dataset
from qadapt.data.writing.writer import DatasetWriter
from qadapt.errors import BadInput

SCRIPT = textwrap.dedent(
    """
    import json, os, sys, time
    import gymnasium
    from qadapt.data import UniformRandomPolicy, collect

    class SlowRandomPolicy(UniformRandomPolicy):
        # Same actions as UniformRandomPolicy; the delay only gives the test time to kill it.
        def act(self, observations):
            if os.environ.get("SLOW_POLICY"):
                time.sleep(0.003)
            return super().act(observations)

    envs = gymnasium.make_vec("CartPole-v1", 4, vectorization_mode="sync")
    summary = collect(envs, SlowRandomPolicy(envs.single_action_space, seed=0), episodes=240,
                      out=sys.argv[1], seed=7, progress=False, chunk_transitions=400,
                      env_record={"id": "CartPole-v1", "kwargs": {}, "wrappers": []})
    print(json.dumps({"resumed_chunks": summary.resumed_chunks, "episodes": summary.episodes}))
    """
)
FIELDS = (
    "observations",
    "actions",
    "rewards",
    "next_observations",
    "terminated",
    "truncated",
    "episode_index",
    "episode_lengths",
    "episode_returns",
)


def _run(script: Path, out: Path, *, slow: bool) -> subprocess.Popen:
    env = dict(os.environ)
    env.pop("SLOW_POLICY", None)
    if slow:
        env["SLOW_POLICY"] = "1"
    return subprocess.Popen(
        [sys.executable, str(script), str(out)],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )


def test_sigkill_then_rerun_resumes_to_the_uninterrupted_arrays(tmp_path):
    script = tmp_path / "collect_job.py"
    script.write_text(SCRIPT)
    out = tmp_path / "cartpole"
    staging = tmp_path / ".cartpole.incomplete"
    process = _run(script, out, slow=True)
    deadline = time.monotonic() + 60
    while not (staging / "chunk-000002").exists():
        assert process.poll() is None, process.communicate()
        assert time.monotonic() < deadline, "the collection never committed three chunks"
        time.sleep(0.02)
    process.send_signal(signal.SIGKILL)
    process.wait()
    committed = sorted(p.name for p in staging.iterdir() if p.name.startswith("chunk-"))
    assert len(committed) >= 3
    assert not out.exists()  # nothing that looks like a complete dataset
    with pytest.raises(BadInput):
        open_dataset(out)

    finished = _run(script, out, slow=False)
    stdout, stderr = finished.communicate(timeout=120)
    assert finished.returncode == 0, stderr
    report = json.loads(stdout.strip().splitlines()[-1])
    assert report["resumed_chunks"] >= 3 and report["episodes"] == 240
    assert not staging.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cartpole", "collect_job.py"]

    envs = gymnasium.make_vec("CartPole-v1", 4, vectorization_mode="sync")
    reference = collect(
        envs,
        UniformRandomPolicy(envs.single_action_space, seed=0),
        episodes=240,
        out=tmp_path / "reference",
        seed=7,
        progress=False,
        chunk_transitions=400,
        env_record={"id": "CartPole-v1", "kwargs": {}, "wrappers": []},
    )
    resumed, uninterrupted = open_dataset(out), open_dataset(reference.path)
    assert resumed.episode_count == 240 == uninterrupted.episode_count
    for name in FIELDS:
        np.testing.assert_array_equal(resumed.array(name), uninterrupted.array(name))
    # No duplicates: every transition (observation, action) pair occurs once, as in the
    # uninterrupted run.
    pairs = np.concatenate([resumed.array("observations"), resumed.array("actions")], axis=1)
    assert np.unique(pairs, axis=0).shape[0] == resumed.transition_count


def _writer(out, digest):
    return DatasetWriter(
        out,
        environment={"id": "x", "kwargs": {}, "wrappers": []},
        observation_space=gymnasium.spaces.Box(-1, 1, (2,)),
        action_space=gymnasium.spaces.Box(-1, 1, (1,)),
        collected_by={"kind": "random"},
        run_digest=digest,
        resume=True,
    )


def _one_chunk(writer):
    obs = np.zeros((2, 2), np.float32)
    writer.add_episodes(
        observations=obs,
        actions=np.zeros((2, 1)),
        rewards=np.zeros(2),
        next_observations=obs,
        terminated=np.array([0, 1], bool),
        truncated=np.zeros(2, bool),
        episode_lengths=[2],
    )
    writer.commit_chunk()


def test_same_digest_resumes_other_digest_restarts(tmp_path):
    first = _writer(tmp_path / "d", "a" * 64)
    _one_chunk(first)
    first.keep_for_resume()
    again = _writer(tmp_path / "d", "a" * 64)
    assert again.committed_chunks == 1 and again.restart_reason is None
    again.keep_for_resume()
    other = _writer(tmp_path / "d", "b" * 64)
    assert other.committed_chunks == 0
    assert "different arguments" in other.restart_reason
    other.discard()


def test_damaged_chunk_restarts_cleanly(tmp_path):
    first = _writer(tmp_path / "d", "a" * 64)
    _one_chunk(first)
    first.keep_for_resume()
    damaged = tmp_path / ".d.incomplete" / "chunk-000000" / "rewards.npy"
    damaged.write_bytes(damaged.read_bytes()[:-4])
    again = _writer(tmp_path / "d", "a" * 64)
    assert again.committed_chunks == 0 and "damaged" in again.restart_reason
    again.discard()


def test_two_writers_cannot_fill_the_same_output(tmp_path):
    first = _writer(tmp_path / "d", "a" * 64)
    with pytest.raises(BadInput, match="another process is writing"):
        _writer(tmp_path / "d", "a" * 64)
    first.discard()
