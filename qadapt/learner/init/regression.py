"""The supervised phase of the auxiliary start: regress return-to-go from (state, action).

Holds:
    RegressionSettings -- steps, learning rate and batch size of the phase (validated).
    ReturnRegressionData -- prior datasets' observations and actions with standardised
        Monte-Carlo return-to-go targets; seeded uniform minibatches.
    fit_return_regression -- train Q-networks' raw outputs on the targets with Adam (MSE);
        returns the loss on a fixed probe sample before and after.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

from qadapt.errors import BadInput, TrainingFailed
from qadapt.learner.init.return_to_go import dataset_return_to_go

PROBE_ROWS = 4096


def _positive(key: str, value: Any, integer: bool) -> None:
    ok = (not isinstance(value, bool) and isinstance(value, int | float)
          and np.isfinite(value) and value > 0 and (not integer or isinstance(value, int)))
    if not ok:
        kind = "a positive integer" if integer else "a positive number"
        raise BadInput(f"init.regression.{key}: got {value!r}, expected {kind}")


@dataclass
class RegressionSettings:
    """The supervised phase's own settings (defaults: common practice for a small MLP).

    Example:
        >>> RegressionSettings(steps=200).batch_size
        256
    """

    steps: int = 1000
    learning_rate: float = 1e-3
    batch_size: int = 256

    def __post_init__(self) -> None:
        _positive("steps", self.steps, integer=True)
        _positive("learning_rate", self.learning_rate, integer=False)
        _positive("batch_size", self.batch_size, integer=True)


class ReturnRegressionData:
    """Rows of one or more prior datasets with their return-to-go as regression targets.

    Targets are standardised (mean 0, std 1 over all rows; a constant target keeps scale 1)
    so that one learning rate suits any reward scale. Observations and actions stay
    memory-mapped; a minibatch gathers only its rows.

    Args:
        observations, actions: per source, arrays [T_i, obs_dim] and [T_i, act_dim].
        returns: per source, float64 return-to-go [T_i].

    Example:
        >>> data = ReturnRegressionData([np.zeros((3, 2))], [np.zeros((3, 1))],
        ...                             [np.array([0.0, 1.0, 2.0])])
        >>> data.targets_for(np.array([0, 1, 2])).round(3).tolist()
        [-1.225, 0.0, 1.225]
    """

    def __init__(self, observations: Sequence, actions: Sequence,
                 returns: Sequence[np.ndarray]) -> None:
        if not observations or not len(observations) == len(actions) == len(returns):
            raise ValueError("observations, actions, returns: expected one array of each per "
                             f"source, got {len(observations)}, {len(actions)}, {len(returns)}")
        for i, (obs, act, ret) in enumerate(zip(observations, actions, returns, strict=True)):
            if not len(obs) == len(act) == len(ret) >= 1:
                raise ValueError(f"source {i}: got {len(obs)} observations, {len(act)} actions "
                                 f"and {len(ret)} returns, expected the same positive count")
        self.observations = list(observations)
        self.actions = list(actions)
        self.returns = np.concatenate([np.asarray(r, dtype=np.float64) for r in returns])
        self.offsets = np.cumsum([0, *(len(r) for r in returns)])
        self.mean = float(self.returns.mean())
        std = float(self.returns.std())
        self.scale = std if std > 1e-8 else 1.0

    @classmethod
    def from_datasets(cls, datasets: Sequence, gamma: float) -> ReturnRegressionData:
        return cls([d.array("observations") for d in datasets],
                   [d.array("actions") for d in datasets],
                   [dataset_return_to_go(d, gamma) for d in datasets])

    def __len__(self) -> int:
        return int(self.offsets[-1])

    def targets_for(self, rows: np.ndarray) -> np.ndarray:
        """Standardised targets [B] of global rows [B]."""
        return (self.returns[rows] - self.mean) / self.scale

    def batch(self, rows: np.ndarray) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
        """(observations [B, D], actions [B, A], targets [B]) float32 for sorted global rows."""
        obs, act = [], []
        for i in range(len(self.observations)):  # one gather per source, not per row
            lo, hi = np.searchsorted(rows, self.offsets[i : i + 2])
            local = rows[lo:hi] - self.offsets[i]
            obs.append(np.asarray(self.observations[i][local], dtype=np.float32))
            act.append(np.asarray(self.actions[i][local], dtype=np.float32))
        targets = self.targets_for(rows).astype(np.float32)
        return (torch.from_numpy(np.concatenate(obs)), torch.from_numpy(np.concatenate(act)),
                torch.from_numpy(targets))


def _mean_loss(networks: Sequence[nn.Module], batch) -> torch.Tensor:
    obs, act, targets = batch
    return sum(F.mse_loss(net(obs, act), targets) for net in networks) / len(networks)


def fit_return_regression(networks: Sequence[nn.Module], data: ReturnRegressionData,
                          settings: RegressionSettings, seed: int) -> dict[str, float]:
    """Train each network's raw output to the standardised return-to-go (MSE, Adam).

    Every network sees the same seeded minibatches (rows drawn uniformly with replacement).
    Returns {"first_loss", "last_loss"} (mean MSE over the networks on a fixed probe of up
    to 4096 rows, before and after), "target_mean", "target_std" and "rows".
    """
    rng = np.random.default_rng([int(seed), 0x5EED])
    probe = data.batch(np.sort(rng.choice(len(data), min(PROBE_ROWS, len(data)),
                                          replace=False)))
    params = [p for net in networks for p in net.parameters() if p.requires_grad]
    optimizer = torch.optim.Adam(params, lr=settings.learning_rate)
    with torch.no_grad():
        first = float(_mean_loss(networks, probe))
    for _ in range(settings.steps):
        rows = np.sort(rng.integers(0, len(data), settings.batch_size))
        loss = _mean_loss(networks, data.batch(rows))
        if not torch.isfinite(loss):
            raise TrainingFailed(f"init: the return regression's loss became {loss.item()}; "
                                 "lower init.regression.learning_rate")
        optimizer.zero_grad(set_to_none=True)
        loss.backward()
        optimizer.step()
    with torch.no_grad():
        last = float(_mean_loss(networks, probe))
    return {"first_loss": first, "last_loss": last, "target_mean": data.mean,
            "target_std": data.scale, "rows": len(data)}
