"""Source indicators: extra observation columns that tell prior data from new data.

Holds:
    INDICATOR_KINDS -- "none", "flag" (prior 0, new 1), "per_source" (one column per source).
    SourceIndicator -- the columns each source gets and the ones acting appends.
    TaggedSampler -- a batch sampler whose observations carry their source's columns.
    TaggedDataset -- a dataset view whose ``observations`` carry one source's columns.
    ActingTag -- a Q-network that appends the acting columns to raw observations.
    widen_observation_input -- base weights made to accept the extra columns (zero weights,
        so the widened network computes exactly what the base did).

When a perturbation is invisible, prior and new data disagree about identical observations;
with an indicator the Q-function can keep both worlds apart, and acting (evaluation,
exploration, collection with the checkpoint) feeds the new world's columns.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import torch
from torch import nn

from qadapt.errors import BadInput

INDICATOR_KINDS = ("none", "flag", "per_source")
# Checkpoint weight names whose last axis (or first-layer input columns) are observations.
_FIRST_LAYER = "torso.0.weight"
_MEAN, _STD = "obs_mean", "obs_std"


@dataclasses.dataclass(frozen=True)
class SourceIndicator:
    """Per-source indicator columns and the columns acting appends.

    Example:
        >>> ind = SourceIndicator.for_sources("flag", n_prior=2, n_new=1)
        >>> ind.values, ind.acting, ind.width
        (((0.0,), (0.0,), (1.0,)), (1.0,), 1)
        >>> SourceIndicator.for_sources("per_source", 1, 1).values
        ((1.0, 0.0), (0.0, 1.0))
    """

    kind: str
    values: tuple[tuple[float, ...], ...]
    acting: tuple[float, ...]

    @property
    def width(self) -> int:
        return len(self.acting)

    @classmethod
    def for_sources(cls, kind: str, n_prior: int, n_new: int) -> SourceIndicator | None:
        """The indicator for ``n_prior`` prior then ``n_new`` new sources (None for "none");
        acting uses the last new source's columns."""
        if kind not in INDICATOR_KINDS:
            raise BadInput(f"indicator: got {kind!r}, expected one of "
                           f"{', '.join(INDICATOR_KINDS)}")
        if kind == "none":
            return None
        n = n_prior + n_new
        if kind == "flag":
            values = tuple((0.0,) for _ in range(n_prior)) + tuple((1.0,) for _ in range(n_new))
        else:
            values = tuple(tuple(float(i == j) for j in range(n)) for i in range(n))
        return cls(kind, values, values[-1])

    def to_json(self) -> dict[str, Any]:
        return {"kind": self.kind, "values": [list(v) for v in self.values],
                "acting": list(self.acting)}

    @classmethod
    def from_json(cls, value: Any, where: str) -> SourceIndicator | None:
        if value is None:
            return None
        try:
            values = tuple(tuple(float(x) for x in v) for v in value["values"])
            acting = tuple(float(x) for x in value["acting"])
            kind = str(value["kind"])
        except (KeyError, TypeError, ValueError) as err:
            raise BadInput(f"{where}: source_indicator is malformed ({err})") from err
        if kind not in INDICATOR_KINDS[1:] or not acting or any(
                len(v) != len(acting) for v in values):
            raise BadInput(f"{where}: source_indicator is malformed")
        return cls(kind, values, acting)

    def table(self) -> torch.Tensor:
        """[sources, width] float32: row s holds source s's columns."""
        return torch.tensor(self.values, dtype=torch.float32)


def with_columns(observations: torch.Tensor, columns: torch.Tensor) -> torch.Tensor:
    """[B, D] observations and [B, W] (or [W]) columns -> [B, D + W]."""
    if columns.dim() == 1:
        columns = columns.expand(observations.shape[0], -1)
    return torch.cat([observations, columns.to(observations.dtype)], dim=-1)


class TaggedSampler:
    """Wraps a mixture sampler: each batch's observations and next observations get the
    columns of the source each row came from (``batch.source_index``)."""

    def __init__(self, sampler: Any, indicator: SourceIndicator) -> None:
        self.sampler = sampler
        self._table = indicator.table()

    def sample(self):
        batch = self.sampler.sample()
        columns = self._table[torch.as_tensor(batch.source_index, dtype=torch.long)]
        return dataclasses.replace(
            batch,
            observations=with_columns(torch.as_tensor(batch.observations), columns),
            next_observations=with_columns(torch.as_tensor(batch.next_observations), columns))

    def state_dict(self) -> dict:
        return self.sampler.state_dict()

    def load_state_dict(self, state: dict) -> None:
        self.sampler.load_state_dict(state)


class TaggedDataset:
    """A dataset view: ``array("observations")`` (and next observations) with one source's
    columns appended (a copy); every other field passes through."""

    def __init__(self, dataset: Any, columns: tuple[float, ...]) -> None:
        self.dataset = dataset
        self.columns = np.asarray(columns, dtype=np.float32)

    def array(self, name: str) -> np.ndarray:
        values = self.dataset.array(name)
        if name not in ("observations", "next_observations"):
            return values
        extra = np.broadcast_to(self.columns, (values.shape[0], self.columns.size))
        return np.concatenate([np.asarray(values, dtype=np.float32), extra], axis=1)

    def __getattr__(self, name: str) -> Any:
        return getattr(self.dataset, name)


class ActingTag(nn.Module):
    """A Q-network trained with indicator columns, acting on raw observations: ``encode``
    appends the acting columns, everything else is the wrapped network's.

    Example:
        >>> from qadapt.nets import QNetworkConfig, build_q_network
        >>> net = build_q_network(4, -torch.ones(1), torch.ones(1), QNetworkConfig(
        ...     torso=(8,), head=(4,)))
        >>> tagged = ActingTag(net, (1.0,))
        >>> tagged(torch.zeros(2, 3), torch.zeros(2, 1)).shape
        torch.Size([2])
    """

    def __init__(self, network: nn.Module, acting: tuple[float, ...]) -> None:
        super().__init__()
        self.network = network
        self.register_buffer("acting", torch.tensor(acting, dtype=torch.float32))
        self.obs_dim = network.obs_dim - len(acting)  # what acting feeds: raw observations

    def __getattr__(self, name: str):
        # Parameters, buffers and submodules first (nn.Module), then the wrapped network's
        # attributes (action bounds, normaliser, ...), so a policy can use either alike.
        try:
            return super().__getattr__(name)
        except AttributeError:
            if name == "network":
                raise
            return getattr(self.network, name)

    def encode(self, obs: torch.Tensor) -> torch.Tensor:
        return self.network.encode(with_columns(obs, self.acting))

    def forward(self, obs: torch.Tensor, actions: torch.Tensor) -> torch.Tensor:
        return self.score(self.encode(obs), actions[:, None, :])[:, 0]


def widen_observation_input(weights: dict[str, torch.Tensor], obs_dim: int,
                            extra: int) -> dict[str, torch.Tensor]:
    """Weights of networks built for ``obs_dim`` observation columns, for ``obs_dim + extra``:
    the first layer's weights for the new columns are zero and their normaliser is (0, 1),
    so every Q-value is exactly the base's. Other weights are returned as they are."""
    if extra == 0:
        return dict(weights)
    out = {}
    for name, value in weights.items():
        if name.endswith(_FIRST_LAYER):
            if value.shape[1] < obs_dim:
                raise BadInput(f"{name}: expected at least {obs_dim} input columns, got "
                               f"{value.shape[1]}")
            zeros = torch.zeros(value.shape[0], extra, dtype=value.dtype)
            value = torch.cat([value[:, :obs_dim], zeros, value[:, obs_dim:]], dim=1)
        elif name.endswith(_MEAN) and value.dim() == 1 and value.numel() == obs_dim:
            value = torch.cat([value, torch.zeros(extra, dtype=value.dtype)])
        elif name.endswith(_STD) and value.dim() == 1 and value.numel() == obs_dim:
            value = torch.cat([value, torch.ones(extra, dtype=value.dtype)])
        out[name] = value
    return out
