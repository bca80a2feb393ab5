"""qadapt's interval estimates against scipy (a general-purpose reference library)."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.stats import binomtest

from qadapt.stats import wilson_interval


@given(
    trials=st.integers(min_value=1, max_value=5000),
    fraction=st.floats(min_value=0.0, max_value=1.0),
    confidence=st.sampled_from([0.8, 0.9, 0.95, 0.99, 0.999]),
)
def test_wilson_interval_matches_scipy_binomtest(trials, fraction, confidence):
    successes = round(fraction * trials)
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="wilson").
    want = binomtest(successes, trials).proportion_ci(confidence_level=confidence, method="wilson")
    low, high = wilson_interval(successes, trials, confidence)
    assert low == pytest.approx(want.low, abs=1e-9)
    assert high == pytest.approx(want.high, abs=1e-9)


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
