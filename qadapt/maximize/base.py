"""The contract every action maximiser meets.

Holds:
    ScoreFn -- the scoring callable a maximiser calls: candidates [B, K, A] -> scores [B, K].
    MaximizerResult -- the best actions [B, A], their scores [B] and, for finite sets, indices [B].
    ActionMaximizer -- the abstract base: ``maximize`` plus settings-only state dicts.
"""

from __future__ import annotations

import abc
from collections.abc import Callable
from dataclasses import dataclass

import torch

ScoreFn = Callable[[torch.Tensor], torch.Tensor]
"""Scores candidate actions: float32 tensor [B, K, A] in, tensor [B, K] out (higher is better).

Row b of the input holds K candidates for state b; the callable must not write into it.
"""


@dataclass
class MaximizerResult:
    """What a maximiser returns for a batch of B states.

    Attributes:
        actions: float32 [B, A], the best action found for each state.
        values: [B], ``score`` of ``actions`` as computed by the score function during the
            search (same dtype as the score function's output).
        indices: int64 [B] into the candidate set for maximisers over a finite set, else None.

    Example:
        >>> import torch
        >>> result = MaximizerResult(actions=torch.zeros(2, 3), values=torch.ones(2))
        >>> result.actions.shape, result.indices is None
        (torch.Size([2, 3]), True)
    """

    actions: torch.Tensor
    values: torch.Tensor
    indices: torch.Tensor | None = None


class ActionMaximizer(abc.ABC):
    """Finds, for each of B states at once, the action that maximises a score function.

    Implementations hold settings only (no state that changes between calls), run their
    search under ``torch.no_grad()``, batch every step over all B states, and are
    deterministic given the ``generator`` they are passed.

    Example:
        >>> import torch
        >>> from qadapt.maximize import ExhaustiveMaximizer
        >>> maximizer: ActionMaximizer = ExhaustiveMaximizer.for_discrete(3)
        >>> maximizer.action_dim
        3
        >>> maximizer.maximize(lambda c: c @ torch.tensor([0.0, 2.0, 1.0]), 1).indices
        tensor([1])
    """

    action_dim: int

    @abc.abstractmethod
    def maximize(
        self,
        score: ScoreFn,
        batch_size: int,
        *,
        initial: torch.Tensor | None = None,
        generator: torch.Generator | None = None,
    ) -> MaximizerResult:
        """Return the best action per state.

        Args:
            score: scores candidates [B, K, A] -> [B, K]; B is ``batch_size``.
            batch_size: B, the number of states, a positive integer.
            initial: optional float [B, A], a previous solution for the same states
                (a warm start); maximisers that search a fixed set may ignore it.
            generator: the source of randomness; the same generator state gives the same
                result. None uses torch's global generator.
        """

    @abc.abstractmethod
    def state_dict(self) -> dict:
        """The settings, enough to rebuild this maximiser exactly."""

    @abc.abstractmethod
    def load_state_dict(self, state: dict) -> None:
        """Replace the settings with those in ``state`` (validated like the constructor)."""
