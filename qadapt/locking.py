"""One writer per output directory: an advisory lock held for a job's whole life.

Holds:
    lock_path -- where the lock of an output directory lives (beside it, hidden).
    hold_directory -- take the lock of an output directory, or refuse with one line.

The lock is ``fcntl.flock`` on a file beside the directory (``.NAME.lock``), the way datasets
are locked while they are written. The kernel releases it when the holding process ends,
however it ends, so a killed job never blocks its own resume. While held, the file names the
holder (pid, job, start time) for the refusal message; a job that ends removes it, one that
is killed leaves it (harmless: nobody holds it). Beside, not inside, so a copied or moved run
does not carry a lock with it. Advisory locks bind only processes that
ask for them: every qadapt job that writes a run, chain, study or evaluation folder does.
"""

from __future__ import annotations

import fcntl
import json
import os
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

from qadapt.errors import BadInput


def lock_path(directory: str | Path) -> Path:
    """The lock file of ``directory``: ``.NAME.lock`` in its parent.

    Example:
        >>> lock_path("runs/base").as_posix()
        'runs/.base.lock'
    """
    directory = Path(directory)
    return directory.parent / f".{directory.name}.lock"


def _holder(fd: int) -> str:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        record = json.loads(os.read(fd, 4096).decode("utf-8"))
        return f"pid {record['pid']}, qadapt {record['job']}, started {record['started']}"
    except (OSError, ValueError, KeyError, TypeError):
        return "a process that has not said who it is yet"


@contextmanager
def hold_directory(directory: str | Path, job: str) -> Iterator[Path]:
    """Hold the lock of ``directory`` (its parent must exist) while the block runs.

    BadInput naming the holder when another live process holds it. While held, the lock
    file records this process (pid, job, start time in UTC); it is removed at the end.

    Example:
        >>> import tempfile
        >>> run = Path(tempfile.mkdtemp()) / "run"
        >>> with hold_directory(run, "pretrain") as held:
        ...     json.loads(held.read_text())["job"]
        'pretrain'
        >>> held.exists()
        False
    """
    path = lock_path(directory)
    fd = _acquire(path, directory)
    try:
        record = {"pid": os.getpid(), "job": job,
                  "started": datetime.now(UTC).isoformat(timespec="seconds")}
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(record).encode("utf-8"), 0)
        yield path
    finally:
        # Unlinked while still held, so nobody can take a lock on a file that is going away
        # and believe it theirs (_acquire checks it locked the file the path names).
        try:
            os.unlink(path)
        except OSError:
            pass
        os.close(fd)  # closing the last descriptor releases the flock


def _acquire(path: Path, directory: str | Path) -> int:
    """A descriptor of ``path`` holding its flock; BadInput if another process holds it."""
    for _ in range(100):
        try:
            fd = os.open(path, os.O_CREAT | os.O_RDWR, 0o644)
        except OSError as err:
            raise BadInput(f"out: cannot create the lock file {path} ({err.strerror})") from err
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = _holder(fd)
            os.close(fd)
            raise BadInput(f"out: {directory} is being written by another job ({holder}); "
                           "wait for it to end or choose another out=") from None
        try:
            same = os.fstat(fd).st_ino == os.stat(path).st_ino
        except FileNotFoundError:
            same = False
        if same:
            return fd
        os.close(fd)  # the holder removed it between our open and flock: try again
    raise BadInput(f"out: could not take the lock {path}; it keeps being replaced")
