"""The batch a sampler hands to the learner.

Holds:
    ReplayBatch -- contiguous float32 tensors of one batch, plus where each row came from.
"""

from __future__ import annotations

from dataclasses import dataclass

import torch


@dataclass(slots=True)
class ReplayBatch:
    """One batch of ``B`` transitions as contiguous CPU tensors.

    observations / next_observations ``[B, obs_dim]`` float32; actions ``[B, act_dim]``
    float32; rewards, terminated, truncated ``[B]`` float32 (flags as 0.0/1.0);
    source_index ``[B]`` int64 (which sampler source each row came from) and row_index
    ``[B]`` int64 (the row within that source), for looking up per-row cached values.

    A batch is a view into a block of batches the sampler gathered together; keeping a batch
    keeps its block's memory alive, so ``clone()`` a batch you want to hold on to for long.

    Example:
        >>> obs, flags = torch.zeros(2, 3), torch.zeros(2)
        >>> rows = torch.zeros(2, dtype=torch.int64)
        >>> b = ReplayBatch(obs, obs, torch.zeros(2, 1), flags, flags, flags, rows, rows)
        >>> len(b), b.observations.is_contiguous()
        (2, True)
    """

    observations: torch.Tensor
    next_observations: torch.Tensor
    actions: torch.Tensor
    rewards: torch.Tensor
    terminated: torch.Tensor
    truncated: torch.Tensor
    source_index: torch.Tensor
    row_index: torch.Tensor

    def __len__(self) -> int:
        return int(self.rewards.shape[0])

    def clone(self) -> ReplayBatch:
        """A copy that owns its memory."""
        return ReplayBatch(*(getattr(self, name).clone() for name in self.__slots__))
