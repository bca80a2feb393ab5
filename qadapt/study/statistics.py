"""Statistics for comparing fine-tuning strategies across seeds, variations and data budgets.

Holds:
    Estimate -- a point value with the low and high ends of its confidence interval.
    interquartile_mean -- mean of the middle 50% of scores, fractional weights at the edges.
    stratified_bootstrap_interval -- percentile interval of an aggregate, runs resampled per task.
    probability_of_improvement -- P(X > Y) of two strategies averaged over tasks, with interval.
    FisherResult -- table, odds ratio and p-value of a one-sided Fisher exact test.
    fisher_exact_greater -- Fisher exact test on pooled success counts, alternative "greater".
    backward_transfer -- BWT of a forgetting matrix (Lopez-Paz and Ranzato, 2017).
    forward_transfer -- FWT of a forgetting matrix against a baseline vector (same source).
    BudgetPoint -- pooled success and Wilson interval at one data budget.
    budget_table -- pool (budget, successes, episodes) rows per budget, with Wilson intervals.
    smallest_clearing_budget -- the smallest budget whose interval's low end clears a level.
    PlateauReach -- a learning curve's plateau and the first step that reaches a share of it.
    steps_to_plateau -- compute a PlateauReach from a curve.

Aggregates and intervals follow Agarwal et al. (2021), "Deep Reinforcement Learning at the Edge of
the Statistical Precipice" (NeurIPS): scores are per-run success rates, tasks are strata, and the
bootstrap resamples runs with replacement inside each task independently.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.stats import fisher_exact, rankdata

from qadapt.stats import percentile_bootstrap, wilson_interval

ScoresByTask = Mapping[str, Sequence[float] | np.ndarray] | Sequence[Sequence[float] | np.ndarray]
Aggregate = str | Callable[[np.ndarray], np.ndarray]

# Resampled values held at once by a bootstrap (keeps memory near 64 MiB for big studies).
_BOOTSTRAP_CHUNK_VALUES = 1 << 23


@dataclass(frozen=True)
class Estimate:
    """A point value with a confidence interval ``[low, high]``.

    Example:
        >>> Estimate(0.5, 0.25, 0.75).as_tuple()
        (0.5, 0.25, 0.75)
    """

    point: float
    low: float
    high: float

    def as_tuple(self) -> tuple[float, float, float]:
        return self.point, self.low, self.high


# -- checks ------------------------------------------------------------------------------------
def _check_confidence(confidence: float) -> None:
    if not (isinstance(confidence, float | int) and 0.0 < confidence < 1.0):
        raise ValueError(f"confidence: got {confidence!r}, expected a number in (0, 1)")


def _check_reps(reps: int) -> None:
    if isinstance(reps, bool) or not isinstance(reps, int) or reps < 1:
        raise ValueError(f"reps: got {reps!r}, expected a positive integer")


def _as_scores(values, name: str) -> np.ndarray:
    array = np.asarray(values, dtype=float)
    if array.ndim != 1 or array.size == 0:
        raise ValueError(f"{name}: got shape {array.shape}, expected a non-empty 1-D list of "
                         "scores")
    if not np.all(np.isfinite(array)):
        raise ValueError(f"{name}: got non-finite scores {array.tolist()}, expected finite numbers")
    return array


def _tasks(scores_by_task: ScoresByTask, name: str) -> dict[str, np.ndarray]:
    if isinstance(scores_by_task, Mapping):
        items = list(scores_by_task.items())
    elif isinstance(scores_by_task, Sequence) and not isinstance(scores_by_task, str):
        items = [(str(index), values) for index, values in enumerate(scores_by_task)]
    else:
        raise ValueError(f"{name}: got {type(scores_by_task).__name__}, expected a mapping "
                         "task -> scores or a list of score lists")
    if not items:
        raise ValueError(f"{name}: got no tasks, expected at least one")
    return {str(task): _as_scores(values, f"{name}[{task!r}]") for task, values in items}


# -- interquartile mean ------------------------------------------------------------------------
def _interquartile_weights(n: int) -> np.ndarray:
    """Weight of each order statistic: n times its overlap with the quantile range [1/4, 3/4].

    Computed in units of 1/(4n) so the weights are exact integers.
    """
    k = np.arange(1, n + 1)
    overlap = np.minimum(4 * k, 3 * n) - np.maximum(4 * (k - 1), n)
    return np.clip(overlap, 0, None).astype(float)


def interquartile_mean(scores, axis: int = -1) -> float | np.ndarray:
    """Interquartile mean: the mean of the empirical quantile function over [0.25, 0.75].

    The sorted scores x_(1) <= ... <= x_(n) each cover a 1/n slice of the quantile range; each
    gets a weight equal to the part of its slice inside [0.25, 0.75], so when n is not a
    multiple of 4 the two boundary scores count fractionally (the interpolated 25% trimmed
    mean). For n divisible by 4 this equals ``scipy.stats.trim_mean(x, 0.25)``, which instead
    drops floor(n/4) scores from each end for every n. Small n is defined for every n >= 1:
    n = 1 gives the score itself, n = 2 the mean of both, n = 3 the weights (1/4, 1, 1/4) / 1.5
    and n = 5 the weights (0, 3/4, 1, 3/4, 0) / 2.5 on the sorted scores.

    ``scores``: array of any shape with at least one entry along ``axis``; returns a float for
    1-D input, else an array with ``axis`` removed (used by the bootstrap, shape (reps, n)).

    Example:
        >>> interquartile_mean([1.0, 2.0, 3.0, 4.0, 100.0])  # (0.75*2 + 3 + 0.75*4) / 2.5
        3.0
    """
    values = np.asarray(scores, dtype=float)
    if values.ndim == 0:
        raise ValueError(f"scores: got a scalar {values.item()!r}, expected an array of scores")
    n = values.shape[axis]
    if n == 0:
        raise ValueError("scores: got no scores along the axis, expected at least one")
    if not np.all(np.isfinite(values)):
        raise ValueError("scores: got non-finite values, expected finite numbers")
    ordered = np.moveaxis(np.sort(values, axis=axis), axis, -1)
    weights = _interquartile_weights(n)
    result = ordered @ weights / weights.sum()
    return float(result) if np.ndim(result) == 0 else result


def _aggregate_function(aggregate: Aggregate) -> Callable[[np.ndarray], np.ndarray]:
    if callable(aggregate):
        return aggregate
    if aggregate == "iqm":
        return lambda values: interquartile_mean(values, axis=-1)
    if aggregate == "mean":
        return lambda values: np.mean(values, axis=-1)
    raise ValueError(f"aggregate: got {aggregate!r}, expected 'iqm', 'mean' or a callable that "
                     "reduces the last axis")


# -- stratified bootstrap ----------------------------------------------------------------------
def stratified_bootstrap_interval(
    scores_by_task: ScoresByTask,
    aggregate: Aggregate = "iqm",
    reps: int = 2000,
    confidence: float = 0.95,
    seed: int = 0,
) -> Estimate:
    """Aggregate of all runs' scores with a stratified-bootstrap percentile interval.

    Each bootstrap replicate draws, for every task independently, as many runs as that task has,
    with replacement from that task's runs; the aggregate is taken over the pooled draw (as in
    the paper, where every task has the same number of runs; with unequal counts a task weighs
    in proportion to its runs). The interval is the (1-confidence)/2 and (1+confidence)/2
    percentiles of ``reps`` replicates, computed by ``scipy.stats.bootstrap`` (one sample per
    task, ``paired=False``, ``method="percentile"``). Seeded: the same inputs and seed give the
    same interval.

    ``scores_by_task``: task -> 1-D scores (or a list of score lists). ``aggregate``: "iqm",
    "mean", or a callable reducing the last axis of a (reps, runs) array.

    Example:
        >>> scores = {"finger_offset": [0.4, 0.5, 0.6, 0.7], "drive_lag": [0.2, 0.3, 0.3, 0.4]}
        >>> estimate = stratified_bootstrap_interval(scores, "mean", reps=500, seed=0)
        >>> round(estimate.point, 3), estimate.low <= estimate.point <= estimate.high
        (0.425, True)
    """
    _check_reps(reps)
    _check_confidence(confidence)
    tasks = list(_tasks(scores_by_task, "scores_by_task").values())
    reduce = _aggregate_function(aggregate)
    point = float(np.asarray(reduce(np.concatenate(tasks)[None, :])).reshape(-1)[0])
    low, high = percentile_bootstrap(
        tasks, lambda *draws: reduce(np.concatenate(draws, axis=1)), reps, confidence, seed,
        _BOOTSTRAP_CHUNK_VALUES,
    )
    return Estimate(point, low, high)


# -- probability of improvement ----------------------------------------------------------------
def _improvement_probability(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """P(X > Y) + P(X = Y)/2 along the last axis: the Mann-Whitney U of x over n*m.

    x: (..., n), y: (..., m) -> (...). Ranks with ties averaged give U = R_x - n(n+1)/2.
    """
    n, m = x.shape[-1], y.shape[-1]
    ranks = rankdata(np.concatenate([x, y], axis=-1), method="average", axis=-1)
    u_statistic = ranks[..., :n].sum(axis=-1) - n * (n + 1) / 2.0
    return u_statistic / (n * m)


def probability_of_improvement(
    x_by_task: ScoresByTask,
    y_by_task: ScoresByTask,
    reps: int = 2000,
    confidence: float = 0.95,
    seed: int = 0,
) -> Estimate:
    """Probability that a run of strategy X beats a run of strategy Y, averaged over tasks.

    Per task, P(X > Y) = (1 / (n m)) sum_i sum_j S(x_i, y_j) with S = 1 if x_i > y_j, 1/2 on a
    tie and 0 otherwise, i.e. the Mann-Whitney U statistic of X normalised by n m; the point is
    the mean over tasks. The interval comes from a stratified bootstrap that resamples X's runs
    and Y's runs independently within each task (Agarwal et al., 2021), computed by
    ``scipy.stats.bootstrap`` (percentile method, one sample per task and strategy).

    ``x_by_task``, ``y_by_task``: the same tasks, each with 1-D scores (the run counts may
    differ between X and Y).

    Example:
        >>> estimate = probability_of_improvement({"a": [1.0, 2.0, 3.0]}, {"a": [2.0, 2.0, 0.0]},
        ...                                       reps=200)
        >>> round(estimate.point, 4)  # pairs won 1 + 2 + 3 (ties 1/2) out of 9
        0.6667
    """
    _check_reps(reps)
    _check_confidence(confidence)
    xs, ys = _tasks(x_by_task, "x_by_task"), _tasks(y_by_task, "y_by_task")
    if set(xs) != set(ys):
        raise ValueError(f"y_by_task: got tasks {sorted(ys)}, expected the tasks of x_by_task "
                         f"{sorted(xs)}")
    names = sorted(xs)
    point = float(np.mean([_improvement_probability(xs[t], ys[t]) for t in names]))

    def replicate(*draws: np.ndarray) -> np.ndarray:  # draws: x, y of the first task, ...
        per_task = np.zeros(draws[0].shape[0])
        for x_draw, y_draw in zip(draws[0::2], draws[1::2], strict=True):
            per_task += _improvement_probability(x_draw, y_draw)
        return per_task / len(names)

    samples = [sample for task in names for sample in (xs[task], ys[task])]
    low, high = percentile_bootstrap(samples, replicate, reps, confidence, seed,
                                     _BOOTSTRAP_CHUNK_VALUES)
    return Estimate(point, low, high)


# -- Fisher exact test -------------------------------------------------------------------------
@dataclass(frozen=True)
class FisherResult:
    """One-sided Fisher exact test of "A's success odds exceed B's" on a 2x2 table.

    ``table`` is ((successes_a, failures_a), (successes_b, failures_b)); ``odds_ratio`` is the
    sample odds ratio (inf when a failure count of A or a success count of B is 0).

    Example:
        >>> FisherResult(((3, 1), (1, 3)), 9.0, 0.2429).odds_ratio
        9.0
    """

    table: tuple[tuple[int, int], tuple[int, int]]
    odds_ratio: float
    p_value: float


def _pooled_count(value, name: str) -> int:
    array = np.atleast_1d(np.asarray(value))
    if array.ndim != 1 or array.size == 0 or not np.issubdtype(array.dtype, np.integer) or (
        array.dtype == np.bool_
    ):
        raise ValueError(f"{name}: got {value!r}, expected a count or a list of counts (integers)")
    if np.any(array < 0):
        raise ValueError(f"{name}: got {value!r}, expected non-negative counts")
    return int(array.sum())


def fisher_exact_greater(successes_a, episodes_a, successes_b, episodes_b) -> FisherResult:
    """Fisher exact test (scipy.stats.fisher_exact, alternative "greater") on pooled counts.

    Each argument is a count or a list of counts (one per run); lists are summed first, so the
    test treats all episodes of a strategy as independent draws of one success rate.

    Example:
        >>> result = fisher_exact_greater(3, 4, 1, 4)  # Fisher's tea-tasting table
        >>> result.table, round(result.p_value, 4)
        (((3, 1), (1, 3)), 0.2429)
    """
    wins_a, total_a = _pooled_count(successes_a, "successes_a"), _pooled_count(episodes_a,
                                                                               "episodes_a")
    wins_b, total_b = _pooled_count(successes_b, "successes_b"), _pooled_count(episodes_b,
                                                                               "episodes_b")
    for name, wins, total in (("a", wins_a, total_a), ("b", wins_b, total_b)):
        if total < 1 or wins > total:
            raise ValueError(f"episodes_{name}: got {total} episodes for {wins} successes, "
                             "expected at least one episode and no more successes than episodes")
    table = ((wins_a, total_a - wins_a), (wins_b, total_b - wins_b))
    odds_ratio, p_value = fisher_exact(table, alternative="greater")
    return FisherResult(table, float(odds_ratio), float(p_value))


# -- transfer in a chain -----------------------------------------------------------------------
def _forgetting_matrix(matrix) -> np.ndarray:
    values = np.asarray(matrix, dtype=float)
    if values.ndim != 2 or values.shape[0] != values.shape[1] or values.shape[0] < 2:
        raise ValueError(f"matrix: got shape {values.shape}, expected a square T x T matrix "
                         "with T >= 2 (rows: after step i, columns: task j)")
    return values


def backward_transfer(matrix) -> float:
    """Backward transfer (Lopez-Paz and Ranzato, 2017, "Gradient Episodic Memory").

    ``matrix``: (T, T), R[i, j] = success on task j after learning step i (chain order).
    BWT = 1/(T-1) * sum_{i < T-1} (R[T-1, i] - R[i, i]); negative values mean forgetting. Only
    the last row and the diagonal are used; they must be finite (other cells may be NaN).

    Example:
        >>> backward_transfer([[0.8, 0.2], [0.5, 0.9]])  # (0.5 - 0.8) / 1
        -0.3
    """
    values = _forgetting_matrix(matrix)
    t = values.shape[0]
    final, learned = values[t - 1, : t - 1], np.diag(values)[: t - 1]
    if not (np.all(np.isfinite(final)) and np.all(np.isfinite(learned))):
        raise ValueError("matrix: the last row and the diagonal must be finite for backward "
                         f"transfer, got {values.tolist()}")
    return round(float(np.mean(final - learned)), 12)


def forward_transfer(matrix, baseline) -> float:
    """Forward transfer (Lopez-Paz and Ranzato, 2017) against a baseline success per task.

    ``matrix``: (T, T) as in ``backward_transfer``; ``baseline``: (T,), b[j] = success on task j
    of the starting model before any chain step. FWT = 1/(T-1) * sum_{i >= 1} (R[i-1, i] - b[i]):
    how much learning the earlier tasks helps a task before it is trained on.

    Example:
        >>> forward_transfer([[0.8, 0.3], [0.5, 0.9]], [0.1, 0.1])  # (0.3 - 0.1) / 1
        0.2
    """
    values = _forgetting_matrix(matrix)
    t = values.shape[0]
    base = np.asarray(baseline, dtype=float)
    if base.shape != (t,) or not np.all(np.isfinite(base)):
        raise ValueError(f"baseline: got {np.asarray(baseline).tolist()}, expected {t} finite "
                         "numbers (one per task)")
    before = values[np.arange(t - 1), np.arange(1, t)]
    if not np.all(np.isfinite(before)):
        raise ValueError("matrix: the cells just above the diagonal must be finite for forward "
                         f"transfer, got {values.tolist()}")
    return round(float(np.mean(before - base[1:])), 12)


# -- data budget -------------------------------------------------------------------------------
@dataclass(frozen=True)
class BudgetPoint:
    """Pooled success at one data budget, with its Wilson interval.

    Example:
        >>> BudgetPoint(100, 9, 10, 0.5958, 0.9821).rate
        0.9
    """

    budget: int
    successes: int
    episodes: int
    low: float
    high: float

    @property
    def rate(self) -> float:
        return self.successes / self.episodes


def budget_table(rows: Iterable[Sequence[int]], confidence: float = 0.95) -> list[BudgetPoint]:
    """Pool ``(budget, successes, episodes)`` rows per budget; Wilson interval of each pool.

    Runs (seeds, variations) at one budget are pooled into one binomial count: the interval then
    treats every episode as an independent draw of one success rate. Sorted by budget.

    Example:
        >>> [(p.budget, p.successes, p.episodes) for p in budget_table([(50, 3, 10), (50, 5, 10)])]
        [(50, 8, 20)]
    """
    _check_confidence(confidence)
    table = np.asarray(list(rows))
    if table.ndim != 2 or table.shape[1] != 3 or table.shape[0] == 0:
        raise ValueError(f"rows: got shape {table.shape}, expected a non-empty list of "
                         "(budget, successes, episodes)")
    if not np.issubdtype(table.dtype, np.integer):
        raise ValueError(f"rows: got {table.dtype} values, expected integers")
    budgets, successes, episodes = table.T
    if np.any(budgets < 0) or np.any(episodes < 1) or np.any(successes < 0) or np.any(
        successes > episodes
    ):
        raise ValueError("rows: expected budget >= 0, episodes >= 1 and 0 <= successes <= "
                         f"episodes, got {table.tolist()}")
    unique, inverse = np.unique(budgets, return_inverse=True)
    pooled_successes = np.bincount(inverse, weights=successes).astype(int)
    pooled_episodes = np.bincount(inverse, weights=episodes).astype(int)
    points = []
    for budget, wins, total in zip(unique, pooled_successes, pooled_episodes, strict=True):
        low, high = wilson_interval(int(wins), int(total), confidence)
        points.append(BudgetPoint(int(budget), int(wins), int(total), low, high))
    return points


def smallest_clearing_budget(
    rows: Iterable[Sequence[int]], level: float, confidence: float = 0.95
) -> int | None:
    """The smallest budget whose pooled Wilson interval lies wholly above ``level``.

    "Clears" means the interval's low end is strictly greater than ``level``. Budgets are
    checked independently (a larger budget that falls back below does not undo the answer).
    Returns None if no budget clears.

    Example:
        >>> smallest_clearing_budget([(50, 8, 10), (100, 9, 10)], level=0.5)  # lows 0.49, 0.60
        100
    """
    if not (isinstance(level, float | int) and 0.0 <= level < 1.0):
        raise ValueError(f"level: got {level!r}, expected a success level in [0, 1)")
    for point in budget_table(rows, confidence):
        if point.low > level:
            return point.budget
    return None


# -- learning-curve plateau --------------------------------------------------------------------
@dataclass(frozen=True)
class PlateauReach:
    """A curve's plateau (mean of its last ``tail`` share of points) and when it gets near it.

    ``step`` is the first step whose value is at least ``share`` times the plateau.

    Example:
        >>> PlateauReach(plateau=0.8, step=600, share=0.95).threshold
        0.76
    """

    plateau: float
    step: int
    share: float

    @property
    def threshold(self) -> float:
        return round(self.share * self.plateau, 12)


def steps_to_plateau(steps, values, share: float = 0.95, tail: float = 0.2) -> PlateauReach:
    """First step at which a learning curve reaches ``share`` of its own final plateau.

    Plateau = mean of the last ``tail`` share of the points (ceil(tail * n), at least one).
    ``steps``: (n,) strictly increasing gradient steps; ``values``: (n,) success rates.

    Example:
        >>> reach = steps_to_plateau([100, 200, 300, 400, 500], [0.1, 0.5, 0.8, 0.7, 0.9])
        >>> reach.plateau, reach.step  # plateau 0.9 (last point), 0.95 * 0.9 = 0.855
        (0.9, 500)
    """
    step_array = np.asarray(steps)
    value_array = np.asarray(values, dtype=float)
    if step_array.ndim != 1 or step_array.size == 0 or value_array.shape != step_array.shape:
        raise ValueError(f"steps, values: got shapes {step_array.shape} and {value_array.shape}, "
                         "expected two non-empty 1-D arrays of the same length")
    if not np.issubdtype(step_array.dtype, np.integer) or np.any(np.diff(step_array) <= 0):
        raise ValueError(f"steps: got {step_array.tolist()}, expected strictly increasing integers")
    if not np.all(np.isfinite(value_array)):
        raise ValueError(f"values: got {value_array.tolist()}, expected finite numbers")
    if not 0.0 < share <= 1.0:
        raise ValueError(f"share: got {share!r}, expected a number in (0, 1]")
    if not 0.0 < tail <= 1.0:
        raise ValueError(f"tail: got {tail!r}, expected a number in (0, 1]")
    count = max(1, math.ceil(round(tail * value_array.size, 9)))
    plateau = float(np.mean(value_array[-count:]))
    reached = np.flatnonzero(value_array >= share * plateau - 1e-12)
    return PlateauReach(plateau, int(step_array[reached[0]]), share)
