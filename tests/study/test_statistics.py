"""Study statistics against scipy and against worked examples computed by hand."""

from __future__ import annotations

import doctest

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as scipy_stats

from qadapt.study import statistics
from qadapt.study.statistics import (
    backward_transfer,
    budget_table,
    fisher_exact_greater,
    forward_transfer,
    interquartile_mean,
    probability_of_improvement,
    smallest_clearing_budget,
    steps_to_plateau,
    stratified_bootstrap_interval,
)
from tests.test_stats import wilson_closed_form


def test_docstring_examples_hold():
    failures, _ = doctest.testmod(statistics)
    assert failures == 0


# -- interquartile mean ------------------------------------------------------------------------
@settings(max_examples=60, deadline=None)
@given(st.integers(min_value=1, max_value=12), st.integers(min_value=0, max_value=10_000))
def test_iqm_matches_scipy_trim_mean_when_n_is_a_multiple_of_four(quarter, seed):
    scores = np.random.default_rng(seed).random(4 * quarter)
    # Reference: scipy.stats.trim_mean(x, 0.25) drops n/4 scores from each end; the interquartile
    # mean of Agarwal et al. (2021) is the same figure when n/4 is a whole number.
    assert interquartile_mean(scores) == pytest.approx(scipy_stats.trim_mean(scores, 0.25))


def test_iqm_fractional_weights_by_hand():
    # n = 5: the sorted scores cover quantile slices of 0.2; inside [0.25, 0.75] the 2nd and 4th
    # keep 0.15 of their 0.2 (weight 3/4), the 3rd all of it: (0.75*2 + 3 + 0.75*4) / 2.5 = 3.0.
    assert interquartile_mean([100.0, 4.0, 1.0, 3.0, 2.0]) == pytest.approx(3.0)
    # n = 3: weights (1/4, 1, 1/4) / 1.5: (0.25*0 + 1*0.5 + 0.25*1) / 1.5 = 0.5.
    assert interquartile_mean([0.0, 1.0, 0.5]) == pytest.approx(0.5)
    # n = 6: slices of 1/6; weights (0, 1/2, 1, 1, 1/2, 0) / 3:
    # (0.5*2 + 3 + 4 + 0.5*5) / 3 = 10.5 / 3 = 3.5 (scipy's trim_mean drops one each end: 3.5 too).
    assert interquartile_mean([1.0, 2.0, 3.0, 4.0, 5.0, 60.0]) == pytest.approx(3.5)
    # n = 7: slices of 1/7; x_2 keeps 2/7 - 1/4 = 1/28 (weight 1/4), x_3..x_5 whole, x_6 1/4:
    # (0.25*2 + 3 + 4 + 5 + 0.25*6) / 3.5 = 14 / 3.5 = 4.0.
    assert interquartile_mean([1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 70.0]) == pytest.approx(4.0)
    assert interquartile_mean([0.7]) == 0.7  # n = 1: the score itself
    assert interquartile_mean([0.2, 0.6]) == pytest.approx(0.4)  # n = 2: the mean


def test_iqm_batched_rows_equal_one_at_a_time():
    scores = np.random.default_rng(3).random((50, 7))
    batched = interquartile_mean(scores, axis=-1)
    assert batched.shape == (50,)
    assert np.allclose(batched, [interquartile_mean(row) for row in scores])


@pytest.mark.parametrize("bad", [[], [[]], 3.0, [0.1, float("nan")]])
def test_iqm_rejects_bad_scores(bad):
    with pytest.raises(ValueError, match="scores"):
        interquartile_mean(bad)


# -- stratified bootstrap ----------------------------------------------------------------------
def _same_resamples(seed: int, reps: int, samples) -> list[np.ndarray]:
    """The draws the bootstrap makes: per sample in order, integers(0, n, (reps, n))."""
    rng = np.random.default_rng(seed)
    return [sample[rng.integers(0, sample.size, size=(reps, sample.size))] for sample in samples]


def test_single_task_percentile_interval_agrees_with_a_direct_percentile_bootstrap():
    scores = np.random.default_rng(7).beta(4, 3, size=30)
    ours = stratified_bootstrap_interval({"task": scores}, "mean", reps=20_000, seed=1)
    # Reference: the percentile bootstrap (Efron, 1979) computed directly with numpy on the same
    # resamples; with one stratum the stratified bootstrap is the ordinary one.
    (draws,) = _same_resamples(1, 20_000, [scores])
    ref_low, ref_high = np.percentile(draws.mean(axis=1), [2.5, 97.5])
    assert ours.point == pytest.approx(scores.mean())
    assert ours.low == pytest.approx(ref_low, abs=1e-12)
    assert ours.high == pytest.approx(ref_high, abs=1e-12)


def test_stratified_interval_agrees_with_a_direct_computation_on_the_same_resamples():
    rng = np.random.default_rng(8)
    tasks = {"a": rng.beta(4, 3, size=30), "b": np.array([0.9]), "c": rng.beta(2, 5, size=13)}
    ours = stratified_bootstrap_interval(tasks, "iqm", reps=3000, confidence=0.9, seed=4)
    # Reference: Agarwal et al. (2021): resample runs inside each task, pool, take the IQM, then
    # the 5% and 95% percentiles; done here with numpy and scipy.stats.trim_mean(x, 0.25) as the
    # IQM (equal to it since the 44 pooled runs are a multiple of 4). A one-run task is the same
    # in every resample (and drawing from [0, 1) uses no random numbers).
    pooled = np.concatenate(_same_resamples(4, 3000, tasks.values()), axis=1)
    ref_low, ref_high = np.percentile(scipy_stats.trim_mean(pooled, 0.25, axis=1), [5.0, 95.0])
    assert ours.point == pytest.approx(scipy_stats.trim_mean(np.concatenate(list(
        tasks.values())), 0.25))
    assert ours.low == pytest.approx(ref_low, abs=1e-12)
    assert ours.high == pytest.approx(ref_high, abs=1e-12)


def test_bootstrap_resamples_within_each_task():
    # Two tasks of 4 runs, each constant inside itself: a stratified draw always holds 4 zeros and
    # 4 ones, so every replicate mean is exactly 0.5 (a pooled bootstrap would spread widely).
    estimate = stratified_bootstrap_interval({"a": [0.0] * 4, "b": [1.0] * 4}, "mean", reps=300)
    assert estimate.as_tuple() == (0.5, 0.5, 0.5)


def test_bootstrap_is_seeded_and_brackets_the_point():
    scores = {"a": [0.2, 0.4, 0.5, 0.9], "b": [0.1, 0.3, 0.3, 0.8, 0.6]}
    first = stratified_bootstrap_interval(scores, "iqm", reps=400, seed=5)
    assert first == stratified_bootstrap_interval(scores, "iqm", reps=400, seed=5)
    assert first != stratified_bootstrap_interval(scores, "iqm", reps=400, seed=6)
    assert first.low <= first.point <= first.high
    assert first.point == pytest.approx(interquartile_mean(scores["a"] + scores["b"]))


@pytest.mark.parametrize(
    ("kwargs", "word"),
    [({"reps": 0}, "reps"), ({"confidence": 1.0}, "confidence"), ({"aggregate": "max"},
                                                                    "aggregate")],
)
def test_bootstrap_rejects_bad_options(kwargs, word):
    with pytest.raises(ValueError, match=word):
        stratified_bootstrap_interval({"a": [0.5, 0.6]}, **kwargs)


def test_bootstrap_rejects_empty_tasks():
    with pytest.raises(ValueError, match="scores_by_task"):
        stratified_bootstrap_interval({})
    with pytest.raises(ValueError, match="scores_by_task"):
        stratified_bootstrap_interval({"a": []})


# -- probability of improvement ----------------------------------------------------------------
@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(0, 5), min_size=1, max_size=9),
       st.lists(st.integers(0, 5), min_size=1, max_size=9))
def test_probability_of_improvement_is_normalised_mann_whitney_u(x, y):
    # Reference: scipy.stats.mannwhitneyu(x, y).statistic is U of x (ties count 1/2); the
    # probability of improvement of Agarwal et al. (2021) on one task is U / (n m).
    u_statistic = scipy_stats.mannwhitneyu(x, y).statistic
    estimate = probability_of_improvement({"t": x}, {"t": y}, reps=20)
    assert estimate.point == pytest.approx(u_statistic / (len(x) * len(y)))


def test_probability_of_improvement_averages_tasks_by_hand():
    # Task a: x = (1, 2, 3), y = (2, 2, 0): pairs won 1 (1>0) + 1/2 + 1/2 + 1 (2 vs 2, 2, 0)
    # + 3 (3 beats all) = 6 of 9 -> 2/3. Task b: x = (0,), y = (1,): 0. Mean: (2/3 + 0) / 2 = 1/3.
    estimate = probability_of_improvement({"a": [1, 2, 3], "b": [0]}, {"a": [2, 2, 0], "b": [1]},
                                          reps=500, seed=0)
    assert estimate.point == pytest.approx(1 / 3)
    assert 0.0 <= estimate.low <= estimate.point <= estimate.high <= 1.0


def test_probability_of_improvement_of_clearly_better_runs_and_equal_runs():
    better = probability_of_improvement({"a": [0.9, 0.8, 0.85]}, {"a": [0.1, 0.2, 0.3]}, reps=200)
    assert better.as_tuple() == (1.0, 1.0, 1.0)
    same = probability_of_improvement({"a": [0.5, 0.5]}, {"a": [0.5, 0.5, 0.5]}, reps=200)
    assert same.as_tuple() == (0.5, 0.5, 0.5)  # all ties count 1/2


def test_probability_of_improvement_interval_agrees_with_a_direct_computation():
    x = {"b": [0.2, 0.9, 0.4, 0.4], "a": [0.5, 0.7, 0.6], "c": [0.3]}
    y = {"b": [0.1, 0.4, 0.8], "a": [0.6, 0.2, 0.3, 0.1, 0.5], "c": [0.2, 0.6]}
    ours = probability_of_improvement(x, y, reps=800, seed=3)
    # Reference: the definition of Agarwal et al. (2021), S = 1 if x_i > y_j, 1/2 on a tie,
    # averaged over all pairs, then over tasks, counted pair by pair with numpy (no ranks) on
    # the same resamples (tasks in sorted order, X's runs then Y's runs), percentile interval.
    samples = [np.asarray(d[t], dtype=float) for t in sorted(x) for d in (x, y)]
    draws = _same_resamples(3, 800, samples)
    per_task = [((xd[:, :, None] > yd[:, None, :]) + 0.5 * (xd[:, :, None] == yd[:, None, :]))
                .mean(axis=(1, 2)) for xd, yd in zip(draws[0::2], draws[1::2], strict=True)]
    replicates = np.mean(per_task, axis=0)
    ref_low, ref_high = np.percentile(replicates, [2.5, 97.5])
    assert ours.low == pytest.approx(ref_low, abs=1e-12)
    assert ours.high == pytest.approx(ref_high, abs=1e-12)


def test_probability_of_improvement_needs_the_same_tasks():
    with pytest.raises(ValueError, match="y_by_task"):
        probability_of_improvement({"a": [1.0]}, {"b": [1.0]})


# -- Fisher exact test -------------------------------------------------------------------------
def test_fisher_tea_tasting_worked_example():
    # Published worked example: Fisher (1935), "The Design of Experiments", the lady tasting tea.
    # Table ((3, 1), (1, 3)); one-sided p = (C(4,3) C(4,1) + C(4,4) C(4,0)) / C(8,4) = 17/70.
    result = fisher_exact_greater(3, 4, 1, 4)
    assert result.table == ((3, 1), (1, 3))
    assert result.p_value == pytest.approx(17 / 70)
    assert result.odds_ratio == pytest.approx(9.0)  # (3 * 3) / (1 * 1)


def test_fisher_pools_runs_and_matches_scipy():
    result = fisher_exact_greater([30, 34], [50, 50], [20, 25], [50, 50])
    # Reference: scipy.stats.fisher_exact on the pooled table, alternative "greater".
    want = scipy_stats.fisher_exact([[64, 36], [45, 55]], alternative="greater")
    assert result.table == ((64, 36), (45, 55))
    assert result.p_value == pytest.approx(want.pvalue)
    assert result.odds_ratio == pytest.approx(want.statistic)


@pytest.mark.parametrize("args", [(5, 4, 1, 4), (1, 0, 1, 4), (-1, 4, 1, 4), (0.5, 4, 1, 4)])
def test_fisher_rejects_bad_counts(args):
    with pytest.raises(ValueError, match="successes|episodes"):
        fisher_exact_greater(*args)


# -- backward and forward transfer -------------------------------------------------------------
FORGETTING = [[0.8, 0.2, 0.1],
              [0.6, 0.7, 0.3],
              [0.5, 0.6, 0.9]]


def test_backward_transfer_worked_example():
    # Definition: Lopez-Paz and Ranzato (2017), "Gradient Episodic Memory for Continual
    # Learning", BWT = 1/(T-1) sum_{i<T} (R[T-1, i] - R[i, i]). By hand, T = 3:
    # ((0.5 - 0.8) + (0.6 - 0.7)) / 2 = (-0.3 - 0.1) / 2 = -0.2.
    assert backward_transfer(FORGETTING) == pytest.approx(-0.2)


def test_forward_transfer_worked_example():
    # Same paper: FWT = 1/(T-1) sum_{i>=1} (R[i-1, i] - b[i]). With b = (0.1, 0.1, 0.2):
    # ((0.2 - 0.1) + (0.3 - 0.2)) / 2 = 0.1.
    assert forward_transfer(FORGETTING, [0.1, 0.1, 0.2]) == pytest.approx(0.1)


def test_transfer_ignores_unused_cells_and_rejects_missing_ones():
    holes = np.array(FORGETTING)
    holes[0, 2] = np.nan  # never used by BWT
    assert backward_transfer(holes) == pytest.approx(-0.2)
    holes[1, 1] = np.nan  # on the diagonal
    with pytest.raises(ValueError, match="matrix"):
        backward_transfer(holes)
    with pytest.raises(ValueError, match="matrix"):
        backward_transfer([[0.5]])
    with pytest.raises(ValueError, match="matrix"):
        backward_transfer([[0.5, 0.2, 0.1], [0.3, 0.4, 0.2]])
    with pytest.raises(ValueError, match="baseline"):
        forward_transfer(FORGETTING, [0.1, 0.1])


# -- data budget -------------------------------------------------------------------------------
def test_budget_table_pools_and_matches_the_closed_form_wilson():
    points = budget_table([(100, 9, 10), (50, 3, 10), (50, 5, 10)])
    assert [(p.budget, p.successes, p.episodes) for p in points] == [(50, 8, 20), (100, 9, 10)]
    for point in points:
        # Reference: the closed-form Wilson (1927) score interval as written by Agresti and
        # Coull (1998), computed with the standard library in tests/test_stats.py.
        want = wilson_closed_form(point.successes, point.episodes, 0.95)
        assert (point.low, point.high) == pytest.approx(want)


def test_smallest_clearing_budget_by_hand():
    # Wilson (1927) 95% lower bounds: 8/10 -> 0.4902 (does not clear 0.5); 9/10 -> 0.5958
    # (clears); 60/100 -> 0.5020 (clears, but 100 episodes of budget come later).
    rows = [(25, 8, 10), (50, 9, 10), (100, 60, 100)]
    assert smallest_clearing_budget(rows, level=0.5) == 50
    assert smallest_clearing_budget(rows, level=0.6) is None
    assert smallest_clearing_budget([(25, 8, 10), (100, 60, 100)], level=0.5) == 100


@pytest.mark.parametrize(
    ("rows", "level", "word"),
    [([], 0.5, "rows"), ([(10, 11, 10)], 0.5, "rows"), ([(10, 1, 2)], 1.5, "level"),
     ([(10.5, 1, 2)], 0.5, "rows")],
)
def test_budget_rejects_bad_input(rows, level, word):
    with pytest.raises(ValueError, match=word):
        smallest_clearing_budget(rows, level)


# -- plateau -----------------------------------------------------------------------------------
def test_steps_to_plateau_by_hand():
    # 10 points: the last 20% are the last 2 (0.8, 0.8) -> plateau 0.8; 95% of it is 0.76;
    # the first value >= 0.76 is 0.8 at step 600.
    steps = np.arange(100, 1001, 100)
    values = [0.1, 0.3, 0.5, 0.6, 0.7, 0.8, 0.8, 0.8, 0.8, 0.8]
    reach = steps_to_plateau(steps, values)
    assert (reach.plateau, reach.step) == (pytest.approx(0.8), 600)
    # 7 points: ceil(0.2 * 7) = 2 last points (0.6, 0.4) -> plateau 0.5, threshold 0.475 -> 300.
    reach = steps_to_plateau([1, 2, 3, 4, 5, 6, 7], [0.0, 0.2, 0.5, 0.9, 0.3, 0.6, 0.4])
    assert (reach.plateau, reach.step) == (pytest.approx(0.5), 3)


@pytest.mark.parametrize(
    ("steps", "values"), [([], []), ([2, 1], [0.1, 0.2]), ([1, 2], [0.1]), ([1.5], [0.1])]
)
def test_steps_to_plateau_rejects_bad_curves(steps, values):
    with pytest.raises(ValueError, match="steps"):
        steps_to_plateau(steps, values)
