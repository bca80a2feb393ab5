"""The dataset manifest: its JSON form, a validated in-memory form, reading and writing.

Holds:
    FORMAT_NAME -- the value of the manifest's "format" key.
    FieldEntry -- one array file: name, dtype, shape, SHA-256.
    EnvironmentRecord -- gymnasium id, keyword arguments, wrapper descriptions.
    SplitRecord -- which part of which parent dataset a split part is.
    Manifest -- everything the manifest says, validated.
    check_json_value -- BadInput unless a value is plain JSON (no NaN, str keys).
    parse_manifest -- a Manifest from decoded JSON, or BadInput naming the key and problem.
    read_manifest -- read and parse ``manifest.json`` in a dataset directory.
    manifest_text -- the canonical JSON text of a Manifest.
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from qadapt.data.format.schema import (
    FIELDS,
    FORMAT_VERSION,
    MANIFEST_NAME,
    expected_fields,
    expected_shape,
)
from qadapt.errors import BadInput
from qadapt.spaces import SpaceDescription, parse_space

FORMAT_NAME = "qadapt replay dataset"
_MAX_MANIFEST_BYTES = 1 << 24
_HEX64 = re.compile(r"[0-9a-f]{64}")
_TOP_KEYS = (
    "format",
    "format_version",
    "created_at",
    "transition_count",
    "episode_count",
    "fields",
    "environment",
    "observation_space",
    "action_space",
    "collected_by",
    "seed",
    "split",
)
_SPLIT_PARTS = ("train", "held_out")


def check_json_value(value: Any, where: str) -> None:
    """Raise BadInput unless ``value`` is plain JSON: dict (str keys), list, str, int, float
    (finite), bool or None, nested to any depth."""
    if value is None or isinstance(value, bool | str):
        return
    if isinstance(value, int):
        return
    if isinstance(value, float):
        if value != value or value in (float("inf"), float("-inf")):
            raise BadInput(f"{where}: got {value!r}; JSON records cannot hold NaN or infinity")
        return
    if isinstance(value, list | tuple):
        for i, item in enumerate(value):
            check_json_value(item, f"{where}[{i}]")
        return
    if isinstance(value, dict):
        for key, item in value.items():
            if not isinstance(key, str):
                raise BadInput(f"{where}: key {key!r} is not a string")
            check_json_value(item, f"{where}.{key}")
        return
    raise BadInput(f"{where}: {type(value).__name__} value {value!r} is not plain JSON")


def _plain_json(value: Any) -> Any:
    # Tuples become lists so a record compares equal to its own JSON round trip.
    return json.loads(json.dumps(value, allow_nan=False))


@dataclass(frozen=True)
class FieldEntry:
    """One array file of a dataset.

    Example:
        >>> FieldEntry("rewards.npy", "float32", (3,), "0" * 64).to_json()["shape"]
        [3]
    """

    file: str
    dtype: str
    shape: tuple[int, ...]
    sha256: str

    def to_json(self) -> dict[str, Any]:
        return {
            "file": self.file,
            "dtype": self.dtype,
            "shape": list(self.shape),
            "sha256": self.sha256,
        }


@dataclass(frozen=True)
class EnvironmentRecord:
    """How to rebuild the environment: gymnasium id, kwargs (perturbations included), wrappers.

    Example:
        >>> EnvironmentRecord("CartPole-v1", {}, []).to_json()
        {'id': 'CartPole-v1', 'kwargs': {}, 'wrappers': []}
    """

    id: str
    kwargs: dict[str, Any] = field(default_factory=dict)
    wrappers: list[Any] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        return {"id": self.id, "kwargs": self.kwargs, "wrappers": self.wrappers}

    @classmethod
    def parse(cls, value: object, *, where: str = "environment") -> EnvironmentRecord:
        """Validate a record given as a dict (``{"id", "kwargs", "wrappers"}``)."""
        if isinstance(value, EnvironmentRecord):
            value = value.to_json()
        if not isinstance(value, dict):
            raise BadInput(f"{where}: got {type(value).__name__}, expected an object")
        _exact_keys(value, ("id", "kwargs", "wrappers"), where)
        env_id = value["id"]
        if not isinstance(env_id, str) or not env_id:
            raise BadInput(f"{where}.id: got {env_id!r}, expected a gymnasium id string")
        kwargs = value["kwargs"]
        if not isinstance(kwargs, dict):
            raise BadInput(f"{where}.kwargs: got {type(kwargs).__name__}, expected an object")
        wrappers = value["wrappers"]
        if not isinstance(wrappers, list | tuple):
            raise BadInput(f"{where}.wrappers: got {type(wrappers).__name__}, expected a list")
        check_json_value(kwargs, f"{where}.kwargs")
        check_json_value(wrappers, f"{where}.wrappers")
        return cls(env_id, _plain_json(kwargs), _plain_json(list(wrappers)))


@dataclass(frozen=True)
class SplitRecord:
    """Which part (``"train"`` or ``"held_out"``) of which parent dataset this dataset is.

    ``parent_manifest_sha256`` is the SHA-256 of the parent's manifest file, which pins every
    parent array through its checksums; ``parent_split`` is the parent's own split record.

    Example:
        >>> r = SplitRecord("train", 0.2, 7, "runs/all", "a" * 64, 10, None)
        >>> SplitRecord.parse(r.to_json()) == r
        True
    """

    part: str
    held_out_fraction: float
    seed: int
    parent_path: str
    parent_manifest_sha256: str
    parent_episode_count: int
    parent_split: SplitRecord | None

    def to_json(self) -> dict[str, Any]:
        return {
            "part": self.part,
            "held_out_fraction": self.held_out_fraction,
            "seed": self.seed,
            "parent_path": self.parent_path,
            "parent_manifest_sha256": self.parent_manifest_sha256,
            "parent_episode_count": self.parent_episode_count,
            "parent_split": None if self.parent_split is None else self.parent_split.to_json(),
        }

    @classmethod
    def parse(cls, value: object, *, where: str = "split") -> SplitRecord:
        if not isinstance(value, dict):
            raise BadInput(f"{where}: got {type(value).__name__}, expected an object or null")
        _exact_keys(
            value,
            (
                "part",
                "held_out_fraction",
                "seed",
                "parent_path",
                "parent_manifest_sha256",
                "parent_episode_count",
                "parent_split",
            ),
            where,
        )
        part = value["part"]
        if part not in _SPLIT_PARTS:
            raise BadInput(f"{where}.part: got {part!r}, expected one of {list(_SPLIT_PARTS)}")
        fraction = value["held_out_fraction"]
        if (
            isinstance(fraction, bool)
            or not isinstance(fraction, int | float)
            or not (0.0 < fraction < 1.0)
        ):
            raise BadInput(f"{where}.held_out_fraction: got {fraction!r}, expected 0 < f < 1")
        seed = _integer(value["seed"], f"{where}.seed", minimum=0)
        parent_path = value["parent_path"]
        if not isinstance(parent_path, str):
            raise BadInput(f"{where}.parent_path: got {parent_path!r}, expected a string")
        parent_hash = _sha256_text(
            value["parent_manifest_sha256"], f"{where}.parent_manifest_sha256"
        )
        parent_count = _integer(
            value["parent_episode_count"], f"{where}.parent_episode_count", minimum=2
        )
        nested = value["parent_split"]
        parent_split = None if nested is None else cls.parse(nested, where=f"{where}.parent_split")
        return cls(
            part, float(fraction), seed, parent_path, parent_hash, parent_count, parent_split
        )


@dataclass(frozen=True)
class Manifest:
    """A validated manifest. ``fields`` maps field name -> FieldEntry in canonical order.

    Example:
        >>> m = parse_manifest(example_manifest_json())
        >>> m.transition_count, m.has_success, sorted(m.fields)[:2]
        (3, False, ['actions', 'episode_index'])
    """

    format_version: int
    created_at: str
    transition_count: int
    episode_count: int
    fields: dict[str, FieldEntry]
    environment: EnvironmentRecord
    observation_space: SpaceDescription
    action_space: SpaceDescription
    collected_by: dict[str, Any]
    seed: int | None
    split: SplitRecord | None

    @property
    def has_success(self) -> bool:
        """Whether the environment reported per-step success (``info["is_success"]``)."""
        return "success" in self.fields

    @property
    def obs_dim(self) -> int:
        return self.observation_space.width

    @property
    def act_dim(self) -> int:
        return self.action_space.width

    def to_json(self) -> dict[str, Any]:
        return {
            "format": FORMAT_NAME,
            "format_version": self.format_version,
            "created_at": self.created_at,
            "transition_count": self.transition_count,
            "episode_count": self.episode_count,
            "fields": {name: entry.to_json() for name, entry in self.fields.items()},
            "environment": self.environment.to_json(),
            "observation_space": self.observation_space.to_json(),
            "action_space": self.action_space.to_json(),
            "collected_by": self.collected_by,
            "seed": self.seed,
            "split": None if self.split is None else self.split.to_json(),
        }


def _exact_keys(value: dict, keys: tuple[str, ...], where: str) -> None:
    missing = [key for key in keys if key not in value]
    if missing:
        raise BadInput(f"{where}: missing key {missing[0]!r}")
    extra = [key for key in value if key not in keys]
    if extra:
        raise BadInput(f"{where}: unknown key {extra[0]!r}")


def _integer(value: object, where: str, *, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise BadInput(f"{where}: got {value!r}, expected an integer")
    if value < minimum:
        raise BadInput(f"{where}: got {value}, expected an integer >= {minimum}")
    return value


def _sha256_text(value: object, where: str) -> str:
    if not isinstance(value, str) or not _HEX64.fullmatch(value):
        raise BadInput(f"{where}: got {value!r}, expected 64 lowercase hex digits (SHA-256)")
    return value


def _plain_file_name(value: object, where: str) -> str:
    # The directory-aware check (symlinks) happens when the dataset is opened.
    if (
        not isinstance(value, str)
        or not value
        or "/" in value
        or "\\" in value
        or "\x00" in value
        or value in (".", "..")
        or os.path.isabs(value)
    ):
        raise BadInput(
            f"{where}: got {value!r}, expected a plain file name inside the dataset directory "
            "(paths, '..' and absolute names are refused)"
        )
    if not value.endswith(".npy"):
        raise BadInput(f"{where}: got {value!r}, expected a name ending in .npy")
    return value


def _parse_fields(
    value: object,
    *,
    where: str,
    transitions: int,
    episodes: int,
    obs_dim: int,
    act_dim: int,
    is_split_part: bool,
) -> dict[str, FieldEntry]:
    if not isinstance(value, dict):
        raise BadInput(f"{where}: got {type(value).__name__}, expected an object")
    for name in value:
        if name not in FIELDS:
            raise BadInput(f"{where}: unknown (extra) field {name!r}; known: {sorted(FIELDS)}")
    wanted = expected_fields(has_success="success" in value, is_split_part=is_split_part)
    for name in wanted:
        if name not in value:
            raise BadInput(f"{where}: missing field {name!r}")
    for name in value:
        if name not in wanted:
            raise BadInput(
                f"{where}: field {name!r} does not belong in this dataset "
                "(episode_success goes with success, parent_episodes with split)"
            )
    entries: dict[str, FieldEntry] = {}
    seen_files: dict[str, str] = {}
    for name in wanted:
        entry_where = f"{where}.{name}"
        entry = value[name]
        if not isinstance(entry, dict):
            raise BadInput(f"{entry_where}: got {type(entry).__name__}, expected an object")
        _exact_keys(entry, ("file", "dtype", "shape", "sha256"), entry_where)
        file_name = _plain_file_name(entry["file"], f"{entry_where}.file")
        if file_name in seen_files:
            raise BadInput(
                f"{entry_where}.file: {file_name!r} is already used by field "
                f"{seen_files[file_name]!r}"
            )
        seen_files[file_name] = name
        want_dtype = FIELDS[name].dtype.name
        if entry["dtype"] != want_dtype:
            raise BadInput(f"{entry_where}.dtype: got {entry['dtype']!r}, expected {want_dtype!r}")
        shape = entry["shape"]
        if not isinstance(shape, list) or not all(
            isinstance(n, int) and not isinstance(n, bool) for n in shape
        ):
            raise BadInput(f"{entry_where}.shape: got {shape!r}, expected a list of integers")
        want_shape = expected_shape(
            name, transitions=transitions, episodes=episodes, obs_dim=obs_dim, act_dim=act_dim
        )
        if tuple(shape) != want_shape:
            raise BadInput(
                f"{entry_where}.shape: got {shape}, expected {list(want_shape)} "
                f"(from transition_count={transitions}, episode_count={episodes} and the spaces)"
            )
        entries[name] = FieldEntry(
            file_name,
            want_dtype,
            want_shape,
            _sha256_text(entry["sha256"], f"{entry_where}.sha256"),
        )
    return entries


def parse_manifest(value: object, *, where: str = MANIFEST_NAME) -> Manifest:
    """Validate decoded manifest JSON and return a Manifest; BadInput names the bad key."""
    if not isinstance(value, dict):
        raise BadInput(f"{where}: got {type(value).__name__}, expected a JSON object")
    if value.get("format") != FORMAT_NAME:
        raise BadInput(f"{where}: 'format' is {value.get('format')!r}, expected {FORMAT_NAME!r}")
    version = value.get("format_version")
    if version != FORMAT_VERSION or isinstance(version, bool):
        raise BadInput(
            f"{where}: format_version {version!r} is not supported; this qadapt reads "
            f"version {FORMAT_VERSION}"
        )
    _exact_keys(value, _TOP_KEYS, where)
    created_at = value["created_at"]
    if not isinstance(created_at, str):
        raise BadInput(f"{where}.created_at: got {created_at!r}, expected an ISO 8601 time")
    try:
        datetime.fromisoformat(created_at)
    except ValueError:
        raise BadInput(
            f"{where}.created_at: got {created_at!r}, expected an ISO 8601 time"
        ) from None
    transitions = _integer(value["transition_count"], f"{where}.transition_count", minimum=0)
    if transitions == 0:
        raise BadInput(f"{where}: transition_count is 0; an empty dataset is refused")
    episodes = _integer(value["episode_count"], f"{where}.episode_count", minimum=1)
    if episodes > transitions:
        raise BadInput(f"{where}: episode_count {episodes} exceeds transition_count {transitions}")
    observation_space = parse_space(value["observation_space"], where=f"{where}.observation_space")
    if not hasattr(observation_space, "low"):
        raise BadInput(f"{where}.observation_space: observations must be a Box space")
    action_space = parse_space(value["action_space"], where=f"{where}.action_space")
    split = (
        None
        if value["split"] is None
        else SplitRecord.parse(value["split"], where=f"{where}.split")
    )
    fields = _parse_fields(
        value["fields"],
        where=f"{where}.fields",
        transitions=transitions,
        episodes=episodes,
        obs_dim=observation_space.width,
        act_dim=action_space.width,
        is_split_part=split is not None,
    )
    environment = EnvironmentRecord.parse(value["environment"], where=f"{where}.environment")
    collected_by = value["collected_by"]
    if not isinstance(collected_by, dict) or not isinstance(collected_by.get("kind"), str):
        raise BadInput(f"{where}.collected_by: expected an object with a string 'kind'")
    check_json_value(collected_by, f"{where}.collected_by")
    seed = value["seed"]
    if seed is not None:
        seed = _integer(seed, f"{where}.seed", minimum=0)
    return Manifest(
        format_version=version,
        created_at=created_at,
        transition_count=transitions,
        episode_count=episodes,
        fields=fields,
        environment=environment,
        observation_space=observation_space,
        action_space=action_space,
        collected_by=collected_by,
        seed=seed,
        split=split,
    )


def _refuse_constant(name: str) -> float:
    raise ValueError(f"non-standard JSON constant {name}")


def decode_manifest_text(text: str, *, where: str) -> object:
    """Decode manifest JSON strictly (no NaN/Infinity tokens); BadInput on any syntax error."""
    try:
        return json.loads(text, parse_constant=_refuse_constant)
    except (ValueError, RecursionError) as err:
        raise BadInput(f"{where}: not valid JSON ({err})") from None


def read_manifest(directory: Path) -> Manifest:
    """Read and validate ``directory/manifest.json``."""
    path = Path(directory) / MANIFEST_NAME
    if not Path(directory).is_dir():
        raise BadInput(f"{directory}: not a dataset directory (no such directory)")
    if not path.is_file():
        raise BadInput(f"{path}: missing; {directory} is not a complete dataset")
    if path.stat().st_size > _MAX_MANIFEST_BYTES:
        raise BadInput(f"{path}: larger than {_MAX_MANIFEST_BYTES} bytes; not a manifest")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise BadInput(f"{path}: not UTF-8 text") from None
    return parse_manifest(decode_manifest_text(text, where=str(path)), where=str(path))


def manifest_text(manifest: Manifest) -> str:
    """The canonical JSON text written to ``manifest.json`` (indented, strict JSON)."""
    return json.dumps(manifest.to_json(), indent=2, allow_nan=False) + "\n"


def example_manifest_json() -> dict[str, Any]:
    """A small valid manifest (3 transitions, 1 episode) for examples and tests."""
    zero = "0" * 64
    fields = {}
    shapes = {"observations": [3, 2], "actions": [3, 1], "next_observations": [3, 2]}
    for name in expected_fields(has_success=False, is_split_part=False):
        spec = FIELDS[name]
        shape = shapes.get(name, [1] if spec.per == "episode" else [3])
        fields[name] = {
            "file": f"{name}.npy",
            "dtype": spec.dtype.name,
            "shape": shape,
            "sha256": zero,
        }
    return {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "created_at": "2025-01-01T00:00:00+00:00",
        "transition_count": 3,
        "episode_count": 1,
        "fields": fields,
        "environment": {"id": "CartPole-v1", "kwargs": {}, "wrappers": []},
        "observation_space": {
            "type": "box",
            "shape": [2],
            "dtype": "float32",
            "low": ["-inf", -1.0],
            "high": ["inf", 1.0],
        },
        "action_space": {"type": "discrete", "n": 2, "start": 0},
        "collected_by": {"kind": "random"},
        "seed": 0,
        "split": None,
    }
