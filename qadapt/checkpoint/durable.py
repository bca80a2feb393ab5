"""Making a directory of files appear at a path all at once, and survive a power cut.

Holds:
    write_file_durably -- create a file with given bytes and flush it to the disk.
    staging_directory -- a new hidden sibling directory of the target to fill first.
    publish_directory -- rename a filled staging directory onto the target path (replacing an
        existing one only when asked), then flush the parent directory.
    restore_replaced -- put back the previous contents of a target a replacement left absent.

Replacing is two renames (old aside, new in) followed by deleting the old copy; between the
renames the target path is briefly absent, but never half-written. If the process dies in
that instant, the previous contents are in the sibling ``.<name>.replaced-*``, and
``restore_replaced`` puts them back (a resuming run calls it before looking for its
checkpoints).
"""

from __future__ import annotations

import os
import shutil
import tempfile
import warnings
from pathlib import Path

from qadapt.files import fsync_directory


def write_file_durably(path: Path, data: bytes) -> None:
    """Create ``path`` (it must not exist) holding ``data`` and fsync it.

    The caller fsyncs the directory once every file is written.
    """
    with open(path, "xb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())


def staging_directory(target: Path) -> Path:
    """A new empty directory ``.<name>.writing-XXXX`` next to ``target`` (same file system,
    so the final rename is atomic)."""
    target.parent.mkdir(parents=True, exist_ok=True)
    return Path(tempfile.mkdtemp(prefix=f".{target.name}.writing-", dir=target.parent))


def publish_directory(staging: Path, target: Path, *, replace: bool) -> None:
    """Move the complete ``staging`` directory to ``target``.

    ``replace=False``: ``target`` must be absent or an empty directory (rename fails with
    OSError otherwise). ``replace=True``: the existing ``target`` is renamed aside, ``staging``
    renamed in, and the old copy deleted; if the second rename fails the old copy is put
    back before the error propagates.
    """
    fsync_directory(staging)
    if not replace:
        os.rename(staging, target)
        fsync_directory(target.parent)
        return
    aside = Path(tempfile.mkdtemp(prefix=f".{target.name}.replaced-", dir=target.parent))
    os.rename(target, aside)  # onto the empty placeholder mkdtemp reserved
    try:
        os.rename(staging, target)
    except BaseException:
        os.rename(aside, target)
        raise
    fsync_directory(target.parent)
    try:
        shutil.rmtree(aside)
    except OSError as err:
        # The new checkpoint is in place; a leftover copy of the old one is only clutter.
        warnings.warn(f"could not delete the replaced checkpoint at {aside}: {err}", stacklevel=2)


def restore_replaced(target: Path) -> bool:
    """If ``target`` is absent but a replacement had moved its previous contents aside (the
    process died between the two renames), rename them back; True when it did.

    An aside was a published, hence complete, checkpoint; as a safeguard only one holding
    ``checkpoint.json`` is restored (the newest). Asides of a target that exists are leftovers
    of a replacement that finished; they are removed.
    """
    target = Path(target)
    asides = sorted(target.parent.glob(f".{target.name}.replaced-*"),
                    key=lambda p: p.stat().st_mtime) if target.parent.is_dir() else []
    if target.exists():
        for aside in asides:
            shutil.rmtree(aside, ignore_errors=True)
        return False
    complete = [a for a in asides if (a / "checkpoint.json").is_file()]
    if not complete:
        return False
    os.rename(complete[-1], target)
    fsync_directory(target.parent)
    return True
