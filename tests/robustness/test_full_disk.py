"""A full disk: a training job writing into a nearly full file system fails cleanly (exit 2, one
line naming the path and the lack of space) and leaves the previous checkpoint there intact."""

from __future__ import annotations

import os
import shutil
import subprocess

import pytest

from tests.robustness.bad_inputs import copy_tree, run_in_subprocess, tree_digests

FREE_BYTES = 48 << 10  # far less than one checkpoint of the workspace run (~240 KiB)


@pytest.fixture
def small_file_system(tmp_path):
    """A 2 MiB tmpfs mounted on a fresh folder (root only); unmounted afterwards."""
    mount = tmp_path / "small"
    mount.mkdir()
    if shutil.which("mount") is None:
        pytest.skip("no mount command on this machine")
    if os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root (CI runs as root)")
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=2m", "tmpfs", str(mount)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {done.stderr.strip()}")
    try:
        yield mount
    finally:
        subprocess.run(["umount", "-l", str(mount)], check=False)


def test_training_into_a_full_disk_fails_in_one_line_and_keeps_the_old_checkpoint(
        workspace, small_file_system, tmp_path):
    mount = small_file_system
    base = copy_tree(workspace.checkpoint, mount / "runs" / "base")
    stats = os.statvfs(mount)
    free = stats.f_bavail * stats.f_frsize
    with open(mount / "filler", "wb") as handle:  # leave FREE_BYTES
        handle.write(b"\0" * max(free - FREE_BYTES, 0))
    before = tree_digests(mount)
    out = mount / "runs" / "ft"
    argv = ["finetune", f"base={base}", f"prior={workspace.dataset}", f"new={workspace.dataset}",
            "steps=20", "checkpoint_every=10", "eval.every=0", f"out={out}",
            "learner.batch_size=32", "maximizer.samples=16", "progress=false"]
    done = run_in_subprocess(argv, tmp_path, tmp_path / "hydra")
    lines = done.stderr.strip().splitlines()
    assert done.code == 2, done.stderr
    assert len(lines) == 1 and "Traceback" not in done.stderr, done.stderr
    assert str(out) in lines[0] and "No space left on device" in lines[0], lines[0]
    after = tree_digests(mount)
    assert {k: v for k, v in after.items() if k in before} == before  # nothing earlier changed
    # Only the new run's folder may have appeared, and it holds no half-written checkpoint.
    new = {k for k in after if k not in before}
    assert all(k.startswith("runs/ft") for k in new), new
    assert not [k for k in new if ".writing-" in k], new
