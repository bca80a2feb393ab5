"""Exact argmax over a finite set of candidate actions.

Holds:
    ExhaustiveMaximizer -- scores every candidate for every state (in chunks of candidates)
        and returns the exact argmax, ties broken towards the lowest candidate index.
"""

from __future__ import annotations

import numpy as np
import torch

from qadapt.checks import positive_int
from qadapt.maximize.base import ActionMaximizer, MaximizerResult, ScoreFn
from qadapt.maximize.checks import (
    check_batch_size,
    check_initial,
    check_scores,
    check_state_keys,
)

# 4 Mi floats (16 MiB) of candidates per score call: large enough that the per-call overhead
# vanishes, small enough that a network's activations on a chunk stay modest. Common practice.
DEFAULT_FLOATS_PER_CHUNK = 1 << 22


def _candidate_tensor(candidates: object) -> torch.Tensor:
    """Candidates as a contiguous float32 [C, A] copy; refuses bad shapes and non-finite values."""
    try:
        if isinstance(candidates, torch.Tensor):
            tensor = candidates.detach().to(device="cpu", dtype=torch.float32)
        else:
            tensor = torch.as_tensor(np.asarray(candidates, dtype=np.float64), dtype=torch.float32)
    except (TypeError, ValueError) as err:
        raise ValueError(
            f"candidates: got {type(candidates).__name__}, expected a [C, A] array of numbers"
        ) from err
    if tensor.ndim != 2 or tensor.shape[0] == 0 or tensor.shape[1] == 0:
        raise ValueError(
            f"candidates: got shape {list(tensor.shape)}, expected [C, A] with C >= 1, A >= 1"
        )
    if not bool(torch.isfinite(tensor).all()):
        raise ValueError("candidates: got non-finite entries, expected finite actions")
    return tensor.clone().contiguous()


class ExhaustiveMaximizer(ActionMaximizer):
    """Returns, for each of B states, the exact best of C fixed candidate actions.

    Every candidate is scored for every state; the candidates go to the score function in
    chunks of at most ``floats_per_chunk`` floats ([B, chunk, A]), each chunk for all states at
    once. Equal scores resolve to the lowest candidate index. ``initial`` is checked for shape
    but otherwise unused, and no randomness is drawn, so ``generator`` has no effect.

    Args:
        candidates: float [C, A], the finite action set (copied).
        floats_per_chunk: cap on B * chunk * A for one score call (at least one candidate is
            always sent), a positive integer.

    Example:
        >>> import torch
        >>> maximizer = ExhaustiveMaximizer(torch.tensor([[0.0, 0.0], [1.0, 0.5], [0.2, 0.9]]))
        >>> target = torch.tensor([[1.0, 1.0], [0.0, 0.0]])        # one target per state
        >>> score = lambda c: -((c - target[:, None, :]) ** 2).sum(-1)
        >>> maximizer.maximize(score, 2).indices
        tensor([1, 0])
    """

    def __init__(
        self, candidates: object, floats_per_chunk: int = DEFAULT_FLOATS_PER_CHUNK
    ) -> None:
        self._candidates = _candidate_tensor(candidates)
        self._floats_per_chunk = positive_int("floats_per_chunk", floats_per_chunk)
        self.action_dim = int(self._candidates.shape[1])

    @classmethod
    def for_discrete(
        cls, n: int, floats_per_chunk: int = DEFAULT_FLOATS_PER_CHUNK
    ) -> ExhaustiveMaximizer:
        """One-hot candidates (the identity [n, n]) for a gymnasium ``Discrete(n)`` space.

        Result index i stands for the space's action ``start + i``.
        """
        n = positive_int("n", n)
        return cls(torch.eye(n, dtype=torch.float32), floats_per_chunk=floats_per_chunk)

    @classmethod
    def for_choices(
        cls, n: int, start: int = 0, floats_per_chunk: int = DEFAULT_FLOATS_PER_CHUNK
    ) -> ExhaustiveMaximizer:
        """The choices ``start .. start + n - 1`` of a gymnasium ``Discrete(n, start)`` as a
        one-column candidate set [n, 1]: the form datasets store a Discrete action in, so the
        chosen action is the action itself.

        Example:
            >>> ExhaustiveMaximizer.for_choices(3, start=1).candidates.flatten().tolist()
            [1.0, 2.0, 3.0]
        """
        n = positive_int("n", n)
        if isinstance(start, bool) or not isinstance(start, int):
            raise ValueError(f"start: got {start!r}, expected an integer")
        column = torch.arange(start, start + n, dtype=torch.float32)[:, None]
        return cls(column, floats_per_chunk=floats_per_chunk)

    @property
    def candidates(self) -> torch.Tensor:
        """The candidate set, float32 [C, A] (a copy)."""
        return self._candidates.clone()

    @property
    def floats_per_chunk(self) -> int:
        """Cap on B * chunk * A floats per score call."""
        return self._floats_per_chunk

    def maximize(
        self,
        score: ScoreFn,
        batch_size: int,
        *,
        initial: torch.Tensor | None = None,
        generator: torch.Generator | None = None,
    ) -> MaximizerResult:
        """Best candidate per state: actions float32 [B, A], values [B], indices int64 [B].

        ``score`` is called ceil(C / chunk) times on float32 [B, chunk, A], with
        chunk = max(1, floats_per_chunk // (B * A)).
        """
        b = check_batch_size(batch_size)
        if initial is not None:
            check_initial(initial, b, self.action_dim)
        count, a = self._candidates.shape
        chunk = max(1, min(count, self._floats_per_chunk // (b * a)))
        with torch.no_grad():
            best_values: torch.Tensor | None = None
            best_indices = torch.zeros(b, dtype=torch.int64)
            for begin in range(0, count, chunk):
                block = self._candidates[begin : begin + chunk]
                # Contiguous copy: score functions may reshape with .view.
                batch = block.unsqueeze(0).expand(b, -1, -1).contiguous()
                scores = check_scores(score(batch), b, block.shape[0])
                # torch.max returns the first maximal index; the strict '>' below keeps earlier
                # chunks on ties, so the overall tie-break is the lowest index.
                chunk_values, chunk_index = scores.max(dim=1)
                if best_values is None:
                    best_values, best_indices = chunk_values, chunk_index
                else:
                    better = chunk_values > best_values
                    best_values = torch.where(better, chunk_values, best_values)
                    best_indices = torch.where(better, chunk_index + begin, best_indices)
        assert best_values is not None  # count >= 1
        return MaximizerResult(
            actions=self._candidates[best_indices], values=best_values, indices=best_indices
        )

    def state_dict(self) -> dict:
        """The settings: ``candidates`` float32 [C, A] and ``floats_per_chunk``."""
        return {"candidates": self._candidates.clone(), "floats_per_chunk": self._floats_per_chunk}

    def load_state_dict(self, state: dict) -> None:
        """Take the settings in ``state`` (keys as ``state_dict``), validated as at construction."""
        check_state_keys(state, ("candidates", "floats_per_chunk"))
        rebuilt = ExhaustiveMaximizer(state["candidates"], state["floats_per_chunk"])
        self.__dict__.update(rebuilt.__dict__)

    def __repr__(self) -> str:
        count, a = self._candidates.shape
        return (
            f"ExhaustiveMaximizer(<{count} candidates of dimension {a}>, "
            f"floats_per_chunk={self._floats_per_chunk})"
        )
