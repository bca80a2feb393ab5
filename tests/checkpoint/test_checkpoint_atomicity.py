"""A failed or killed save leaves the previous checkpoint intact and no temporary directory."""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from qadapt.checkpoint import durable, load_checkpoint, save_checkpoint
from qadapt.errors import BadInput

from .conftest import make_metadata, make_training_state, make_weights


def _snapshot(path: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(path.iterdir())}


def _disk_full_after(monkeypatch, writes_that_succeed: int) -> list[str]:
    """Make the (n+1)-th file write put half its bytes on disk, then fail with ENOSPC."""
    real = durable.write_file_durably
    written: list[str] = []

    def write(path: Path, data: bytes) -> None:
        if len(written) == writes_that_succeed:
            with open(path, "xb") as handle:
                handle.write(data[: len(data) // 2])
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        written.append(path.name)
        real(path, data)

    monkeypatch.setattr(durable, "write_file_durably", write)
    return written


@pytest.mark.parametrize("writes_that_succeed", [0, 1, 2])  # weights, state, checkpoint.json
def test_disk_full_on_a_new_path_leaves_nothing(tmp_path, monkeypatch, writes_that_succeed):
    target = tmp_path / "ckpt"
    _disk_full_after(monkeypatch, writes_that_succeed)
    with pytest.raises(BadInput) as caught:
        save_checkpoint(target, make_weights(), make_metadata(),
                        training_state=make_training_state())
    message = str(caught.value)
    assert message.startswith(f"{target}: could not write the checkpoint")
    assert "No space left on device" in message and "\n" not in message
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("writes_that_succeed", [0, 1, 2])
def test_disk_full_while_replacing_keeps_the_old_checkpoint(tmp_path, monkeypatch,
                                                             writes_that_succeed):
    target = tmp_path / "ckpt"
    old = save_checkpoint(target, make_weights(0), make_metadata(),
                          training_state=make_training_state(0))
    before = _snapshot(target)
    _disk_full_after(monkeypatch, writes_that_succeed)
    with pytest.raises(BadInput, match=rf"{target}: could not write .*No space left on device"):
        save_checkpoint(target, make_weights(1), make_metadata(),
                        training_state=make_training_state(1), overwrite=True)
    assert _snapshot(target) == before
    assert load_checkpoint(target, load_training_state=True).identity == old.identity
    assert [p.name for p in tmp_path.iterdir()] == ["ckpt"]


def test_a_failed_swap_puts_the_old_checkpoint_back(tmp_path, monkeypatch):
    target = tmp_path / "ckpt"
    old = save_checkpoint(target, make_weights(0), make_metadata())
    before = _snapshot(target)
    real_rename = os.rename

    def rename(source, destination):
        if Path(source).name.startswith(".ckpt.writing-"):
            raise OSError(errno.EIO, os.strerror(errno.EIO))
        real_rename(source, destination)

    monkeypatch.setattr(os, "rename", rename)
    with pytest.raises(BadInput, match="Input/output error"):
        save_checkpoint(target, make_weights(1), make_metadata(), overwrite=True)
    monkeypatch.undo()
    assert _snapshot(target) == before
    assert load_checkpoint(target).identity == old.identity
    assert [p.name for p in tmp_path.iterdir()] == ["ckpt"]


def test_an_interrupt_mid_write_cleans_up_and_propagates(tmp_path, monkeypatch):
    def interrupted(path, data):
        raise KeyboardInterrupt

    monkeypatch.setattr(durable, "write_file_durably", interrupted)
    with pytest.raises(KeyboardInterrupt):
        save_checkpoint(tmp_path / "ckpt", make_weights(), make_metadata())
    assert list(tmp_path.iterdir()) == []


def test_nothing_is_visible_before_the_checkpoint_is_complete(tmp_path, monkeypatch):
    """While files are being written the target path does not exist yet."""
    target = tmp_path / "ckpt"
    real = durable.write_file_durably
    seen = []

    def write(path: Path, data: bytes) -> None:
        seen.append(target.exists())
        real(path, data)

    monkeypatch.setattr(durable, "write_file_durably", write)
    save_checkpoint(target, make_weights(), make_metadata(), training_state={"step": 1})
    assert seen == [False, False, False]
    assert target.exists()


def test_a_process_killed_mid_save_leaves_the_old_checkpoint(tmp_path):
    """SIGKILL while the new weights are half written: the old checkpoint still loads; the
    hidden staging directory is all that is left over."""
    target = tmp_path / "ckpt"
    old = save_checkpoint(target, make_weights(0), make_metadata())
    ready = tmp_path / "half-written"
    script = textwrap.dedent(f"""
        import sys, time
        sys.path.insert(0, {str(Path(__file__).resolve().parents[2])!r})
        from pathlib import Path
        from qadapt.checkpoint import durable, save_checkpoint
        from tests.checkpoint.conftest import make_metadata, make_weights

        def stall(path, data):
            with open(path, "xb") as handle:
                handle.write(data[: len(data) // 2])
                handle.flush()
            Path({str(ready)!r}).touch()
            time.sleep(60)

        durable.write_file_durably = stall
        save_checkpoint({str(target)!r}, make_weights(1), make_metadata(), overwrite=True)
    """)
    child = subprocess.Popen([sys.executable, "-c", script])
    try:
        deadline = time.monotonic() + 60
        while not ready.exists():
            assert child.poll() is None, "the child exited before writing"
            assert time.monotonic() < deadline, "the child never started writing"
            time.sleep(0.05)
        os.kill(child.pid, signal.SIGKILL)
    finally:
        child.wait(timeout=30)
    assert load_checkpoint(target).identity == old.identity
    leftovers = sorted(p.name for p in tmp_path.iterdir() if p.name not in ("ckpt", ready.name))
    assert len(leftovers) == 1 and leftovers[0].startswith(".ckpt.writing-")
