"""The file names inside a run, a chain and a study directory, in one place.

Holds:
    SUMMARY, LINEAGE, CHECKPOINTS, LOGS, EVALUATION -- a training or evaluation run's files.
    LAST, BEST -- the checkpoints a training run keeps under ``CHECKPOINTS``.
    CHAIN_RECORD, STEP_RECORD -- a chain directory's record and each step's record.
    PLAN, RESULTS, CELL_ROWS, CELL_FAILURE, REPORT_HTML, REPORT_MARKDOWN -- a study's files.
    checkpoints_dir, logs_dir, last_checkpoint, best_checkpoint -- paths inside a run.
    resolve_checkpoint -- a checkpoint directory from a checkpoint or a run directory.

Only this module spells these names; every other module asks it for a path, so a layout
change is one edit here (docs/architecture.md). It sits at the bottom of the package: it
imports nothing of qadapt but ``errors``.
"""

from __future__ import annotations

import json
from pathlib import Path

from qadapt.errors import BadInput

SUMMARY = "summary.json"
LINEAGE = "lineage.json"
CHECKPOINTS = "checkpoints"
LOGS = "logs"
LAST = "last"
BEST = "best"
EVALUATION = "evaluation.json"
SCORE = "score.json"
CHECKPOINT_RECORD = "checkpoint.json"

CHAIN_RECORD = "chain.json"
STEP_RECORD = "step.json"

PLAN = "cells.json"
RESULTS = "results.jsonl"
CELL_ROWS = "rows.json"
CELL_FAILURE = "failed.json"
REPORT_HTML = "report.html"
REPORT_MARKDOWN = "summary.md"


def checkpoints_dir(run_dir: str | Path) -> Path:
    return Path(run_dir) / CHECKPOINTS


def logs_dir(run_dir: str | Path) -> Path:
    return Path(run_dir) / LOGS


def last_checkpoint(run_dir: str | Path) -> Path:
    return checkpoints_dir(run_dir) / LAST


def best_checkpoint(run_dir: str | Path) -> Path:
    return checkpoints_dir(run_dir) / BEST


def resolve_checkpoint(path: str | Path, key: str = "checkpoint") -> Path:
    """``path`` itself if it is a checkpoint; for a run directory, the checkpoint its
    summary.json selected (the best evaluated one when evaluation was on), found inside the
    run directory itself (``checkpoints/best`` or ``checkpoints/last``, as ``selected`` says):
    a copied or moved run resolves to its own checkpoint, never to the original's.

    Example:
        >>> import tempfile
        >>> run = Path(tempfile.mkdtemp())
        >>> resolve_checkpoint(run, key="ckpt")
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: ckpt: ... is neither a checkpoint nor a run directory
        >>> _ = (run / SUMMARY).write_text('{"selected": "best", "checkpoint": 5}')
        >>> resolve_checkpoint(run, key="ckpt")
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: ckpt: ...: "checkpoint" is 5 (int), expected a path (string)
    """
    given = Path(path)
    if (given / CHECKPOINT_RECORD).exists():
        return given
    summary = given / SUMMARY
    if summary.exists():
        try:
            record = json.loads(summary.read_text())
        except (OSError, ValueError) as err:
            raise BadInput(f"{key}: {summary} is not readable JSON ({err})") from err
        if not isinstance(record, dict):
            raise BadInput(f"{key}: {summary} holds a {type(record).__name__}, expected an "
                           "object with the run's selected checkpoint")
        named = record.get("checkpoint")
        if not isinstance(named, str):
            raise BadInput(f'{key}: {summary}: "checkpoint" is {named!r} '
                           f"({type(named).__name__}), expected a path (string)")
        selected = record.get("selected")
        if selected in ("best", "last"):
            inside = given / CHECKPOINTS / selected
            if (inside / CHECKPOINT_RECORD).exists():
                return inside
        return Path(named)
    raise BadInput(f"{key}: {given} is neither a checkpoint nor a run directory")
