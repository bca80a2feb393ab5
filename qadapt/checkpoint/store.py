"""Writing a checkpoint directory atomically, and reading one back only after verifying it.

Holds:
    CheckpointInfo -- what ``save_checkpoint`` wrote: path, identity hash, file records, time.
    LoadedCheckpoint -- what ``load_checkpoint`` read: weights, metadata, training state,
        identity hash.
    save_checkpoint -- write weights, metadata and (optionally) training state as a checkpoint.
    load_checkpoint -- verify checksums and schema, check spaces, read the tensors.

Tensors are read only with ``safetensors.torch.load_file`` (header and metadata with
``safe_open``); nothing in a checkpoint is ever unpickled.
"""

from __future__ import annotations

import hashlib
import os
import stat
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import safetensors.torch
import torch
from safetensors import safe_open

from qadapt.checkpoint import durable
from qadapt.checkpoint.format import (
    METADATA_FILE,
    TRAINING_STATE_FILE,
    WEIGHTS_FILE,
    FileRecord,
    build_document,
    document_text,
    parse_document,
)
from qadapt.checkpoint.metadata import CheckpointMetadata
from qadapt.checkpoint.space_check import check_checkpoint_spaces
from qadapt.checkpoint.state_packing import (
    STORED_DTYPES,
    pack_state,
    skeleton_from_text,
    skeleton_to_text,
    unpack_state,
)
from qadapt.errors import BadInput
from qadapt.files import remove_tree, sha256_of_file

# The safetensors header metadata key holding the training state's layout. One key only:
# safetensors writes its metadata map in hash order, which would break byte-identical saves.
_LAYOUT_KEY = "qadapt.training_state"
_METADATA_MAX_BYTES = 16 << 20  # far above any real checkpoint.json; bounds a hostile file
_SAFETENSORS_DTYPES = frozenset(STORED_DTYPES.values())


@dataclass(frozen=True)
class CheckpointInfo:
    """A checkpoint ``save_checkpoint`` wrote.

    Attributes:
        path: the checkpoint directory.
        identity: hex SHA-256 of checkpoint.json's canonical form (see ``format.identity_of``).
        files: data file name -> FileRecord (SHA-256 and size) as checkpoint.json lists them.
        created_at: the creation time recorded (UTC).

    Example: see ``save_checkpoint``.
    """

    path: Path
    identity: str
    files: dict[str, FileRecord]
    created_at: datetime


@dataclass(frozen=True)
class LoadedCheckpoint:
    """A verified checkpoint read from disk.

    Attributes:
        path: the checkpoint directory.
        identity: hex SHA-256 of checkpoint.json's canonical form (equal to the
            ``CheckpointInfo.identity`` of the save that wrote it).
        weights: tensor name -> tensor, in sorted name order.
        metadata: the recorded CheckpointMetadata (``created_at`` set).
        training_state: the unpacked training state, or None when it was not asked for or
            the checkpoint has none.
        has_training_state: whether the checkpoint holds a training state.

    Example: see ``load_checkpoint``.
    """

    path: Path
    identity: str
    weights: dict[str, torch.Tensor]
    metadata: CheckpointMetadata
    training_state: Any
    has_training_state: bool


# -- saving ----------------------------------------------------------------------------------
def _checked_weights(weights: Any) -> dict[str, torch.Tensor]:
    if not isinstance(weights, Mapping) or not weights:
        raise BadInput(f"weights: got {type(weights).__name__}, expected a non-empty dict of "
                       "name -> tensor")
    checked = {}
    for name in sorted(weights, key=lambda n: (type(n) is not str, str(n))):
        tensor = weights[name]
        if type(name) is not str or not name or name == "__metadata__":
            raise BadInput(f"weights: the name {name!r} is not usable; expected a non-empty "
                           "string other than '__metadata__'")
        if not isinstance(tensor, torch.Tensor):
            raise BadInput(f"weights[{name!r}]: got {type(tensor).__name__}, expected a tensor")
        if tensor.layout != torch.strided or tensor.device.type != "cpu":
            raise BadInput(f"weights[{name!r}]: expected a dense CPU tensor, got "
                           f"{tensor.layout} on {tensor.device}")
        if tensor.dtype not in _SAFETENSORS_DTYPES:
            raise BadInput(f"weights[{name!r}]: dtype {tensor.dtype} cannot be stored in "
                           "safetensors")
        # Own contiguous copies: tensors may share memory (the acting network can be critic
        # 0 itself), which safetensors refuses.
        tensor = tensor.detach().resolve_conj().resolve_neg()
        checked[name] = tensor.clone(memory_format=torch.contiguous_format)
    return checked


def _training_state_bytes(state: Any) -> bytes:
    tensors, skeleton = pack_state(state)
    ordered = {name: tensors[name] for name in sorted(tensors)}
    return safetensors.torch.save(ordered, metadata={_LAYOUT_KEY: skeleton_to_text(skeleton)})


def _replaces_existing(target: Path, overwrite: bool) -> bool:
    """Whether ``target`` holds a checkpoint to replace; BadInput if it must not be touched."""
    if target.is_symlink():
        raise BadInput(f"{target}: is a symlink; give the real checkpoint path")
    if not target.exists():
        return False
    if not target.is_dir():
        raise BadInput(f"{target}: exists and is not a directory; refusing to replace it")
    if not any(target.iterdir()):
        return False  # an empty directory is free; rename() replaces it
    if not (target / METADATA_FILE).is_file():
        raise BadInput(f"{target}: exists and is not a checkpoint (no {METADATA_FILE}); "
                       "refusing to replace it")
    if not overwrite:
        raise BadInput(f"{target}: a checkpoint already exists there; pass overwrite=True to "
                       "replace it")
    return True


def save_checkpoint(
    directory: str | os.PathLike,
    weights: Mapping[str, torch.Tensor],
    metadata: CheckpointMetadata,
    training_state: object | None = None,
    overwrite: bool = False,
) -> CheckpointInfo:
    """Write a checkpoint directory: weights, checkpoint.json and optionally a training state.

    Args:
        directory: the checkpoint's path (its parent is created if needed).
        weights: tensor name -> CPU tensor (e.g. the critics' state dict and the acting
            network), written to weights.safetensors in sorted name order.
        metadata: CheckpointMetadata; a ``created_at`` of None is set to the current time.
        training_state: anything ``pack_state`` accepts (a learner's and a sampler's state
            dicts, RNG states), written to training_state.safetensors; None writes no file.
        overwrite: replace an existing checkpoint at ``directory``.

    Everything is written and fsynced in a hidden sibling directory which is then renamed
    into place, so the path shows either the old checkpoint or the complete new one. Raises
    BadInput if ``directory`` holds a checkpoint and ``overwrite`` is False, holds anything
    that is not a checkpoint, or writing fails (the message names the OS error; any previous
    checkpoint is unchanged and the hidden directory is removed). Equal inputs (with a fixed
    ``created_at``) give byte-identical files.

    Example:
        >>> import tempfile, gymnasium
        >>> from datetime import datetime, UTC
        >>> meta = CheckpointMetadata(
        ...     observation_space=gymnasium.spaces.Box(-1.0, 1.0, (3,)),
        ...     action_space=gymnasium.spaces.Box(-1.0, 1.0, (2,)), network={"torso": [8]},
        ...     env_id="demo_envs/PickCell-v0", gradient_step=10, config_digest="demo",
        ...     created_at=datetime(2024, 1, 1, tzinfo=UTC))
        >>> path = Path(tempfile.mkdtemp()) / "ckpt"
        >>> info = save_checkpoint(path, {"w": torch.ones(2)}, meta, training_state={"step": 10})
        >>> loaded = load_checkpoint(path, load_training_state=True)
        >>> loaded.identity == info.identity, loaded.training_state, loaded.weights["w"]
        (True, {'step': 10}, tensor([1., 1.]))
    """
    target = Path(directory)
    if not isinstance(metadata, CheckpointMetadata):
        raise BadInput(f"metadata: got {type(metadata).__name__}, expected CheckpointMetadata")
    if type(overwrite) is not bool:
        raise BadInput(f"overwrite: got {overwrite!r}, expected True or False")
    metadata = metadata.stamped()
    contents = {WEIGHTS_FILE: safetensors.torch.save(_checked_weights(weights))}
    if training_state is not None:
        contents[TRAINING_STATE_FILE] = _training_state_bytes(training_state)
    records = {
        name: FileRecord(_sha256_bytes(data), len(data)) for name, data in contents.items()
    }
    text = document_text(build_document(metadata, records))
    replace = _replaces_existing(target, overwrite)

    staging = None
    try:
        staging = durable.staging_directory(target)
        for name, data in contents.items():
            durable.write_file_durably(staging / name, data)
        durable.write_file_durably(staging / METADATA_FILE, text.encode("utf-8"))
        durable.publish_directory(staging, target, replace=replace)
        staging = None
    except OSError as err:
        raise BadInput(
            f"{target}: could not write the checkpoint ({err.strerror or err}); any previous "
            "checkpoint there is unchanged"
        ) from err
    finally:
        if staging is not None:
            remove_tree(staging)
    # Identity from the text as a reader will parse it, so save and load always agree.
    _, _, identity = parse_document(text, str(target / METADATA_FILE))
    return CheckpointInfo(target, identity, records, metadata.created_at)


def _sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


# -- loading ---------------------------------------------------------------------------------
def _regular_member(root: Path, name: str) -> Path:
    """``root / name`` if it is a regular file directly in ``root`` (no symlinks at all)."""
    path = root / name
    try:
        info = os.lstat(path)
    except FileNotFoundError:
        raise BadInput(f"{path}: missing (it is listed in {METADATA_FILE})") from None
    if stat.S_ISLNK(info.st_mode):
        raise BadInput(f"{path}: is a symlink; checkpoint files must be regular files inside "
                       "the checkpoint directory")
    if not stat.S_ISREG(info.st_mode):
        raise BadInput(f"{path}: is not a regular file")
    if Path(os.path.realpath(path)).parent != Path(os.path.realpath(root)):
        raise BadInput(f"{path}: resolves outside the checkpoint directory {root}")
    return path


def _verify(path: Path, record: FileRecord) -> None:
    size = path.stat().st_size
    if size != record.size_bytes:
        raise BadInput(f"{path}: {size} bytes, but {METADATA_FILE} records {record.size_bytes} "
                       "(truncated or replaced)")
    digest = sha256_of_file(path)
    if digest != record.sha256:
        raise BadInput(f"{path}: SHA-256 {digest[:16]}... differs from the {record.sha256[:16]}... "
                       f"recorded in {METADATA_FILE}; the file is corrupt or was changed")


def _read_tensors(path: Path) -> dict[str, torch.Tensor]:
    try:
        return safetensors.torch.load_file(path)
    except Exception as err:  # safetensors raises its own error types for malformed files
        raise BadInput(f"{path}: not a readable safetensors file ({err})") from None


def _read_training_state(path: Path) -> Any:
    try:
        with safe_open(path, framework="pt") as handle:
            header = handle.metadata() or {}
    except Exception as err:
        raise BadInput(f"{path}: not a readable safetensors file ({err})") from None
    if set(header) != {_LAYOUT_KEY}:
        raise BadInput(f"{path}: the header metadata must hold exactly the key {_LAYOUT_KEY!r}")
    tensors = _read_tensors(path)
    try:
        return unpack_state(tensors, skeleton_from_text(header[_LAYOUT_KEY]))
    except BadInput as err:
        raise BadInput(f"{path}: {err}") from None


def _read_metadata_text(root: Path) -> str:
    if not root.is_dir():
        raise BadInput(f"{root}: no checkpoint here (not a directory)")
    path = root / METADATA_FILE
    if not path.exists() and not path.is_symlink():
        raise BadInput(f"{root}: not a checkpoint ({METADATA_FILE} is missing)")
    _regular_member(root, METADATA_FILE)
    if path.stat().st_size > _METADATA_MAX_BYTES:
        raise BadInput(f"{path}: larger than {_METADATA_MAX_BYTES} bytes; not a checkpoint.json")
    try:
        return path.read_bytes().decode("utf-8")
    except UnicodeDecodeError as err:
        raise BadInput(f"{path}: not UTF-8 text ({err})") from None


def load_checkpoint(
    directory: str | os.PathLike,
    *,
    expect_observation_space: Any = None,
    expect_action_space: Any = None,
    what: str = "dataset",
    load_training_state: bool = False,
) -> LoadedCheckpoint:
    """Read and verify the checkpoint at ``directory``.

    Args:
        directory: a checkpoint directory written by ``save_checkpoint``.
        expect_observation_space, expect_action_space: gymnasium spaces (or a dataset's
            space descriptions) the checkpoint must have been trained for; None skips a check.
        what: names the owner of the expected spaces in a mismatch message.
        load_training_state: also unpack training_state.safetensors (BadInput if absent).

    Checks, each failing with BadInput naming the path: checkpoint.json exists, parses as
    strict JSON and matches the schema (known format version, exact key set, every type);
    the directory holds exactly the files it lists, as regular files (no symlinks); the spaces
    match; every file's size and SHA-256 match before any tensor is read.

    Example: see ``save_checkpoint``.
    """
    root = Path(directory)
    if type(load_training_state) is not bool:
        raise BadInput(f"load_training_state: got {load_training_state!r}, expected a bool")
    if type(what) is not str or not what:
        raise BadInput(f"what: got {what!r}, expected a non-empty description")
    text = _read_metadata_text(root)
    metadata, records, identity = parse_document(text, str(root / METADATA_FILE))
    unlisted = sorted(set(os.listdir(root)) - set(records) - {METADATA_FILE})
    if unlisted:
        raise BadInput(f"{root}: holds {unlisted}, which {METADATA_FILE} does not list; a "
                       "checkpoint directory holds only its own files")
    check_checkpoint_spaces(
        root, metadata.observation_space, metadata.action_space,
        expect_observation_space=expect_observation_space,
        expect_action_space=expect_action_space, what=what,
    )
    paths = {name: _regular_member(root, name) for name in records}
    for name, path in paths.items():
        _verify(path, records[name])
    has_state = TRAINING_STATE_FILE in records
    if load_training_state and not has_state:
        raise BadInput(f"{root}: holds no training state (it was saved without one); it can "
                       "start a new run but cannot resume one")
    weights = _read_tensors(paths[WEIGHTS_FILE])
    state = _read_training_state(paths[TRAINING_STATE_FILE]) if load_training_state else None
    ordered = {name: weights[name] for name in sorted(weights)}
    for name, tensor in ordered.items():
        # A matching fingerprint proves the bytes are the saved ones, not that they are
        # usable: a NaN or infinity would only surface later, inside the maximiser.
        if tensor.is_floating_point() and not bool(torch.isfinite(tensor).all()):
            raise BadInput(f"{root}: weight tensor {name} holds NaN or infinite values; "
                           "the checkpoint cannot be used")
    return LoadedCheckpoint(root, identity, ordered, metadata, state, has_state)

