"""Report sections that compare strategies' final success: tables, improvement, budget, share.

Holds:
    overview_section -- what the study holds and which runs the headline tables use.
    success_section -- success per variation x strategy (IQM across seeds) and per run (Wilson).
    improvement_section -- probability of improvement for each pair; Fisher tests for the headline.
    budget_section -- success against new episodes, and the smallest budget clearing the level.
    share_section -- success against the new-data share (only when several shares were run).

Each returns a Section, or None when the study has nothing for it.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np

from qadapt.stats import wilson_interval
from qadapt.study.document import Figure, Paragraph, Section, Table
from qadapt.study.figures import Line, Panel, line_panels
from qadapt.study.statistics import (
    budget_table,
    fisher_exact_greater,
    probability_of_improvement,
    smallest_clearing_budget,
    stratified_bootstrap_interval,
)
from qadapt.study.view import Setting, StudyView, interval_text, p_value_text, percent


def _scores_by_variation(view: StudyView, strategy: str) -> dict[str, list[float]]:
    scores: dict[str, list[float]] = {}
    for row in view.headline_rows(strategy):
        scores.setdefault(row.variation, []).append(row.trained_evaluation().rate)
    return scores


def _run_kinds(view: StudyView) -> str:
    """How the rows split: standalone runs, chain steps, rounds, retrains on rounds' data."""
    kinds = [(len(view.standalone), "standalone"), (len(view.chained), "chain steps"),
             (len(view.rounds), "rounds"), (len(view.rounds_retrains),
                                            "one-run retrains on rounds' data")]
    named = [f"{count} {name}" for count, name in kinds if count or name == "standalone"]
    return ", ".join(named[:-1]) + " and " + named[-1] if len(named) > 1 else named[0]


def overview_section(view: StudyView) -> Section:
    variations = sorted({row.variation for row in view.rows})
    seeds = sorted({row.seed for row in view.rows})
    blocks = [Paragraph(
        f"{len(view.rows)} runs: {_run_kinds(view)}; strategies "
        f"{', '.join(view.strategies)}; variations {', '.join(variations)}; "
        f"seeds {', '.join(str(s) for s in seeds)}. Success level for the budget answer: "
        f"{percent(view.level)}. Intervals are 95%: Wilson for one run's counts, percentile "
        f"stratified bootstrap ({view.reps} replicates, seed {view.seed}) across runs, "
        "resampling runs within each variation."
    )]
    if view.settings:
        blocks.append(Paragraph(
            "Headline runs: the new-episode budget most runs use and, per strategy, its most "
            "common share, indicator and step count at that budget. The success and improvement "
            "tables use these runs only."
        ))
        blocks.append(Table(
            ("strategy", "new episodes", "share", "indicator", "steps", "runs"),
            tuple((name, str(s.new_episodes), f"{s.share:g}", "yes" if s.indicator else "no",
                   str(s.steps), str(len(view.headline_rows(name))))
                  for name, s in view.settings.items()),
            caption="Headline setting per strategy",
        ))
    return Section("Study", blocks)


def success_section(view: StudyView) -> Section | None:
    if not view.settings:
        return None
    strategies = list(view.settings)
    headline_rows = [row for name in strategies for row in view.headline_rows(name)]
    variations = view.variations(headline_rows)
    scores = {name: _scores_by_variation(view, name) for name in strategies}
    table_rows = []
    for variation in variations:
        cells = [variation]
        for name in strategies:
            values = scores[name].get(variation)
            if not values:
                cells.append("-")
                continue
            estimate = stratified_bootstrap_interval({variation: values}, "iqm", view.reps,
                                                     seed=view.seed)
            cells.append(f"{interval_text(*estimate.as_tuple())} n={len(values)}")
        table_rows.append(tuple(cells))
    for aggregate in ("iqm", "mean"):
        cells = [f"all variations ({aggregate.upper() if aggregate == 'iqm' else aggregate})"]
        for name in strategies:
            if not scores[name]:
                cells.append("-")
                continue
            estimate = stratified_bootstrap_interval(scores[name], aggregate, view.reps,
                                                     seed=view.seed)
            runs = sum(len(values) for values in scores[name].values())
            cells.append(f"{interval_text(*estimate.as_tuple())} n={runs}")
        table_rows.append(tuple(cells))
    blocks = [
        Paragraph("Across seeds: interquartile mean (IQM) of the per-run success rates on the "
                  "variation each run was trained for, with a 95% stratified-bootstrap interval "
                  "(runs resampled within each variation); n is the number of runs."),
        Table(("variation",) + tuple(strategies), tuple(table_rows),
              caption="Success per variation and strategy (headline runs)"),
    ]
    blocks.append(_per_run_table(view))
    return Section("Success per variation and strategy", blocks)


def _per_run_table(view: StudyView) -> Table:
    base = view.base_variation
    header = ("run", "variation", "strategy", "seed", "new episodes", "share", "successes",
              "success [95% Wilson]")
    if base is not None:
        header += (f"on {base} [95% Wilson]",)
    rows = []
    for row in sorted(view.standalone, key=lambda r: (r.variation, r.strategy, r.seed, r.run_id)):
        trained = row.trained_evaluation()
        cells = (row.run_id, row.variation, row.strategy, str(row.seed), str(row.new_episodes),
                 f"{row.share:g}")
        if trained is None:
            cells += ("-", "not evaluated on its variation")
        else:
            low, high = wilson_interval(trained.successes, trained.episodes)
            cells += (f"{trained.successes}/{trained.episodes}",
                      interval_text(trained.rate, low, high))
        if base is not None:
            on_base = row.evaluation(base)
            if on_base is None:
                cells += ("-",)
            else:
                low, high = wilson_interval(on_base.successes, on_base.episodes)
                cells += (interval_text(on_base.rate, low, high),)
        rows.append(cells)
    return Table(header, tuple(rows), caption="Every standalone run")


def improvement_section(view: StudyView) -> Section | None:
    strategies = list(view.settings)
    if len(strategies) < 2:
        return None
    scores = {name: _scores_by_variation(view, name) for name in strategies}
    pair_rows = []
    for first, second in combinations(strategies, 2):
        shared = sorted(set(scores[first]) & set(scores[second]))
        if not shared:
            pair_rows.append((f"P({first} > {second})", "-", "no shared variation"))
            continue
        estimate = probability_of_improvement({v: scores[first][v] for v in shared},
                                              {v: scores[second][v] for v in shared},
                                              view.reps, seed=view.seed)
        pair_rows.append((f"P({first} > {second})", f"{estimate.point:.3f} "
                          f"[{estimate.low:.3f}, {estimate.high:.3f}]", ", ".join(shared)))
    blocks = [
        Paragraph("Probability of improvement: the chance that a run of the first strategy "
                  "scores higher than a run of the second on the same variation (ties count "
                  "one half; the Mann-Whitney U statistic over n m), averaged over the shared "
                  "variations, with a 95% stratified-bootstrap interval. 0.5 means no "
                  "difference."),
        Table(("pair", "probability [95%]", "variations"), tuple(pair_rows),
              caption="Probability of improvement (headline runs)"),
    ]
    headline = view.headline
    fisher_rows = []
    for other in strategies:
        if other == headline:
            continue
        shared = set(scores[headline]) & set(scores[other])
        if not shared:
            continue
        mine = [r.trained_evaluation() for r in view.headline_rows(headline)
                if r.variation in shared]
        theirs = [r.trained_evaluation() for r in view.headline_rows(other)
                  if r.variation in shared]
        result = fisher_exact_greater([e.successes for e in mine], [e.episodes for e in mine],
                                      [e.successes for e in theirs], [e.episodes for e in theirs])
        (wins_a, fails_a), (wins_b, fails_b) = result.table
        fisher_rows.append((f"{headline} vs {other}", f"{wins_a}/{wins_a + fails_a}",
                            f"{wins_b}/{wins_b + fails_b}", f"{result.odds_ratio:.3g}",
                            p_value_text(result.p_value)))
    if fisher_rows:
        blocks.append(Paragraph(
            f"Fisher exact test on the successes pooled over seeds and shared variations, "
            f"one-sided: is {headline}'s success odds greater than the other strategy's? "
            "(Pooling treats every episode as an independent draw.)"))
        blocks.append(Table(("pair", "first pooled", "second pooled", "odds ratio",
                             "one-sided p"), tuple(fisher_rows),
                            caption=f"Fisher exact test, {headline} against each strategy"))
    return Section("Probability of improvement", blocks)


def _swept_variations(view: StudyView, dimension) -> set[str] | None:
    """Variations on which the headline strategy's runs take two or more values of
    ``dimension`` (the sweep's variations), or None when nothing was swept: a sweep's points
    are then compared on the same variations only."""
    values: dict[str, set] = {}
    for row in view.standalone:
        if row.strategy == view.headline and row.trained_evaluation() is not None:
            values.setdefault(row.variation, set()).add(dimension(row))
    swept = {variation for variation, seen in values.items() if len(seen) > 1}
    return swept or None


def _sweep_counts(view: StudyView, strategy: str, same, variations=None) -> list:
    setting = view.settings[strategy]
    return [row for row in view.standalone if row.strategy == strategy
            and same(Setting.of(row), setting) and row.trained_evaluation() is not None
            and (variations is None or row.variation in variations)]


def _pooled_over(variations: set[str] | None) -> str:
    if variations is None:
        return "counts pooled over seeds and variations"
    return f"counts pooled over seeds on the swept variation ({', '.join(sorted(variations))})"


def budget_section(view: StudyView) -> Section | None:
    if not view.settings:
        return None

    def same(setting, headline):
        return (setting.share, setting.indicator, setting.steps) == (
            headline.share, headline.indicator, headline.steps)

    tables, lines, rows_out = {}, [], []
    variations = _swept_variations(view, lambda row: row.new_episodes)
    for strategy in view.settings:
        runs = _sweep_counts(view, strategy, same, variations)
        counts = [(r.new_episodes, r.trained_evaluation().successes,
                   r.trained_evaluation().episodes) for r in runs]
        if not counts:
            continue
        points = budget_table(counts)
        tables[strategy] = counts
        lines.append(Line(strategy, tuple(p.budget for p in points),
                          tuple(p.rate for p in points), tuple(p.low for p in points),
                          tuple(p.high for p in points)))
        rows_out += [(strategy, str(p.budget), f"{p.successes}/{p.episodes}",
                      interval_text(p.rate, p.low, p.high)) for p in points]
    headline = view.headline
    if headline not in tables:
        return None
    budgets = sorted({b for b, _, _ in tables[headline]})
    answer = smallest_clearing_budget(tables[headline], view.level)
    if answer is None:
        sentence = (f"No budget tested ({', '.join(str(b) for b in budgets)} new episodes) lifts "
                    f"the low end of {headline}'s 95% Wilson interval above "
                    f"{percent(view.level)}.")
    else:
        sentence = (f"The smallest budget at which the low end of {headline}'s 95% Wilson "
                    f"interval clears {percent(view.level)} is {answer} new episodes.")
    blocks = [
        Paragraph("Success on the trained-for variation against the number of new episodes, "
                  f"{_pooled_over(variations)} at each budget (other settings as in the "
                  "headline runs; the base checkpoint is the point at 0), with 95% Wilson "
                  "intervals."),
        Paragraph(sentence),
        Table(("strategy", "new episodes", "pooled successes", "success [95% Wilson]"),
              tuple(rows_out), caption="Success by data budget"),
    ]
    if any(len(line.x) > 1 for line in lines):
        blocks.append(Figure(line_panels([Panel("Success against data budget", "new episodes",
                                                "success rate", lines, level=view.level)]),
                             "Success against new episodes per strategy (95% Wilson bands); "
                             "dashed: the success level"))
    return Section("Data budget", blocks)


def share_section(view: StudyView) -> Section | None:
    if not view.settings:
        return None

    def same(setting, headline):
        return (setting.new_episodes, setting.steps) == (headline.new_episodes, headline.steps)

    lines, rows_out, several = [], [], False
    variations = _swept_variations(view, lambda row: (row.share, row.indicator))
    for strategy in view.settings:
        runs = _sweep_counts(view, strategy, same, variations)
        for indicator in sorted({r.indicator for r in runs}):
            group = [r for r in runs if r.indicator == indicator]
            shares = np.array([r.share for r in group])
            unique = np.unique(shares)
            several |= unique.size > 1
            label = f"{strategy} + indicator" if indicator else strategy
            points = []
            for share in unique:
                chosen = [r.trained_evaluation() for r, s in zip(group, shares, strict=True)
                          if s == share]
                wins, total = sum(e.successes for e in chosen), sum(e.episodes for e in chosen)
                low, high = wilson_interval(wins, total)
                points.append((float(share), wins / total, low, high))
                rows_out.append((label, f"{share:g}", f"{wins}/{total}",
                                 interval_text(wins / total, low, high)))
            lines.append(Line(label, *(tuple(column) for column in zip(*points, strict=True))))
    if not several:
        return None
    return Section("New-data share", [
        Paragraph("Success on the trained-for variation against the share of each batch drawn "
                  f"from the new data, {_pooled_over(variations)}, 95% Wilson intervals."),
        Table(("strategy", "share", "pooled successes", "success [95% Wilson]"),
              tuple(rows_out), caption="Success by new-data share"),
        Figure(line_panels([Panel("Success against new-data share", "share of new data",
                                  "success rate", lines)]),
               "Success against the new-data share (95% Wilson bands)"),
    ])
