"""Checkpoints: a verified directory of safetensors files plus checkpoint.json.

Holds (each from its own module):
    save_checkpoint, load_checkpoint -- atomic write, verified read [store]
    CheckpointInfo, LoadedCheckpoint -- what a save wrote, what a load read [store]
    CheckpointMetadata, DatasetReference -- what a checkpoint records about itself [metadata]
    identity_of, FORMAT_VERSION, file names -- the on-disk format and identity hash [format]
    check_checkpoint_spaces -- refuse a checkpoint trained for other spaces [space_check]
    pack_state, unpack_state -- nested training state <-> named tensors + JSON layout
        [state_packing]

The format is documented in docs/checkpoints.md.
"""

from qadapt.checkpoint.format import (
    FORMAT_VERSION,
    METADATA_FILE,
    TRAINING_STATE_FILE,
    WEIGHTS_FILE,
    FileRecord,
    identity_of,
)
from qadapt.checkpoint.metadata import CheckpointMetadata, DatasetReference
from qadapt.checkpoint.space_check import check_checkpoint_spaces
from qadapt.checkpoint.state_packing import pack_state, unpack_state
from qadapt.checkpoint.store import (
    CheckpointInfo,
    LoadedCheckpoint,
    load_checkpoint,
    save_checkpoint,
)

__all__ = [
    "FORMAT_VERSION",
    "METADATA_FILE",
    "TRAINING_STATE_FILE",
    "WEIGHTS_FILE",
    "CheckpointInfo",
    "CheckpointMetadata",
    "DatasetReference",
    "FileRecord",
    "LoadedCheckpoint",
    "check_checkpoint_spaces",
    "identity_of",
    "load_checkpoint",
    "pack_state",
    "save_checkpoint",
    "unpack_state",
]
