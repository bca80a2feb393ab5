"""Interval estimates for the figures qadapt reports.

Holds:
    wilson_interval -- the Wilson score interval for a binomial success rate.
    percentile_bootstrap -- a seeded percentile-bootstrap interval of a statistic of samples
        resampled independently (one sample, or one per stratum).
    bootstrap_mean_interval -- a seeded percentile-bootstrap interval for the mean of a sample.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from functools import lru_cache

import numpy as np
from scipy.stats import binomtest, bootstrap


def wilson_interval(successes: int, trials: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval (Wilson, 1927) for ``successes`` out of ``trials``.

    Computed by ``scipy.stats.binomtest(successes, trials).proportion_ci(method="wilson")``.
    The bounds are clamped to [0, 1] and float noise within 1e-12 of 0 or 1 is snapped to it, so
    0 successes give a lower bound of exactly 0.0 and ``trials`` successes an upper bound of
    exactly 1.0.

    Example:
        >>> low, high = wilson_interval(8, 10)
        >>> round(low, 4), round(high, 4)
        (0.4902, 0.9433)
        >>> wilson_interval(0, 10)[0], wilson_interval(10, 10)[1]
        (0.0, 1.0)
    """
    if isinstance(trials, bool) or not isinstance(trials, int) or trials < 1:
        raise ValueError(f"trials: got {trials!r}, expected a positive integer")
    if isinstance(successes, bool) or not isinstance(successes, int) or not (
        0 <= successes <= trials
    ):
        raise ValueError(f"successes: got {successes!r}, expected an integer in [0, {trials}]")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence: got {confidence!r}, expected a number in (0, 1)")
    return _scipy_wilson(int(successes), int(trials), float(confidence))


def _unit_bound(value: float) -> float:
    """Clamp to [0, 1] and snap values within 1e-12 of 0 or 1 to exactly 0.0 or 1.0."""
    value = min(1.0, max(0.0, float(value)))
    if value < 1e-12:
        return 0.0
    if 1.0 - value < 1e-12:
        return 1.0
    return value


# binomtest also computes a p-value, about 0.3 ms a call; reports ask for the same counts often.
@lru_cache(maxsize=4096)
def _scipy_wilson(successes: int, trials: int, confidence: float) -> tuple[float, float]:
    interval = binomtest(successes, trials).proportion_ci(
        confidence_level=confidence, method="wilson"
    )
    return _unit_bound(interval.low), _unit_bound(interval.high)


# Resampled values held in memory at once; bounds memory for large samples (common practice).
_BOOTSTRAP_BLOCK = 2**20


def percentile_bootstrap(
    samples: Sequence[np.ndarray],
    statistic: Callable[..., np.ndarray],
    reps: int,
    confidence: float,
    seed: int,
    values_per_batch: int = 2**20,
) -> tuple[float, float]:
    """Percentile interval (Efron, 1979) of ``statistic(*draws)``, each sample resampled on its
    own; ``values_per_batch`` bounds the resampled values held in memory at once.

    ``scipy.stats.bootstrap`` with several samples and ``paired=False`` resamples every sample
    independently with its own size, which is the stratified bootstrap (one sample per task, or
    per task and strategy). ``statistic`` takes one (count, n_i) array per sample and returns
    (count,). scipy refuses samples of one value; such a sample is the same in every resample
    (and drawing indices in [0, 1) uses no random numbers), so it is passed in as a constant and
    the other samples get the very draws they would get with it.
    """
    varying = [index for index, sample in enumerate(samples) if sample.size > 1]
    if not varying:  # nothing to resample: every replicate is the statistic of the data
        value = float(np.asarray(statistic(*[s[None, :] for s in samples])).reshape(-1)[0])
        return value, value

    def replicate(*draws: np.ndarray, axis: int = -1) -> np.ndarray:
        count = draws[0].shape[0]
        full = [sample if sample.size > 1 else np.broadcast_to(sample, (count, 1))
                for sample in samples]
        for index, draw in zip(varying, draws, strict=True):
            full[index] = draw
        return np.asarray(statistic(*full), dtype=float)

    total = sum(sample.size for sample in samples)
    result = bootstrap(
        [samples[index] for index in varying],
        replicate,
        n_resamples=reps,
        batch=max(1, values_per_batch // total),
        vectorized=True,
        paired=False,
        axis=-1,
        confidence_level=confidence,
        method="percentile",
        random_state=np.random.default_rng(seed),
    )
    return float(result.confidence_interval.low), float(result.confidence_interval.high)


def bootstrap_mean_interval(
    values, confidence: float = 0.95, resamples: int = 10_000, seed: int = 0
) -> tuple[float, float]:
    """Percentile-bootstrap interval (Efron, 1979) for the mean of ``values`` [n].

    Computed by ``scipy.stats.bootstrap(method="percentile")``: draws ``resamples`` samples of
    size n with replacement (indices ``integers(0, n, (resamples, n))`` from numpy's PCG64
    seeded with ``seed``, so the same arguments give the same interval), takes each one's mean
    and returns the (1 - confidence) / 2 and (1 + confidence) / 2 quantiles (linear
    interpolation) of those means. Resampling is batched in blocks of about a million drawn
    values. A single value gives the interval (value, value).

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
    return percentile_bootstrap([sample], lambda draws: np.mean(draws, axis=-1), resamples,
                                confidence, seed, _BOOTSTRAP_BLOCK)
