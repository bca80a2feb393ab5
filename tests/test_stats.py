"""qadapt's interval estimates against closed-form formulas and a published worked example."""

from __future__ import annotations

import doctest
import math
from statistics import NormalDist

import pytest
from hypothesis import given
from hypothesis import strategies as st

from qadapt import stats
from qadapt.stats import wilson_interval


def wilson_closed_form(successes: int, trials: int, confidence: float) -> tuple[float, float]:
    """Wilson (1927) score interval, written out as in Agresti and Coull (1998).

    (p + z^2/2n -/+ z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n), z from Python's own NormalDist
    (not scipy's ndtri, which qadapt's scipy call uses).
    """
    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    p, n = successes / trials, trials
    centre = p + z * z / (2 * n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return (centre - half) / (1 + z * z / n), (centre + half) / (1 + z * z / n)


def test_docstring_examples_hold():
    failures, _ = doctest.testmod(stats)
    assert failures == 0


@given(
    trials=st.integers(min_value=1, max_value=5000),
    fraction=st.floats(min_value=0.0, max_value=1.0),
    confidence=st.sampled_from([0.8, 0.9, 0.95, 0.99, 0.999]),
)
def test_wilson_interval_matches_the_closed_form(trials, fraction, confidence):
    successes = round(fraction * trials)
    # Reference: the closed-form Wilson (1927) score interval, as written by Agresti and Coull
    # (1998), computed above with the standard library (a second, independent implementation).
    want_low, want_high = wilson_closed_form(successes, trials, confidence)
    low, high = wilson_interval(successes, trials, confidence)
    assert low == pytest.approx(want_low, abs=1e-9)
    assert high == pytest.approx(want_high, abs=1e-9)
    assert 0.0 <= low <= successes / trials <= high <= 1.0


@pytest.mark.parametrize(
    ("successes", "trials", "low", "high"),
    [(81, 263, 0.2553, 0.3662), (15, 148, 0.0624, 0.1605), (0, 20, 0.0, 0.1611),
     (1, 29, 0.0061, 0.1718)],
)
def test_wilson_interval_matches_newcombes_worked_examples(successes, trials, low, high):
    # Published worked examples, figures quoted from memory: Newcombe (1998), "Two-sided
    # confidence intervals for the single proportion: comparison of seven methods", Statistics
    # in Medicine 17, 857-872, the illustrative intervals for 81/263, 15/148, 0/20 and 1/29,
    # method 3 (score method without continuity correction), 95%, 4 decimal places.
    got = wilson_interval(successes, trials)
    assert (round(got[0], 4), round(got[1], 4)) == (low, high)


@pytest.mark.parametrize("trials", [1, 5, 7, 10, 17, 20, 1000])
@pytest.mark.parametrize("confidence", [0.8, 0.95, 0.99])
def test_wilson_interval_none_and_all_end_exactly_at_zero_and_one(trials, confidence):
    # Definition (Wilson, 1927): with p = 0 the lower root of the score equation is 0 and with
    # p = 1 the upper root is 1; the closed form above gives them only to rounding (e.g. 2.8e-17
    # for 0/5 at 95%), qadapt reports them exactly so that a printed bound reads 0 or 1.
    none_low, none_high = wilson_interval(0, trials, confidence)
    all_low, all_high = wilson_interval(trials, trials, confidence)
    assert none_low == 0.0 and repr(none_low) == "0.0"
    assert all_high == 1.0 and repr(all_high) == "1.0"
    # Symmetry of the score interval: (0, n) and (n, n) mirror each other about 1/2.
    assert none_high == pytest.approx(1.0 - all_low, abs=1e-12)
    assert none_high == pytest.approx(wilson_closed_form(0, trials, confidence)[1], abs=1e-9)


@pytest.mark.parametrize(
    ("args", "word"),
    [
        ((1, 0), "trials"),
        ((5, 4), "successes"),
        ((-1, 4), "successes"),
        ((1, 4, 1.0), "confidence"),
    ],
)
def test_wilson_interval_rejects_bad_input(args, word):
    with pytest.raises(ValueError, match=word):
        wilson_interval(*args)
