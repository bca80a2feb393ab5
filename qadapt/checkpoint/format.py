"""The checkpoint directory's layout and its checkpoint.json: names, version, schema, identity.

Holds:
    FORMAT_VERSION -- the checkpoint.json version this code writes and reads.
    METADATA_FILE, WEIGHTS_FILE, TRAINING_STATE_FILE -- the file names inside a checkpoint.
    FileRecord -- one data file of a checkpoint: its SHA-256 and size in bytes.
    canonical_json -- the byte form of a JSON document the identity hash is taken over.
    identity_of -- a checkpoint's identity: SHA-256 of checkpoint.json's canonical form.
    build_document -- checkpoint.json's content from the metadata and the file records.
    document_text -- the text written to checkpoint.json (sorted keys, indented).
    parse_document -- checkpoint.json's text -> (metadata, file records, identity), validated.

The format is described for users in docs/checkpoints.md.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
from dataclasses import dataclass
from typing import Any

from qadapt.checkpoint.metadata import METADATA_KEYS, CheckpointMetadata, metadata_from_json
from qadapt.checkpoint.metadata import metadata_to_json as _metadata_to_json
from qadapt.errors import BadInput

FORMAT_VERSION = 1
METADATA_FILE = "checkpoint.json"
WEIGHTS_FILE = "weights.safetensors"
TRAINING_STATE_FILE = "training_state.safetensors"
DATA_FILES = (WEIGHTS_FILE, TRAINING_STATE_FILE)
DOCUMENT_KEYS = frozenset({"format_version", "files", *METADATA_KEYS})

_SHA256 = re.compile(r"[0-9a-f]{64}")


@dataclass(frozen=True)
class FileRecord:
    """A data file of a checkpoint as checkpoint.json lists it.

    Example:
        >>> FileRecord("0" * 64, 128).to_json()["size_bytes"]
        128
    """

    sha256: str
    size_bytes: int

    def to_json(self) -> dict[str, Any]:
        return {"sha256": self.sha256, "size_bytes": self.size_bytes}


def canonical_json(document: Any) -> bytes:
    """UTF-8 JSON with sorted keys and no spaces: equal documents give equal bytes."""
    return json.dumps(
        document, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    ).encode("utf-8")


def identity_of(document: Any) -> str:
    """Hex SHA-256 of ``canonical_json(document)`` for a parsed checkpoint.json.

    The document lists every data file's SHA-256, so the identity commits to the weights,
    the training state and all metadata (creation time included).
    """
    return hashlib.sha256(canonical_json(document)).hexdigest()


def build_document(metadata: CheckpointMetadata, files: dict[str, FileRecord]) -> dict[str, Any]:
    """The content of checkpoint.json (``metadata`` must carry its ``created_at``)."""
    return {
        "format_version": FORMAT_VERSION,
        **_metadata_to_json(metadata),
        "files": {name: files[name].to_json() for name in sorted(files)},
    }


def _layout(value: Any, indent: str) -> str:
    scalar = lambda v: json.dumps(v, ensure_ascii=False, allow_nan=False)  # noqa: E731
    inner = indent + "  "
    if isinstance(value, dict) and value:
        items = [f"{inner}{scalar(k)}: {_layout(value[k], inner)}" for k in sorted(value)]
        return "{\n" + ",\n".join(items) + f"\n{indent}}}"
    if isinstance(value, list) and any(isinstance(v, dict | list) for v in value):
        items = [f"{inner}{_layout(v, inner)}" for v in value]
        return "[\n" + ",\n".join(items) + f"\n{indent}]"
    if isinstance(value, list):  # bounds, shapes, widths: one line each
        return "[" + ", ".join(scalar(v) for v in value) + "]"
    return scalar(value)


def document_text(document: dict[str, Any]) -> str:
    """checkpoint.json as written: sorted keys, objects indented by two spaces, lists of plain
    values on one line, a final newline. Deterministic; the identity does not depend on it."""
    return _layout(document, "") + "\n"


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    result: dict[str, Any] = {}
    for key, value in pairs:
        if key in result:
            raise BadInput(f"the key {key!r} appears twice in one object")
        result[key] = value
    return result


def _refuse_constant(token: str) -> None:
    raise BadInput(f"the non-standard JSON token {token} is refused")


def _check_member_name(name: str, where: str) -> None:
    """A file named in checkpoint.json must be a plain name directly inside the checkpoint."""
    if (
        not name
        or "/" in name
        or "\\" in name
        or "\x00" in name
        or name in (".", "..")
        or os.path.isabs(name)
    ):
        raise BadInput(
            f"{where}: files: {name!r} is not a plain file name inside the checkpoint "
            "directory (paths, '..' and absolute names are refused)"
        )


def _parse_files(value: Any, where: str) -> dict[str, FileRecord]:
    if not isinstance(value, dict):
        raise BadInput(f"{where}: files: got {type(value).__name__}, expected an object")
    records = {}
    for name, record in value.items():
        _check_member_name(name, where)
        if not isinstance(record, dict) or set(record) != {"sha256", "size_bytes"}:
            raise BadInput(
                f"{where}: files.{name}: expected an object with exactly sha256 and size_bytes"
            )
        digest, size = record["sha256"], record["size_bytes"]
        if type(digest) is not str or not _SHA256.fullmatch(digest):
            raise BadInput(f"{where}: files.{name}.sha256: got {digest!r}, expected 64 hex digits")
        if type(size) is not int or size < 0:
            raise BadInput(
                f"{where}: files.{name}.size_bytes: got {size!r}, expected a non-negative integer"
            )
        records[name] = FileRecord(digest, size)
    for name in records:
        if name not in DATA_FILES:
            raise BadInput(
                f"{where}: files: {name!r} is not part of the checkpoint format (known files: "
                f"{', '.join(DATA_FILES)})"
            )
    if WEIGHTS_FILE not in records:
        raise BadInput(f"{where}: files: {WEIGHTS_FILE} is not listed; every checkpoint has one")
    return records


def parse_document(
    text: str, where: str
) -> tuple[CheckpointMetadata, dict[str, FileRecord], str]:
    """Validate checkpoint.json's ``text``; returns (metadata, file records, identity).

    Refused (BadInput starting with ``where``): invalid or non-standard JSON, repeated keys,
    an unknown or missing ``format_version``, unknown or missing keys, a value of the wrong
    type, a file name that is not a plain name in the directory, unknown data files.
    """
    try:
        document = json.loads(text, object_pairs_hook=_no_duplicates,
                              parse_constant=_refuse_constant)
    except json.JSONDecodeError as err:
        raise BadInput(f"{where}: not valid JSON ({err})") from None
    except BadInput as err:
        raise BadInput(f"{where}: {err}") from None
    if not isinstance(document, dict):
        raise BadInput(f"{where}: got a JSON {type(document).__name__}, expected an object")
    version = document.get("format_version")
    if type(version) is not int:
        raise BadInput(
            f"{where}: format_version: got {version!r}, expected the integer {FORMAT_VERSION}"
        )
    if version != FORMAT_VERSION:
        raise BadInput(
            f"{where}: format version {version} is not supported (this qadapt reads version "
            f"{FORMAT_VERSION}; a newer qadapt may have written it)"
        )
    missing, unknown = sorted(DOCUMENT_KEYS - set(document)), sorted(set(document) - DOCUMENT_KEYS)
    if unknown:
        raise BadInput(f"{where}: unknown key(s) {unknown} in a version {version} checkpoint")
    if missing:
        raise BadInput(f"{where}: missing key(s) {missing}")
    files = _parse_files(document["files"], where)
    metadata = metadata_from_json(document, where)
    return metadata, files, identity_of(document)
