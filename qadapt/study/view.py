"""What a report section needs to know about a study, and how it writes numbers.

Holds:
    Setting -- the training setting a strategy's headline runs share (budget, share, ...).
    StudyView -- the rows of a study with its options and the headline choices made from them.
    percent -- a rate as "61.0%".
    interval_text -- a rate with its interval as "61.0% [52.3, 68.9]".
    p_value_text -- a p-value with three significant digits.

The headline setting: the new-episode budget most runs use (ties: the smallest), and per
strategy the (share, indicator, steps) most of its runs at that budget use (ties: the one its
runs use most at all budgets, then the smallest); a strategy with no run at that budget keeps
its own most common setting. The main tables compare headline runs
only, so budget and share sweeps do not blur them; the sweep sections show the rest.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

from qadapt.study.results import ResultRow

HEADLINE_STRATEGY = "warm"


def percent(rate: float) -> str:
    return f"{100.0 * rate:.1f}%"


def interval_text(point: float, low: float, high: float) -> str:
    return f"{100.0 * point:.1f}% [{100.0 * low:.1f}, {100.0 * high:.1f}]"


def p_value_text(p_value: float) -> str:
    return f"{p_value:.3g}"


@dataclass(frozen=True, order=True)
class Setting:
    """The settings a group of runs shares. Example: ``Setting(100, 0.5, False, 3000)``."""

    new_episodes: int
    share: float
    indicator: bool
    steps: int

    @classmethod
    def of(cls, row: ResultRow) -> Setting:
        return cls(row.new_episodes, row.share, row.indicator, row.steps)


def _most_common(values: list, tie_break: list | None = None):
    """The most frequent value; ties go to the more frequent in ``tie_break``, then the least."""
    counts, second = Counter(values), Counter(tie_break or [])
    best = max((counts[value], second[value]) for value in counts)
    return min(value for value in counts if (counts[value], second[value]) == best)


@dataclass
class StudyView:
    """A study's rows and report options, with the headline choices derived from the rows.

    Example:
        >>> view = StudyView(rows=[], study_dir=Path("."), level=0.5)
        >>> view.strategies
        []
    """

    rows: list[ResultRow]
    study_dir: Path
    level: float
    base_variation: str | None = None
    reps: int = 2000
    seed: int = 0
    settings: dict[str, Setting] = field(init=False)

    def __post_init__(self) -> None:
        standalone = self.standalone
        self.settings = {}
        if not standalone:
            return
        budget = _most_common([row.new_episodes for row in standalone])
        for strategy in self.strategies:
            own = [Setting.of(row) for row in standalone if row.strategy == strategy]
            if not own:
                continue
            at_budget = [setting for setting in own if setting.new_episodes == budget]
            if not at_budget:
                self.settings[strategy] = _most_common(own)
                continue
            # Ties at the budget go to the (share, indicator, steps) most used at all budgets,
            # so the budget sweep and the headline runs line up.
            rest = [Setting(budget, s.share, s.indicator, s.steps) for s in own]
            self.settings[strategy] = _most_common(at_budget, rest)

    @property
    def standalone(self) -> list[ResultRow]:
        """Rows that are neither a step of a chain nor a retrain on rounds' data."""
        return [row for row in self.rows
                if row.chain_step is None and "trained_on_rounds" not in row.extra]

    @property
    def chained(self) -> list[ResultRow]:
        """Steps of the study's chain of variations (not its rounds)."""
        return [row for row in self.rows
                if row.chain_step is not None and "round" not in row.extra]

    @property
    def rounds(self) -> list[ResultRow]:
        """Steps of the study's rounds of adaptation on one variation (``round`` 1, 2, ...)."""
        return [row for row in self.rows if "round" in row.extra]

    @property
    def rounds_retrains(self) -> list[ResultRow]:
        """One-run retrains on the data rounds collected (``trained_on_rounds``: how many
        rounds' data; ``rounds_strategy``: whose rounds)."""
        return [row for row in self.rows if "trained_on_rounds" in row.extra]

    @property
    def strategies(self) -> list[str]:
        """Strategies in report order: the headline strategy first, then alphabetical."""
        names = sorted({row.strategy for row in self.rows})
        if HEADLINE_STRATEGY in names:
            names.remove(HEADLINE_STRATEGY)
            names.insert(0, HEADLINE_STRATEGY)
        return names

    @property
    def headline(self) -> str | None:
        """The strategy the others are measured against: "warm" if present, else the first."""
        strategies = [name for name in self.strategies if name in self.settings]
        return strategies[0] if strategies else None

    def headline_rows(self, strategy: str) -> list[ResultRow]:
        """Standalone runs of ``strategy`` at its headline setting with a trained-for score."""
        setting = self.settings.get(strategy)
        return [row for row in self.standalone if row.strategy == strategy
                and Setting.of(row) == setting and row.trained_evaluation() is not None]

    def variations(self, rows: list[ResultRow]) -> list[str]:
        """Variations trained for in ``rows``, the base variation first, then alphabetical."""
        names = sorted({row.variation for row in rows})
        if self.base_variation in names:
            names.remove(self.base_variation)
            names.insert(0, self.base_variation)
        return names

    def resolve(self, path: str) -> Path:
        """A path from a row: absolute as given, relative to the study directory otherwise."""
        candidate = Path(path)
        return candidate if candidate.is_absolute() else self.study_dir / candidate
