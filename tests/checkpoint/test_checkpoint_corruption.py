"""A damaged, tampered or hostile checkpoint is refused with BadInput naming its path."""

from __future__ import annotations

import io
import json
import os
import pickle
import pickletools
from pathlib import Path

import pytest
import torch

from qadapt.checkpoint import load_checkpoint
from qadapt.checkpoint.format import identity_of
from qadapt.errors import BadInput

WEIGHTS = "weights.safetensors"
STATE = "training_state.safetensors"


def _refused(path: Path, match: str, **options) -> str:
    """Load ``path``; it must raise BadInput naming the checkpoint and matching ``match``."""
    with pytest.raises(BadInput, match=match) as caught:
        load_checkpoint(path, **options)
    message = str(caught.value)
    assert str(path) in message
    assert "\n" not in message  # the CLI prints it on one line
    return message


def _edit_json(path: Path, change) -> None:
    document = json.loads((path / "checkpoint.json").read_text())
    change(document)
    (path / "checkpoint.json").write_text(json.dumps(document, indent=2))


def _relist(path: Path, name: str) -> None:
    """Record the current bytes of ``name`` in checkpoint.json (a forger's move)."""
    import hashlib

    data = (path / name).read_bytes()
    _edit_json(path, lambda d: d["files"].__setitem__(
        name, {"sha256": hashlib.sha256(data).hexdigest(), "size_bytes": len(data)}))


# -- damaged files ---------------------------------------------------------------------------
def test_truncated_weights(saved):
    path, *_ = saved
    data = (path / WEIGHTS).read_bytes()
    (path / WEIGHTS).write_bytes(data[: len(data) // 2])
    _refused(path, "truncated")


@pytest.mark.parametrize("name", [WEIGHTS, STATE])
def test_one_flipped_byte_is_caught_by_the_checksum(saved, name):
    path, *_ = saved
    data = bytearray((path / name).read_bytes())
    data[len(data) - 3] ^= 0x01
    (path / name).write_bytes(bytes(data))
    # The training state is verified even when it is not read.
    _refused(path, "SHA-256 .* differs")


def test_a_flipped_byte_past_the_checksum_is_caught_by_the_parser(saved):
    path, *_ = saved
    data = bytearray((path / WEIGHTS).read_bytes())
    data[0] ^= 0xFF  # the header length: safetensors can no longer parse the file
    (path / WEIGHTS).write_bytes(bytes(data))
    _relist(path, WEIGHTS)
    _refused(path, "not a readable safetensors file")


@pytest.mark.parametrize("name", [WEIGHTS, STATE])
def test_missing_data_file(saved, name):
    path, *_ = saved
    (path / name).unlink()
    _refused(path, rf"{name}: missing")


def test_missing_checkpoint_json_and_missing_directory(saved, tmp_path):
    path, *_ = saved
    (path / "checkpoint.json").unlink()
    _refused(path, r"not a checkpoint \(checkpoint.json is missing\)")
    _refused(tmp_path / "nowhere", "not a directory")


def test_an_unlisted_file_is_refused(saved):
    path, *_ = saved
    (path / "notes.txt").write_text("added later")
    _refused(path, r"holds \['notes.txt'\], which checkpoint.json does not list")


# -- checkpoint.json schema ------------------------------------------------------------------
@pytest.mark.parametrize("change, match", [
    (lambda d: d.__setitem__("colour", "blue"), r"unknown key\(s\) \['colour'\]"),
    (lambda d: d.pop("gradient_step"), r"missing key\(s\) \['gradient_step'\]"),
    (lambda d: d.__setitem__("gradient_step", "1200"), "gradient_step: got '1200'"),
    (lambda d: d.__setitem__("gradient_step", 1.5), "gradient_step"),
    (lambda d: d.__setitem__("gradient_step", True), "gradient_step"),
    (lambda d: d.__setitem__("network", [32, 16]), "network: got list"),
    (lambda d: d.__setitem__("config_digest", 7), "config_digest"),
    (lambda d: d.__setitem__("parent_checkpoint", "ABC"), "parent_checkpoint"),
    (lambda d: d.__setitem__("datasets", {"path": "x"}), "datasets: got dict"),
    (lambda d: d["datasets"][0].__setitem__("rows", 5), r"unknown \['rows'\]"),
    (lambda d: d["environment"].pop("id"), r"environment: missing \['id'\]"),
    (lambda d: d["environment"].__setitem__("kwargs", "g=9.8"), "kwargs"),
    (lambda d: d.__setitem__("source_indicator", None), "source_indicator"),
    (lambda d: d.__setitem__("created_at", "2024-03-01 12:30"), "created_at"),
    (lambda d: d.__setitem__("created_at", 1709296200), "created_at"),
    (lambda d: d["observation_space"].__setitem__("shape", [61, 1]), "observation_space"),
    (lambda d: d["action_space"].__setitem__("type", "multi_binary"), "action_space.type"),
    (lambda d: d["files"][WEIGHTS].__setitem__("size_bytes", -1), "size_bytes"),
    (lambda d: d["files"][WEIGHTS].__setitem__("md5", "x"), "exactly sha256 and size_bytes"),
    (lambda d: d["files"][WEIGHTS].__setitem__("sha256", "x" * 64), "64 hex digits"),
    (lambda d: d["files"].pop(WEIGHTS), "weights.safetensors is not listed"),
    (lambda d: d.__setitem__("files", []), "files: got list"),
])
def test_schema_violations(saved, change, match):
    path, *_ = saved
    _edit_json(path, change)
    _refused(path, match)


@pytest.mark.parametrize("version, match", [
    (2, "format version 2 is not supported"),
    (0, "format version 0 is not supported"),
    ("1", "format_version: got '1'"),
    (None, "format_version: got None"),
])
def test_unknown_format_versions(saved, version, match):
    path, *_ = saved
    _edit_json(path, lambda d: d.__setitem__("format_version", version))
    _refused(path, match)


@pytest.mark.parametrize("text, match", [
    ("{not json", "not valid JSON"),
    ('{"format_version": 1, "format_version": 1}', "appears twice"),
    ('{"format_version": NaN}', "NaN is refused"),
    ("[1, 2]", "expected an object"),
])
def test_malformed_json(saved, text, match):
    path, *_ = saved
    (path / "checkpoint.json").write_text(text)
    _refused(path, match)


def test_non_utf8_checkpoint_json(saved):
    path, *_ = saved
    (path / "checkpoint.json").write_bytes(b'{"format_version": 1, "x": "\xff"}')
    _refused(path, "not UTF-8")


# -- paths that leave the directory ----------------------------------------------------------
@pytest.mark.parametrize("name", ["../weights.safetensors", "/etc/passwd", "..", "sub/w",
                                  "..\\w", ""])
def test_path_traversal_in_file_names(saved, name):
    path, *_ = saved
    _edit_json(path, lambda d: d["files"].__setitem__(name, d["files"][WEIGHTS]))
    _refused(path, "not a plain file name inside the checkpoint directory")


def test_unknown_file_names_are_refused(saved):
    path, *_ = saved
    _edit_json(path, lambda d: d["files"].__setitem__("model.bin", d["files"][WEIGHTS]))
    _refused(path, "'model.bin' is not part of the checkpoint format")


def test_a_symlink_out_of_the_directory_is_refused(saved, tmp_path):
    path, *_ = saved
    outside = tmp_path / "elsewhere.safetensors"
    outside.write_bytes((path / WEIGHTS).read_bytes())  # same bytes: the checksum would pass
    (path / WEIGHTS).unlink()
    os.symlink(outside, path / WEIGHTS)
    _refused(path, "is a symlink")


def test_a_symlinked_checkpoint_json_is_refused(saved, tmp_path):
    path, *_ = saved
    outside = tmp_path / "other.json"
    outside.write_bytes((path / "checkpoint.json").read_bytes())
    (path / "checkpoint.json").unlink()
    os.symlink(outside, path / "checkpoint.json")
    _refused(path, "is a symlink")


# -- pickles disguised as safetensors --------------------------------------------------------
class _Trap:
    """Unpickling this creates ``marker``: proof that something unpickled the file."""

    def __init__(self, marker: Path) -> None:
        self.marker = marker

    def __reduce__(self):
        return (Path.touch, (Path(self.marker),))


def _payloads(marker: Path) -> dict[str, bytes]:
    plain = pickle.dumps({"online.0.weight": _Trap(marker)})
    buffer = io.BytesIO()
    torch.save({"online.0.weight": _Trap(marker)}, buffer)  # the zip form torch.save writes
    return {"pickle": plain, "torch.save": buffer.getvalue()}


def test_the_trap_is_live_without_running_it(tmp_path):
    """The payload really calls Path.touch when unpickled: read its opcodes, don't run it."""
    marker = tmp_path / "never"
    operations = [(op.name, arg) for op, arg, _ in pickletools.genops(_payloads(marker)["pickle"])]
    names = [arg for name, arg in operations if name in ("SHORT_BINUNICODE", "BINUNICODE")]
    assert "pathlib" in names and "Path.touch" in names and marker.name in names
    assert ("STACK_GLOBAL", None) in operations and ("REDUCE", None) in operations


@pytest.mark.parametrize("kind", ["pickle", "torch.save"])
@pytest.mark.parametrize("name", [WEIGHTS, STATE])
@pytest.mark.parametrize("forged_checksum", [False, True])
def test_a_pickle_renamed_to_safetensors_is_never_unpickled(saved, tmp_path, kind, name,
                                                             forged_checksum):
    path, *_ = saved
    marker = tmp_path / "unpickled.marker"
    (path / name).write_bytes(_payloads(marker)[kind])
    if forged_checksum:  # checkpoint.json updated to match: only the parser stands in the way
        _relist(path, name)
        match = "not a readable safetensors file"
    else:
        match = "SHA-256 .* differs|truncated"
    _refused(path, match, load_training_state=True)
    assert not marker.exists()


# -- a tampered training state ---------------------------------------------------------------
def test_training_state_layout_problems_name_the_file(saved):
    import safetensors.torch

    path, *_ = saved
    tensors = safetensors.torch.load_file(path / STATE)
    safetensors.torch.save_file(tensors, path / STATE, metadata={"other": "x"})
    _relist(path, STATE)
    message = _refused(path, "header metadata must hold exactly", load_training_state=True)
    assert STATE in message
    safetensors.torch.save_file(tensors, path / STATE, metadata={
        "qadapt.training_state": '{"layout_version": 1, "layout": {"list": [1]}}'})
    _relist(path, STATE)
    _refused(path, "not part of the layout", load_training_state=True)


def test_identity_changes_when_checkpoint_json_is_edited(saved):
    path, info, *_ = saved
    _edit_json(path, lambda d: d["extra"].__setitem__("note", "edited"))
    loaded = load_checkpoint(path)
    assert loaded.identity != info.identity
    assert loaded.identity == identity_of(json.loads((path / "checkpoint.json").read_text()))
