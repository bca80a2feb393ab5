"""Files on disk: safe member paths, durable writes, checksums; the one place for each.

Holds:
    resolve_member -- the path of a file a manifest names, refusing anything outside the directory.
    fsync_file / fsync_directory -- flush a file's or a directory's contents to the disk.
    write_text_durably -- replace a small text file atomically and flush it to the disk.
    strict_json -- JSON text with every non-finite number written as null (never NaN).
    sha256_of_file -- the SHA-256 of a file, read in blocks (no memory map, no whole-file read).
    remove_tree -- delete a directory this package created (refuses symlinks).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import shutil
import tempfile
from pathlib import Path
from typing import Any

from qadapt.errors import BadInput

_READ_BLOCK = 1 << 22  # 4 MiB: large enough for full disk throughput, small enough for RSS


def _finite_or_none(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite_or_none(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite_or_none(v) for v in value]
    return value


def strict_json(value: Any, **options: Any) -> str:
    """``json.dumps(value, **options)`` as strict JSON (RFC 8259 has no NaN or Infinity):
    a non-finite float becomes null, a missing figure said as such.

    Example:
        >>> strict_json({"rate": float("nan"), "n": [1.0, float("inf")]}, sort_keys=True)
        '{"n": [1.0, null], "rate": null}'
    """
    return json.dumps(_finite_or_none(value), allow_nan=False, **options)


def resolve_member(directory: Path, file_name: object, *, where: str) -> Path:
    """Return ``directory / file_name`` after checking it stays inside ``directory``.

    A member must be a plain file name (no separators, not ``.`` or ``..``, not absolute) and,
    once symlinks are resolved, must still live directly in ``directory``. ``where`` names
    the manifest entry for the error message.

    Example:
        >>> import tempfile
        >>> d = Path(tempfile.mkdtemp())
        >>> resolve_member(d, "rewards.npy", where="fields.rewards.file").name
        'rewards.npy'
        >>> resolve_member(d, "../x.npy", where="fields.rewards.file")
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: ...
    """
    if not isinstance(file_name, str) or not file_name:
        raise BadInput(f"{where}: got {file_name!r}, expected a non-empty file name")
    if (
        "/" in file_name
        or "\\" in file_name
        or "\x00" in file_name
        or file_name in (".", "..")
        or os.path.isabs(file_name)
    ):
        raise BadInput(
            f"{where}: {file_name!r} is not a plain file name inside the dataset directory "
            "(paths, '..' and absolute names are refused)"
        )
    candidate = directory / file_name
    real_directory = Path(os.path.realpath(directory))
    real_candidate = Path(os.path.realpath(candidate))
    if real_candidate.parent != real_directory:
        raise BadInput(
            f"{where}: {file_name!r} resolves to {str(real_candidate)!r}, outside the dataset "
            f"directory {str(real_directory)!r} (a symlink leaving the directory is refused)"
        )
    return candidate


def fsync_file(path: Path) -> None:
    """Flush ``path``'s data to the disk."""
    descriptor = os.open(path, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def fsync_directory(path: Path) -> None:
    """Flush ``path``'s entries (creations, renames) to the disk."""
    descriptor = os.open(path, os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def write_text_durably(path: Path, text: str) -> None:
    """Replace ``path`` with ``text`` (UTF-8) all at once: a hidden temporary file beside it
    (``.NAME.writing-*``) is written and fsynced, renamed onto ``path``, and the directory is
    fsynced. A reader sees the old file or the new one, never a half-written one.

    Example:
        >>> import tempfile
        >>> target = Path(tempfile.mkdtemp()) / "summary.json"
        >>> write_text_durably(target, '{"step": 1}')
        >>> target.read_text(), sorted(p.name for p in target.parent.iterdir())
        ('{"step": 1}', ['summary.json'])
    """
    path = Path(path)
    descriptor, temporary = tempfile.mkstemp(prefix=f".{path.name}.writing-", dir=path.parent)
    try:
        with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
    fsync_directory(path.parent)


def sha256_of_file(path: Path) -> str:
    """Hex SHA-256 of the whole file at ``path``, read in 4 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(_READ_BLOCK):
            digest.update(block)
    return digest.hexdigest()


def remove_tree(path: Path) -> None:
    """Delete the directory ``path`` (used for staging areas this package made)."""
    if path.is_symlink():
        raise BadInput(f"{path}: refusing to delete a symlink as if it were a staging directory")
    if path.exists():
        shutil.rmtree(path)
