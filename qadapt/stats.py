"""Interval estimates for the figures qadapt reports.

Holds:
    wilson_interval -- the Wilson score interval for a binomial success rate.
"""

from __future__ import annotations

import math
from statistics import NormalDist


def wilson_interval(successes: int, trials: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval (Wilson, 1927) for ``successes`` out of ``trials``.

    Example:
        >>> low, high = wilson_interval(8, 10)
        >>> round(low, 4), round(high, 4)
        (0.4902, 0.9433)
    """
    if isinstance(trials, bool) or not isinstance(trials, int) or trials < 1:
        raise ValueError(f"trials: got {trials!r}, expected a positive integer")
    if isinstance(successes, bool) or not isinstance(successes, int) or not (
        0 <= successes <= trials
    ):
        raise ValueError(f"successes: got {successes!r}, expected an integer in [0, {trials}]")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence: got {confidence!r}, expected a number in (0, 1)")
    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    p = successes / trials
    denom = 1.0 + z * z / trials
    centre = (p + z * z / (2 * trials)) / denom
    half = z * math.sqrt(p * (1 - p) / trials + z * z / (4 * trials * trials)) / denom
    return max(0.0, centre - half), min(1.0, centre + half)
