"""Report sections about how runs trained: chains, learning curves, training logs, filmstrips.

Holds:
    forgetting_section -- forgetting matrix of each chain (rows: steps, columns: variations), BWT.
    rounds_section -- success after each round of adaptation against the base and a single step.
    pooled_curve -- several runs' curves pooled into one (steps, success rates) pair.
    curve_section -- success against gradient steps from the rows' "curve" and plateau steps.
    training_log_section -- tensorboard scalars (loss, q_mean, success tags) of runs with a logdir.
    filmstrip_section -- the PNGs in the study's filmstrips/ folder, or a sentence if none.
    read_scalars -- the scalar series of one tensorboard log directory, by tag.

Plateau of a curve: the mean success of its last 20% of evaluation points; a strategy "reaches"
it at the first evaluation step whose success is at least 95% of that plateau.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

from qadapt.study.document import Figure, Paragraph, Section, Table
from qadapt.study.figures import Line, Panel, line_panels, matrix_image
from qadapt.study.statistics import backward_transfer, fisher_exact_greater, steps_to_plateau
from qadapt.study.view import StudyView, p_value_text, percent

PLATEAU_SHARE = 0.95
PLATEAU_TAIL = 0.2
# A plateau below this is "has not started learning", not a level to reach.
NO_LEARNING = 0.01
LOG_TAG_WORDS = ("loss", "q_mean", "success")


# -- chains ------------------------------------------------------------------------------------
def _chains(view: StudyView) -> tuple[dict, list[str]]:
    """Chains grouped by (strategy, variation order): list of per-seed step lists."""
    by_run: dict[tuple[str, int], list] = {}
    for row in view.chained:
        by_run.setdefault((row.strategy, row.seed), []).append(row)
    groups: dict[tuple[str, tuple[str, ...]], list] = {}
    notes = []
    for (strategy, seed), rows in sorted(by_run.items()):
        rows.sort(key=lambda r: r.chain_step)
        steps = [r.chain_step for r in rows]
        if steps != list(range(steps[0], steps[0] + len(rows))):
            notes.append(f"{strategy} seed {seed}: chain steps {steps} are not consecutive "
                         "(gaps or repeats); left out")
            continue
        groups.setdefault((strategy, tuple(r.variation for r in rows)), []).append(rows)
    return groups, notes


def forgetting_section(view: StudyView) -> Section | None:
    if not view.chained:
        return None
    groups, notes = _chains(view)
    blocks = [Paragraph(
        "Each chain fine-tunes on one variation after another. Row i: after chain step i; column "
        "j: success on the variation of step j, counts pooled over the chain's seeds. Backward "
        "transfer (Lopez-Paz and Ranzato, 2017): BWT = 1/(T-1) sum over i < T-1 of (R[T-1, i] - "
        "R[i, i]); negative values mean later steps undid earlier ones."
    )]
    blocks += [Paragraph(note) for note in notes]
    for (strategy, order), chains in groups.items():
        columns = list(order)
        if view.base_variation is not None and view.base_variation not in columns:
            columns.append(view.base_variation)
        size = len(order)
        successes = np.zeros((size, len(columns)))
        episodes = np.zeros((size, len(columns)))
        per_seed = []
        for chain in chains:
            wins, totals = np.zeros_like(successes), np.zeros_like(episodes)
            for step, row in enumerate(chain):
                for column, variation in enumerate(columns):
                    found = row.evaluation(variation)
                    if found is not None:
                        wins[step, column], totals[step, column] = found.successes, found.episodes
            successes += wins
            episodes += totals
            per_seed.append(_bwt_or_none(_rates(wins, totals)[:, :size]))
        rates = _rates(successes, episodes)
        pooled_bwt = _bwt_or_none(rates[:, :size])
        labels = [f"after {i}: {variation}" for i, variation in enumerate(order)]
        table_rows = tuple(
            (label,) + tuple("-" if not np.isfinite(v) else
                             f"{percent(v)} ({int(s)}/{int(e)})"
                             for v, s, e in zip(rates[i], successes[i], episodes[i], strict=True))
            for i, label in enumerate(labels)
        )
        title = f"{strategy}: {' -> '.join(order)} ({len(chains)} seed{'s' * (len(chains) > 1)})"
        blocks.append(Table(("after step",) + tuple(columns), table_rows,
                            caption=f"Forgetting matrix, {title}"))
        if size < 2:
            blocks.append(Paragraph(f"{title}: backward transfer needs at least two steps."))
        elif pooled_bwt is None:
            blocks.append(Paragraph(f"{title}: backward transfer not computable (an evaluation "
                                    "on the diagonal or the last row is missing)."))
        else:
            seeds = ", ".join("-" if b is None else f"{b:+.3f}" for b in per_seed)
            blocks.append(Paragraph(f"{title}: backward transfer {pooled_bwt:+.3f} on the pooled "
                                    f"matrix; per seed: {seeds}."))
        blocks.append(Figure(matrix_image(rates, labels, columns, f"Forgetting, {title}"),
                             f"Forgetting matrix, {title}"))
    return Section("Forgetting in chains", blocks)


# -- rounds of adaptation ---------------------------------------------------------------------
def _pooled(rows: list, variation: str) -> tuple[int, int]:
    """(successes, episodes) of ``rows``' evaluations on ``variation``, summed."""
    found = [e for r in rows if (e := r.evaluation(variation)) is not None]
    return (sum(e.successes for e in found), sum(e.episodes for e in found))


def _count_text(wins: int, total: int) -> str:
    return f"{percent(wins / total)} ({wins}/{total})" if total else "-"


def _round_line(label: str, budget: str, rows: list, columns: list[str]) -> tuple[str, ...]:
    return (label, budget, *(_count_text(*_pooled(rows, name)) for name in columns))


def _retrains_of(view: StudyView, strategy: str, variation: str) -> dict[str, list]:
    """Retrain rows on the data of ``strategy``'s rounds on ``variation``, by strategy."""
    found: dict[str, list] = {}
    for row in view.rounds_retrains:
        if row.extra.get("rounds_strategy") == strategy and row.variation == variation:
            found.setdefault(row.strategy, []).append(row)
    return found


def rounds_section(view: StudyView) -> Section | None:
    """Success on the variation (and the unperturbed cell) after each round, pooled over
    seeds, beside the base and the same strategy's single-step runs at the headline budget."""
    if not view.rounds:
        return None
    blocks = [Paragraph(
        "Rounds of adaptation: each round explores the variation with the latest checkpoint "
        "(the first round with the base), collects the study's new-episode budget and "
        "fine-tunes on the prior data, the earlier rounds' data and its own. Counts pooled "
        "over seeds; one-sided Fisher exact tests on the last round."
        + (" A one-run row trains its strategy once, from the base, on the same mixture as "
           "the last round, for the gradient steps of all the rounds together."
           if view.rounds_retrains else ""))]
    groups: dict[tuple[str, str], list] = {}
    for row in view.rounds:
        groups.setdefault((row.strategy, row.variation), []).append(row)
    base_cell = view.base_variation
    for (strategy, variation), rows in sorted(groups.items()):
        by_round: dict[int, list] = {}
        for row in rows:
            by_round.setdefault(int(row.extra["round"]), []).append(row)
        columns = [variation] + ([base_cell] if base_cell and base_cell != variation else [])

        base_rows = [r for r in view.standalone if r.strategy == "base"
                     and r.variation == variation]
        single = [r for r in view.headline_rows(strategy) if r.variation == variation]
        table_rows = []
        if base_rows:
            table_rows.append(_round_line("base", "0", base_rows, columns))
        if single:
            table_rows.append(_round_line(f"{strategy}, one step", str(single[0].new_episodes),
                                          single, columns))
        for number in sorted(by_round):
            group = by_round[number]
            budget = number * group[0].new_episodes
            table_rows.append(_round_line(f"round {number}", f"{budget} in all", group, columns))
        retrains = _retrains_of(view, strategy, variation)
        for name, group in retrains.items():
            count = int(group[0].extra["trained_on_rounds"])
            table_rows.append(_round_line(
                f"{name}, one run of {group[0].steps} steps on the rounds' data",
                f"{count * group[0].new_episodes} in all", group, columns))
        title = f"{strategy} on {variation} ({len({r.seed for r in rows})} seeds)"
        blocks.append(Table(("model", "new episodes", *columns), tuple(table_rows),
                            caption=f"Rounds of adaptation, {title}"))
        last = by_round[max(by_round)]
        mine = _pooled(last, variation)
        tests = []
        for label, group in (("the base", base_rows), (f"{strategy} in one step", single),
                             *((f"{name} in one run on the same data", group)
                               for name, group in retrains.items())):
            theirs = _pooled(group, variation)
            if group and theirs[1] and mine[1]:
                result = fisher_exact_greater(mine[0], mine[1], theirs[0], theirs[1])
                tests.append(f"against {label} one-sided p = {p_value_text(result.p_value)}")
        if tests:
            blocks.append(Paragraph(f"{title}, last round: " + "; ".join(tests) + "."))
        seeds = sorted({r.seed for r in rows})
        lines = []
        for seed in seeds:
            points = sorted((int(r.extra["round"]), r.evaluation(variation)) for r in rows
                            if r.seed == seed and r.evaluation(variation) is not None)
            if points:
                lines.append(Line("one line per seed", tuple(float(n) for n, _ in points),
                                  tuple(e.successes / e.episodes for _, e in points),
                                  group="seeds"))
        rounds_axis = (float(min(by_round)), float(max(by_round)))
        for label, group in (("base", base_rows),
                             *((f"{name}, one run on the rounds' data", group)
                               for name, group in retrains.items())):
            wins, total = _pooled(group, variation)
            if total:
                lines.append(Line(label, rounds_axis, (wins / total,) * 2, markers=False))
        if lines:
            blocks.append(Figure(line_panels([Panel(f"Rounds, {title}", "round",
                                                    f"success on {variation}", lines)]),
                                 f"Success after each round, {title}"))
    return Section("Rounds of adaptation", blocks)


def _rates(successes: np.ndarray, episodes: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(episodes > 0, successes / np.maximum(episodes, 1), np.nan)


def _bwt_or_none(matrix: np.ndarray) -> float | None:
    if matrix.shape[0] < 2:
        return None
    try:
        return backward_transfer(matrix)
    except ValueError:
        return None


# -- learning curves from the results ----------------------------------------------------------
def pooled_curve(rows) -> tuple[np.ndarray, np.ndarray]:
    """Steps and success rates of several runs' curves, counts pooled per step.

    Uses the steps every run evaluated at; if the runs share no step, every step any run has.
    """
    step_sets = [{point.step for point in row.curve} for row in rows]
    shared = set.intersection(*step_sets) or set.union(*step_sets)
    points = np.array([(p.step, p.successes, p.episodes) for row in rows for p in row.curve
                       if p.step in shared], dtype=np.int64)
    steps, inverse = np.unique(points[:, 0], return_inverse=True)
    wins = np.bincount(inverse, weights=points[:, 1])
    totals = np.bincount(inverse, weights=points[:, 2])
    return steps, wins / totals


def curve_section(view: StudyView) -> Section | None:
    curves = {}
    for strategy in view.settings:
        runs = [row for row in view.headline_rows(strategy) if row.curve]
        if runs:
            curves[strategy] = (runs, *pooled_curve(runs))
    if not curves:
        return None
    lines, table_rows, reach = [], [], {}
    for strategy, (runs, steps, rates) in curves.items():
        lines.append(Line(strategy, tuple(int(s) for s in steps), tuple(float(r) for r in rates)))
        found = steps_to_plateau(steps, rates, PLATEAU_SHARE, PLATEAU_TAIL)
        reach[strategy] = found
        table_rows.append((strategy, str(len(runs)), percent(found.plateau),
                           percent(found.threshold), str(found.step), str(int(steps[-1]))))
    blocks = [
        Paragraph("Success during training (greedy evaluations recorded in each run's curve), "
                  "counts pooled over the headline runs at each step. Plateau: the mean success "
                  f"of the last {PLATEAU_TAIL:.0%} of a strategy's evaluation points; the step "
                  f"listed is the first at which the strategy reaches {PLATEAU_SHARE:.0%} of its "
                  "own plateau."),
        Table(("strategy", "runs", "plateau", f"{PLATEAU_SHARE:.0%} of plateau",
               "first step reaching it", "last step"), tuple(table_rows),
              caption="Steps to plateau"),
    ]
    headline = view.headline
    if headline in reach:
        mine = reach[headline]
        for other, theirs in reach.items():
            if other == headline:
                continue
            if theirs.plateau < NO_LEARNING:
                blocks.append(Paragraph(
                    f"{other}'s success stayed below {percent(NO_LEARNING)} to the end of its "
                    "runs: it had no plateau yet, so no ratio of steps is defined (run it "
                    "longer)."))
                continue
            if theirs.step == 0:
                blocks.append(Paragraph(f"{other} is at its plateau from step 0, so no ratio of "
                                        "steps is defined."))
                continue
            ratio = mine.step / theirs.step
            verdict = "within" if ratio <= 0.25 else "not within"
            blocks.append(Paragraph(
                f"{headline} reaches {PLATEAU_SHARE:.0%} of its plateau ({percent(mine.plateau)}) "
                f"at step {mine.step}; {other} reaches {PLATEAU_SHARE:.0%} of its plateau "
                f"({percent(theirs.plateau)}) at step {theirs.step}. Ratio {ratio:.2f}: "
                f"{headline} reaches its plateau {verdict} a quarter of {other}'s steps"
                + (f", though its plateau is lower ({percent(mine.plateau)} against "
                   f"{percent(theirs.plateau)})." if mine.plateau < theirs.plateau else ".")))
    blocks.append(Figure(line_panels([Panel("Success during training", "gradient step",
                                            "success rate", lines)]),
                         "Success against gradient steps per strategy (pooled headline runs)"))
    return Section("Learning curves", blocks)


# -- tensorboard logs --------------------------------------------------------------------------
def read_scalars(logdir: Path) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Scalar series of a tensorboard log directory whose tag holds a word of LOG_TAG_WORDS.

    Returns tag -> (steps, values), steps increasing.
    """
    logging.getLogger("tensorboard").setLevel(logging.WARNING)  # no line per log file

    accumulator = EventAccumulator(str(logdir), size_guidance={"scalars": 0})
    accumulator.Reload()
    series = {}
    for tag in accumulator.Tags().get("scalars", []):
        if not any(word in tag for word in LOG_TAG_WORDS):
            continue
        events = accumulator.Scalars(tag)
        steps = np.array([event.step for event in events], dtype=np.int64)
        values = np.array([event.value for event in events], dtype=float)
        order = np.argsort(steps, kind="stable")
        series[tag] = (steps[order], values[order])
    return series


def training_log_section(view: StudyView) -> Section | None:
    logged = [row for row in view.rows if row.logdir is not None]
    if not logged:
        return None
    panels: dict[str, list[Line]] = {}
    missing = []
    for row in sorted(logged, key=lambda r: (r.strategy, r.seed, r.run_id)):
        path = view.resolve(row.logdir)
        if not path.is_dir():
            missing.append(f"{row.run_id} ({row.logdir})")
            continue
        for tag, (steps, values) in read_scalars(path).items():
            panels.setdefault(tag, []).append(Line(row.strategy, tuple(steps.tolist()),
                                                   tuple(values.tolist()), markers=False))
    blocks = [Paragraph("Training scalars from the runs' tensorboard logs (tags holding "
                        f"{', '.join(repr(w) for w in LOG_TAG_WORDS)}); one line per run, "
                        "coloured by strategy.")]
    if missing:
        blocks.append(Paragraph(f"Log directories not found: {', '.join(missing)}."))
    if panels:
        blocks.append(Figure(line_panels([Panel(tag, "gradient step", tag.split("/")[-1], lines)
                                          for tag, lines in sorted(panels.items())]),
                             "Training scalars per run"))
    else:
        blocks.append(Paragraph("No matching scalars were found in the log directories."))
    return Section("Training logs", blocks)


# -- filmstrips --------------------------------------------------------------------------------
def filmstrip_section(view: StudyView) -> Section:
    folder = view.study_dir / "filmstrips"
    images = sorted(folder.glob("*.png")) if folder.is_dir() else []
    blocks = []
    for image in images:
        data = image.read_bytes()
        if not data.startswith(b"\x89PNG"):
            blocks.append(Paragraph(f"{image.name} is not a PNG image; left out."))
            continue
        blocks.append(Figure(data, f"Filmstrip: {image.stem}"))
    if not images:
        blocks.append(Paragraph("No filmstrips: the study directory has no filmstrips/ folder "
                                "with PNG images (one per strategy), so this section is empty."))
    return Section("Filmstrips", blocks)
