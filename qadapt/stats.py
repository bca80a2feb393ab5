"""Interval estimates for the figures qadapt reports.

Holds:
    wilson_interval -- the Wilson score interval for a binomial success rate.
    bootstrap_mean_interval -- a seeded percentile-bootstrap interval for the mean of a sample.
"""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np


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


# Resampled values held in memory at once; bounds memory for large samples (common practice).
_BOOTSTRAP_BLOCK = 2**20


def bootstrap_mean_interval(
    values, confidence: float = 0.95, resamples: int = 10_000, seed: int = 0
) -> tuple[float, float]:
    """Percentile-bootstrap interval (Efron, 1979) for the mean of ``values`` [n].

    Draws ``resamples`` samples of size n with replacement (numpy's PCG64 seeded with
    ``seed``, so the same arguments give the same interval), takes each one's mean and
    returns the (1 - confidence) / 2 and (1 + confidence) / 2 quantiles of those means.
    Resampling is batched in blocks of about a million drawn values.

    Example:
        >>> low, high = bootstrap_mean_interval([1.0, 2.0, 3.0, 4.0, 5.0], seed=0)
        >>> bool(low < 3.0 < high), (low, high) == bootstrap_mean_interval([1, 2, 3, 4, 5])
        (True, True)
    """
    sample = np.asarray(values, dtype=np.float64)
    if sample.ndim != 1 or sample.size < 1:
        raise ValueError(
            f"values: got an array of shape {sample.shape}, expected a non-empty 1-D sample"
        )
    if not np.isfinite(sample).all():
        raise ValueError("values: got NaN or infinite entries, expected finite numbers")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence: got {confidence!r}, expected a number in (0, 1)")
    if isinstance(resamples, bool) or not isinstance(resamples, int) or resamples < 1:
        raise ValueError(f"resamples: got {resamples!r}, expected a positive integer")
    n = sample.size
    rng = np.random.default_rng(seed)
    rows = max(1, _BOOTSTRAP_BLOCK // n)
    means = np.empty(resamples)
    for start in range(0, resamples, rows):
        stop = min(resamples, start + rows)
        picks = rng.integers(0, n, size=(stop - start, n))
        means[start:stop] = sample[picks].mean(axis=1)
    tail = (1.0 - confidence) / 2.0
    low, high = np.quantile(means, [tail, 1.0 - tail])
    return float(low), float(high)
