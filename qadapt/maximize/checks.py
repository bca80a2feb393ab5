"""Argument checks the maximisers share; each raises ValueError naming the parameter.

Holds:
    check_batch_size -- the ``batch_size`` argument of ``maximize``.
    check_initial -- a warm-start tensor of shape [B, A] with finite entries, as float32.
    check_scores -- the output of a score function: shape [B, K], floating, no NaN.
    check_state_keys -- a state dict carries exactly the expected keys.
"""

from __future__ import annotations

from collections.abc import Iterable

import torch

from qadapt.checks import positive_int


def check_batch_size(batch_size: object) -> int:
    """``batch_size`` (B) of ``maximize``: a positive integer."""
    return positive_int("batch_size", batch_size)


def check_initial(initial: object, batch_size: int, action_dim: int) -> torch.Tensor:
    """A warm start: a floating tensor [batch_size, action_dim] with finite entries.

    Returns it as float32 (a copy only when the dtype differs).
    """
    if not isinstance(initial, torch.Tensor):
        raise ValueError(
            f"initial: got {type(initial).__name__}, expected a tensor of shape "
            f"[{batch_size}, {action_dim}] or None"
        )
    if tuple(initial.shape) != (batch_size, action_dim):
        raise ValueError(
            f"initial: got shape {list(initial.shape)}, expected [batch_size, action_dim] = "
            f"[{batch_size}, {action_dim}]"
        )
    if not initial.is_floating_point():
        raise ValueError(f"initial: got dtype {initial.dtype}, expected a floating dtype")
    if not bool(torch.isfinite(initial).all()):
        raise ValueError("initial: got non-finite entries, expected finite actions")
    return initial.to(torch.float32)


def check_scores(scores: object, batch_size: int, count: int) -> torch.Tensor:
    """The output of a score function called on [batch_size, count, A] candidates."""
    if not isinstance(scores, torch.Tensor):
        raise ValueError(
            f"score: returned {type(scores).__name__}, expected a tensor of shape "
            f"[{batch_size}, {count}]"
        )
    if tuple(scores.shape) != (batch_size, count):
        raise ValueError(
            f"score: returned shape {list(scores.shape)}, expected [B, K] = [{batch_size}, {count}]"
        )
    if not scores.is_floating_point():
        raise ValueError(f"score: returned dtype {scores.dtype}, expected a floating dtype")
    # A NaN would win or lose comparisons arbitrarily; a diverged Q-function should be loud.
    if bool(torch.isnan(scores).any()):
        raise ValueError("score: returned NaN, expected real-valued scores (+-inf allowed)")
    return scores


def check_state_keys(state: object, expected: Iterable[str]) -> dict:
    """A state dict with exactly the ``expected`` keys."""
    expected = set(expected)
    if not isinstance(state, dict):
        raise ValueError(f"state: got {type(state).__name__}, expected a dict")
    missing, unexpected = expected - set(state), set(state) - expected
    if missing or unexpected:
        raise ValueError(
            f"state: missing keys {sorted(missing)}, unexpected keys {sorted(unexpected)}; "
            f"expected exactly {sorted(expected)}"
        )
    return state
