"""How much of each batch comes from each source: share vectors and their schedule.

Holds:
    check_shares -- validate a share vector against the sources' sizes; BadInput names the
        offending share.
    LinearShareSchedule -- shares moving linearly from one vector to another over a number of
        batches, then staying at the second.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from qadapt.errors import BadInput

SUM_TOLERANCE = 1e-6


def check_shares(
    shares: Sequence[float], *, sizes: Sequence[int] | None = None, where: str = "shares"
) -> np.ndarray:
    """``shares`` as a float64 array summing to exactly 1, after checking that each share is a
    finite non-negative number, that they sum to 1 within 1e-6, and (given ``sizes``, the
    transitions per source) that no empty source has a non-zero share.

    Example:
        >>> check_shares([0.25, 0.75]).tolist()
        [0.25, 0.75]
        >>> check_shares([0.5, -0.5, 1.0])
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: shares[1]: got -0.5, expected a share >= 0
    """
    if isinstance(shares, str | bytes) or not isinstance(shares, Sequence | np.ndarray):
        raise BadInput(f"{where}: got {shares!r}, expected a list of numbers")
    values = []
    for i, share in enumerate(shares):
        if isinstance(share, bool) or not isinstance(share, int | float | np.floating | np.integer):
            raise BadInput(f"{where}[{i}]: got {share!r}, expected a number")
        share = float(share)
        if not math.isfinite(share):
            raise BadInput(f"{where}[{i}]: got {share!r}, expected a finite share")
        if share < 0:
            raise BadInput(f"{where}[{i}]: got {share!r}, expected a share >= 0")
        values.append(share)
    if not values:
        raise BadInput(f"{where}: empty; give one share per source")
    if sizes is not None:
        if len(values) != len(sizes):
            raise BadInput(
                f"{where}: got {len(values)} shares for {len(sizes)} sources; give one per source"
            )
        for i, (share, size) in enumerate(zip(values, sizes, strict=True)):
            if share > 0 and size == 0:
                raise BadInput(f"{where}[{i}]: got {share!r} for source {i}, which is empty")
    total = math.fsum(values)
    if abs(total - 1.0) > SUM_TOLERANCE:
        raise BadInput(f"{where}: {values} sum to {total!r}, expected 1 (within {SUM_TOLERANCE})")
    return np.asarray(values, dtype=np.float64) / total


class LinearShareSchedule:
    """Shares at batch ``n``: ``start + (end - start) * min(n / steps, 1)``.

    Batch numbers count from 0 (the first batch a sampler draws). A schedule with
    ``start == end`` is a constant share vector.

    Example:
        >>> schedule = LinearShareSchedule([1.0, 0.0], [0.5, 0.5], steps=10)
        >>> schedule.shares_at(np.array([0, 5, 10, 99])).tolist()
        [[1.0, 0.0], [0.75, 0.25], [0.5, 0.5], [0.5, 0.5]]
    """

    def __init__(self, start: Sequence[float], end: Sequence[float], steps: int) -> None:
        self.start = check_shares(start, where="schedule start")
        self.end = check_shares(end, where="schedule end")
        if self.start.size != self.end.size:
            raise BadInput(
                f"schedule: start has {self.start.size} shares but end has {self.end.size}"
            )
        if isinstance(steps, bool) or not isinstance(steps, int) or steps < 1:
            raise BadInput(f"schedule steps: got {steps!r}, expected a positive integer")
        self.steps = steps

    @classmethod
    def constant(cls, shares: Sequence[float]) -> LinearShareSchedule:
        return cls(shares, shares, 1)

    @property
    def sources(self) -> int:
        return int(self.start.size)

    def shares_at(self, batch_numbers: np.ndarray) -> np.ndarray:
        """Share vectors ``[len(batch_numbers), sources]`` (float64, rows sum to 1)."""
        progress = np.minimum(np.asarray(batch_numbers, dtype=np.float64) / self.steps, 1.0)
        shares = self.start + (self.end - self.start) * progress[:, None]
        shares = np.clip(shares, 0.0, None)
        return shares / shares.sum(axis=1, keepdims=True)

    def check_sources(self, sizes: Sequence[int]) -> None:
        """BadInput unless the schedule fits ``sizes`` (one share per source, none for an
        empty source at either end)."""
        check_shares(list(self.start), sizes=sizes, where="schedule start")
        check_shares(list(self.end), sizes=sizes, where="schedule end")

    def to_json(self) -> dict[str, Any]:
        return {"start": self.start.tolist(), "end": self.end.tolist(), "steps": self.steps}
