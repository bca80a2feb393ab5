"""One writer per output directory (qadapt.locking).

What is relied on is the kernel's flock(2) semantics (Linux man page flock(2)): an exclusive
lock taken with LOCK_NB fails with EWOULDBLOCK while another open file description holds it,
and it is released when the last descriptor closes, which includes the holder being killed.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from qadapt.errors import BadInput
from qadapt.locking import hold_directory, lock_path
from tests.jobs.conftest import run_ok, run_qadapt

HOLDER = """
import sys, time
from qadapt.locking import hold_directory
with hold_directory(sys.argv[1], "pretrain"):
    print("held", flush=True)
    time.sleep(120)
"""


def _start_holder(directory: Path) -> subprocess.Popen:
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, str(directory)],
                              stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "held"
    return holder


def test_a_second_writer_is_refused_naming_the_holder_and_a_killed_one_blocks_nothing(tmp_path):
    run = tmp_path / "run"
    holder = _start_holder(run)
    try:
        with pytest.raises(BadInput) as refused, hold_directory(run, "finetune"):
            pass
        message = str(refused.value)
        assert f"pid {holder.pid}, qadapt pretrain" in message and "\n" not in message
    finally:
        holder.send_signal(signal.SIGKILL)
        holder.wait()
    # The killed holder's file is still there, but nobody holds it: the resume goes ahead.
    assert lock_path(run).exists()
    with hold_directory(run, "pretrain") as held:
        assert json.loads(held.read_text())["pid"] == os.getpid()
    assert not lock_path(run).exists()


def test_two_trainings_on_one_out_keep_one_result_and_refuse_the_other(tmp_path):
    run_ok("collect", "policy=scripted", "episodes=8", "num_envs=8", "out=data",
           "progress=false", cwd=tmp_path)
    first = subprocess.Popen(
        [sys.executable, "-m", "qadapt.cli", "pretrain", "data=data", "steps=3000",
         "eval.every=0", "checkpoint_every=500", "network.torso=[16]", "network.head=[8]",
         "learner.batch_size=16", "maximizer.samples=8", "seed=0", "out=run",
         "progress=false"], cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        text=True)
    try:
        deadline = time.monotonic() + 120
        while not lock_path(tmp_path / "run").exists():
            assert first.poll() is None and time.monotonic() < deadline, first.stderr.read()
            time.sleep(0.05)
        second = run_qadapt("pretrain", "data=data", "steps=10", "eval.every=0", "seed=1",
                            "out=run", "progress=false", cwd=tmp_path)
        assert second.returncode == 2
        assert len(second.stderr.strip().splitlines()) == 1
        assert "being written by another job" in second.stderr and str(first.pid) in second.stderr
    finally:
        out, err = first.communicate(timeout=300)
    assert first.returncode == 0, err
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    assert summary["steps"] == 3000  # the first run's result, whole
    assert not lock_path(tmp_path / "run").exists()
