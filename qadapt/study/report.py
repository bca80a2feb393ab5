"""``qadapt report``: a study directory's results.jsonl -> report.html and summary.md.

Holds:
    build_report -- compute every section and write both files; returns their paths.
    report_main -- the command-line entry point; exit 0, or 2 with one line on bad input.

report.html is self-contained (figures embedded as base64 PNG, styles inline, no links to
other files); summary.md carries the same text and tables without the figures. Sections a
study has no data for (no chain rows, no curves, no logs) are left out.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from qadapt import layout
from qadapt.errors import BadInput
from qadapt.files import write_text_durably
from qadapt.study.compare_sections import (
    budget_section,
    improvement_section,
    overview_section,
    share_section,
    success_section,
)
from qadapt.study.document import to_html, to_markdown
from qadapt.study.results import read_results
from qadapt.study.training_sections import (
    curve_section,
    filmstrip_section,
    forgetting_section,
    rounds_section,
    training_log_section,
)
from qadapt.study.view import StudyView

_SECTIONS = (overview_section, success_section, improvement_section, budget_section,
             share_section, forgetting_section, rounds_section, curve_section,
             training_log_section, filmstrip_section)


def build_report(
    study_dir,
    out=None,
    level: float = 0.5,
    base_variation: str | None = None,
    reps: int = 2000,
    seed: int = 0,
) -> tuple[Path, Path]:
    """Write ``report.html`` and ``summary.md`` for the study in ``study_dir``.

    ``out``: output directory (default: ``study_dir``); ``level``: success level in [0, 1) for
    the data-budget answer; ``base_variation``: the variation the pretrained model came from
    (listed first, shown as an extra column of per-run and forgetting tables); ``reps`` and
    ``seed``: bootstrap replicates and their seed. Raises BadInput (a ValueError) for a
    missing, empty or malformed results file and for bad options, before writing anything.
    """
    study_dir = Path(study_dir)
    if not study_dir.is_dir():
        raise BadInput(f"study directory: {study_dir} is not a directory, expected one holding "
                       f"{layout.RESULTS}")
    if isinstance(level, bool) or not isinstance(level, float | int) or not 0.0 <= level < 1.0:
        raise BadInput(f"--level: got {level!r}, expected a success level in [0, 1)")
    if isinstance(reps, bool) or not isinstance(reps, int) or reps < 1:
        raise BadInput(f"--reps: got {reps!r}, expected a positive integer")
    try:
        rows = read_results(study_dir / layout.RESULTS)
    except ValueError as err:
        raise BadInput(str(err)) from None
    if base_variation is not None and not any(
        item.variation == base_variation for row in rows for item in row.evaluations
    ):
        raise BadInput(f"--base-variation: got {base_variation!r}, but no run was evaluated on "
                       "it; expected one of the evaluated variations "
                       f"{sorted({e.variation for row in rows for e in row.evaluations})}")
    view = StudyView(rows=rows, study_dir=study_dir, level=float(level),
                     base_variation=base_variation, reps=reps, seed=seed)
    sections = [section for build in _SECTIONS if (section := build(view)) is not None]
    out_dir = Path(out) if out is not None else study_dir
    out_dir.mkdir(parents=True, exist_ok=True)
    title = f"Study report: {study_dir.resolve().name}"
    html_path, markdown_path = out_dir / layout.REPORT_HTML, out_dir / layout.REPORT_MARKDOWN
    write_text_durably(html_path, to_html(title, sections))
    write_text_durably(markdown_path, to_markdown(title, sections))
    return html_path, markdown_path


def report_main(argv: Sequence[str]) -> int:
    """``qadapt report STUDY_DIR [--out DIR] [--level L] [--base-variation NAME]``."""
    parser = argparse.ArgumentParser(
        prog="qadapt report",
        description=f"Write report.html and summary.md from a study directory's {layout.RESULTS}.",
    )
    parser.add_argument("study_dir", help=f"directory holding {layout.RESULTS}")
    parser.add_argument("--out", default=None,
                        help="directory for report.html and summary.md (default: the study dir)")
    parser.add_argument("--level", type=float, default=0.5,
                        help="success level the data-budget answer asks about (default 0.5)")
    parser.add_argument("--base-variation", default=None,
                        help="variation the pretrained model came from (shown as a column)")
    parser.add_argument("--reps", type=int, default=2000,
                        help="bootstrap replicates per interval (default 2000)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the bootstrap (default 0)")
    args = parser.parse_args(list(argv))
    try:
        html_path, markdown_path = build_report(args.study_dir, args.out, args.level,
                                                args.base_variation, args.reps, args.seed)
    except BadInput as err:
        print(f"qadapt report: {err}", file=sys.stderr)
        return 2
    print(f"wrote {html_path} and {markdown_path}")
    return 0
