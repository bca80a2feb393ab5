"""What a checkpoint records about where its weights came from, and its JSON form.

Holds:
    DatasetReference -- one dataset a checkpoint was trained on: its path and SHA-256.
    CheckpointMetadata -- spaces, network config, environment, lineage, datasets, step, digest,
        source-indicator settings, creation time and free-form extras (validated at the door).
    metadata_to_json / metadata_from_json -- the metadata keys of checkpoint.json, both ways.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from typing import Any

import gymnasium

from qadapt.errors import BadInput
from qadapt.spaces import describe_space, parse_space

_SHA256 = re.compile(r"[0-9a-f]{64}")


def json_value(value: Any, where: str) -> Any:
    """A deep copy of ``value`` as plain strict JSON (tuples become lists); BadInput otherwise.

    Accepted: dict with str keys, list, tuple, str, bool, None, int, finite float.
    """
    kind = type(value)
    if value is None or kind in (bool, str, int):
        return value
    if kind is float:
        if not math.isfinite(value):
            raise BadInput(f"{where}: got {value!r}, expected a finite number (strict JSON)")
        return value
    if kind in (list, tuple):
        return [json_value(v, f"{where}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, Mapping):
        copy = {}
        for key, item in value.items():
            if type(key) is not str:
                raise BadInput(f"{where}: key {key!r} is a {type(key).__name__}, expected str")
            copy[key] = json_value(item, f"{where}.{key}")
        return copy
    raise BadInput(
        f"{where}: got a {kind.__name__}, expected JSON data (dict, list, str, number, bool, "
        "None)"
    )


def _json_object(value: Any, where: str) -> dict[str, Any]:
    if not isinstance(value, Mapping):
        raise BadInput(f"{where}: got {type(value).__name__}, expected an object (dict)")
    return json_value(value, where)


def _sha256(value: Any, where: str) -> str:
    if type(value) is not str or not _SHA256.fullmatch(value):
        raise BadInput(f"{where}: got {value!r}, expected 64 lower-case hexadecimal digits")
    return value


def _text(value: Any, where: str) -> str:
    if type(value) is not str or not value:
        raise BadInput(f"{where}: got {value!r}, expected a non-empty string")
    return value


def _exact_keys(value: Any, keys: set[str], where: str) -> dict[str, Any]:
    if not isinstance(value, dict):
        raise BadInput(f"{where}: got {type(value).__name__}, expected an object")
    if set(value) != keys:
        missing, unknown = sorted(keys - set(value)), sorted(set(value) - keys)
        problem = "; ".join(
            part for part in (
                f"missing {missing}" if missing else "",
                f"unknown {unknown}" if unknown else "",
            ) if part
        )
        raise BadInput(f"{where}: {problem} (expected exactly the keys {sorted(keys)})")
    return value


@dataclass(frozen=True)
class DatasetReference:
    """A dataset a checkpoint was trained on.

    Args:
        path: where it was read from (as given; informative, not resolved).
        sha256: its fingerprint (``ReplayDataset.fingerprint``: SHA-256 of its manifest).

    Example:
        >>> DatasetReference("data/prior", "ab" * 32).to_json()["path"]
        'data/prior'
    """

    path: str
    sha256: str

    def __post_init__(self) -> None:
        _text(self.path, "datasets[].path")
        _sha256(self.sha256, f"datasets[{self.path!r}].sha256")

    def to_json(self) -> dict[str, str]:
        return {"path": self.path, "sha256": self.sha256}

    @classmethod
    def from_json(cls, value: Any, where: str) -> DatasetReference:
        value = _exact_keys(value, {"path", "sha256"}, where)
        return cls(
            _text(value["path"], f"{where}.path"), _sha256(value["sha256"], f"{where}.sha256")
        )


@dataclass(frozen=True, kw_only=True)
class CheckpointMetadata:
    """Everything a checkpoint records besides its tensors.

    Args:
        observation_space, action_space: the gymnasium spaces the network was trained for
            (a 1-D float Box or a Discrete; stored with shape, dtype and bounds).
        network: the network's config (``QNetworkConfig.to_dict()``), JSON data.
        env_id: the gymnasium id of the environment it was trained for.
        env_kwargs: the keyword arguments of ``gymnasium.make`` for it (JSON data).
        gradient_step: gradient steps taken when the checkpoint was written (>= 0).
        config_digest: digest of the full run configuration that produced it.
        parent_checkpoint: identity hash of the checkpoint training started from, or None.
        datasets: the datasets trained on (DatasetReference or {"path", "sha256"} dicts).
        source_indicator: settings of the source-indicator input (empty dict: none).
        extra: free-form JSON data.
        created_at: creation time (timezone-aware); None means "the time of saving".

    JSON data is copied on construction (tuples become lists), so a loaded checkpoint's
    metadata equals the saved one whenever ``created_at`` was given.

    Example:
        >>> meta = CheckpointMetadata(
        ...     observation_space=gymnasium.spaces.Box(-1.0, 1.0, (6,)),
        ...     action_space=gymnasium.spaces.Box(-1.0, 1.0, (2,)),
        ...     network={"form": "late_fusion"}, env_id="demo_envs/PickCell-v0",
        ...     gradient_step=0, config_digest="run-0")
        >>> meta.observation_space.shape, meta.datasets
        ((6,), ())
    """

    observation_space: gymnasium.Space
    action_space: gymnasium.Space
    network: Mapping[str, Any]
    env_id: str
    gradient_step: int
    config_digest: str
    env_kwargs: Mapping[str, Any] = field(default_factory=dict)
    parent_checkpoint: str | None = None
    datasets: Sequence[DatasetReference | Mapping[str, str]] = ()
    source_indicator: Mapping[str, Any] = field(default_factory=dict)
    extra: Any = field(default_factory=dict)
    created_at: datetime | None = None

    def __post_init__(self) -> None:
        describe_space(self.observation_space, role="observation_space")
        describe_space(self.action_space, role="action_space")
        set_ = object.__setattr__  # frozen: normalised copies replace the given values
        set_(self, "network", _json_object(self.network, "network"))
        _text(self.env_id, "env_id")
        set_(self, "env_kwargs", _json_object(self.env_kwargs, "env_kwargs"))
        step = self.gradient_step
        if type(step) is not int or step < 0:
            raise BadInput(f"gradient_step: got {step!r}, expected a non-negative integer")
        _text(self.config_digest, "config_digest")
        if self.parent_checkpoint is not None:
            _sha256(self.parent_checkpoint, "parent_checkpoint")
        if isinstance(self.datasets, str | bytes) or not isinstance(self.datasets, Sequence):
            raise BadInput(f"datasets: got {self.datasets!r}, expected a list of datasets")
        set_(self, "datasets", tuple(
            d if isinstance(d, DatasetReference)
            else DatasetReference.from_json(dict(d) if isinstance(d, Mapping) else d,
                                            f"datasets[{i}]")
            for i, d in enumerate(self.datasets)
        ))
        set_(self, "source_indicator", _json_object(self.source_indicator, "source_indicator"))
        set_(self, "extra", json_value(self.extra, "extra"))
        if self.created_at is not None:
            if not isinstance(self.created_at, datetime) or self.created_at.utcoffset() is None:
                raise BadInput(
                    f"created_at: got {self.created_at!r}, expected a timezone-aware datetime"
                )
            set_(self, "created_at", self.created_at.astimezone(UTC))

    def stamped(self, now: datetime | None = None) -> CheckpointMetadata:
        """This metadata with ``created_at`` filled in (``now``, default the current time)."""
        if self.created_at is not None:
            return self
        return replace(self, created_at=now or datetime.now(UTC))


METADATA_KEYS = frozenset({
    "created_at", "observation_space", "action_space", "network", "environment",
    "parent_checkpoint", "datasets", "gradient_step", "config_digest", "source_indicator",
    "extra",
})


def metadata_to_json(metadata: CheckpointMetadata) -> dict[str, Any]:
    """The metadata keys of checkpoint.json (``created_at`` must be set: see ``stamped``)."""
    if metadata.created_at is None:
        raise ValueError("created_at: metadata must be stamped with a time before writing")
    return {
        "created_at": metadata.created_at.isoformat(timespec="microseconds"),
        "observation_space": describe_space(metadata.observation_space).to_json(),
        "action_space": describe_space(metadata.action_space).to_json(),
        "network": metadata.network,
        "environment": {"id": metadata.env_id, "kwargs": metadata.env_kwargs},
        "parent_checkpoint": metadata.parent_checkpoint,
        "datasets": [d.to_json() for d in metadata.datasets],
        "gradient_step": metadata.gradient_step,
        "config_digest": metadata.config_digest,
        "source_indicator": metadata.source_indicator,
        "extra": metadata.extra,
    }


def metadata_from_json(document: Mapping[str, Any], where: str) -> CheckpointMetadata:
    """Validate the metadata keys of a parsed checkpoint.json; ``where`` prefixes errors."""
    created = document["created_at"]
    try:
        created_at = datetime.fromisoformat(created) if type(created) is str else None
    except ValueError:
        created_at = None
    if created_at is None or created_at.utcoffset() is None:
        raise BadInput(
            f"{where}: created_at: got {created!r}, expected an ISO 8601 time with a time zone"
        )
    environment = _exact_keys(document["environment"], {"id", "kwargs"}, f"{where}: environment")
    datasets = document["datasets"]
    if type(datasets) is not list:
        raise BadInput(f"{where}: datasets: got {type(datasets).__name__}, expected a list")
    step = document["gradient_step"]
    if type(step) is not int:
        raise BadInput(f"{where}: gradient_step: got {step!r}, expected a non-negative integer")
    try:
        return CheckpointMetadata(
            observation_space=parse_space(
                document["observation_space"], where=f"{where}: observation_space"
            ).to_space(),
            action_space=parse_space(
                document["action_space"], where=f"{where}: action_space"
            ).to_space(),
            network=_json_object(document["network"], "network"),
            env_id=environment["id"],
            env_kwargs=_json_object(environment["kwargs"], "environment.kwargs"),
            gradient_step=step,
            config_digest=document["config_digest"],
            parent_checkpoint=document["parent_checkpoint"],
            datasets=[DatasetReference.from_json(d, f"datasets[{i}]")
                      for i, d in enumerate(datasets)],
            source_indicator=_json_object(document["source_indicator"], "source_indicator"),
            extra=document["extra"],
            created_at=created_at,
        )
    except BadInput as err:
        message = str(err)
        if message.startswith(where):
            raise
        raise BadInput(f"{where}: {message}") from None
