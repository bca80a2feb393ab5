"""The results table of a study: one JSON object per line (results.jsonl), one line per run.

Holds:
    Evaluation -- raw counts of one evaluation of a run's checkpoint on one variation.
    CurvePoint -- one in-training evaluation: gradient step, successes, episodes.
    ResultRow -- one run: what it was trained for and with, what it scored, where it lives.
    read_results -- parse a results.jsonl file; a bad line is reported with its line number.
    append_result -- add one row to a results.jsonl file (one line, flushed and synced).

The keys are documented in docs/study.md. Unknown keys are kept in ``ResultRow.extra`` and
written back unchanged, so newer writers and older readers can share one file.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

KEYS = ("run_id", "variation", "strategy", "seed", "new_episodes", "share", "indicator", "steps",
        "chain_step", "evaluations", "curve", "checkpoint", "run_dir", "logdir")


def _where(context: str, key: str) -> str:
    return f"{context}.{key}" if context else key


def _get(data: dict, key: str, context: str):
    if key not in data:
        raise ValueError(f"{_where(context, key)}: missing, expected it in every row")
    return data[key]


def _integer(value, name: str, minimum: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ValueError(f"{name}: got {value!r}, expected an integer")
    if minimum is not None and value < minimum:
        raise ValueError(f"{name}: got {value!r}, expected an integer >= {minimum}")
    return value


def _text(value, name: str, allow_empty: bool = False) -> str:
    if not isinstance(value, str) or (not allow_empty and not value):
        raise ValueError(f"{name}: got {value!r}, expected a non-empty string")
    return value


def _number(value, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise ValueError(f"{name}: got {value!r}, expected a finite number")
    return float(value)


def _counts(successes, episodes, name: str) -> tuple[int, int]:
    episodes = _integer(episodes, f"{name}.episodes", minimum=1)
    successes = _integer(successes, f"{name}.successes", minimum=0)
    if successes > episodes:
        raise ValueError(f"{name}.successes: got {successes}, expected at most episodes "
                         f"({episodes})")
    return successes, episodes


def _object(value, name: str) -> dict:
    if not isinstance(value, dict):
        raise ValueError(f"{name}: got {type(value).__name__}, expected a JSON object")
    return value


def _array(value, name: str) -> list:
    if not isinstance(value, list):
        raise ValueError(f"{name}: got {type(value).__name__}, expected a JSON list")
    return value


@dataclass(frozen=True)
class Evaluation:
    """Greedy evaluation of a run's checkpoint on one variation: raw counts, per-episode data.

    ``returns`` (floats) and ``lengths`` (steps) hold one entry per episode, or are both empty
    when the evaluator did not record them.

    Example:
        >>> Evaluation("none", 2, 3, (1.0, 0.0, 1.0), (40, 80, 35)).rate
        0.6666666666666666
    """

    variation: str
    successes: int
    episodes: int
    returns: tuple[float, ...] = ()
    lengths: tuple[int, ...] = ()

    def __post_init__(self) -> None:
        _text(self.variation, "evaluation.variation")
        _counts(self.successes, self.episodes, "evaluation")
        returns = tuple(_number(v, "evaluation.returns[]") for v in self.returns)
        lengths = tuple(_integer(v, "evaluation.lengths[]", minimum=0) for v in self.lengths)
        if len(returns) != len(lengths) or len(returns) not in (0, self.episodes):
            raise ValueError(f"evaluation.returns, evaluation.lengths: got {len(returns)} and "
                             f"{len(lengths)} entries, expected both {self.episodes} (one per "
                             "episode) or both empty")
        object.__setattr__(self, "returns", returns)
        object.__setattr__(self, "lengths", lengths)

    @property
    def rate(self) -> float:
        return self.successes / self.episodes

    @classmethod
    def from_dict(cls, data, context: str = "evaluation") -> Evaluation:
        data = _object(data, context)
        returns = _array(data.get("returns", []), f"{context}.returns")
        lengths = _array(data.get("lengths", []), f"{context}.lengths")
        variation = _text(_get(data, "variation", context), f"{context}.variation")
        successes, episodes = _get(data, "successes", context), _get(data, "episodes", context)
        try:
            return cls(variation, successes, episodes, tuple(returns), tuple(lengths))
        except ValueError as err:
            raise ValueError(str(err).replace("evaluation", context, 1)) from None

    def to_dict(self) -> dict:
        return {"variation": self.variation, "successes": self.successes,
                "episodes": self.episodes, "returns": list(self.returns),
                "lengths": list(self.lengths)}


@dataclass(frozen=True)
class CurvePoint:
    """One in-training evaluation: after ``step`` gradient steps, ``successes`` of ``episodes``.

    Example:
        >>> CurvePoint(500, 30, 50).rate
        0.6
    """

    step: int
    successes: int
    episodes: int

    def __post_init__(self) -> None:
        _integer(self.step, "curve.step", minimum=0)
        _counts(self.successes, self.episodes, "curve")

    @property
    def rate(self) -> float:
        return self.successes / self.episodes

    @classmethod
    def from_dict(cls, data, context: str = "curve") -> CurvePoint:
        data = _object(data, context)
        values = [_get(data, key, context) for key in ("step", "successes", "episodes")]
        try:
            return cls(*values)
        except ValueError as err:
            raise ValueError(str(err).replace("curve", context, 1)) from None

    def to_dict(self) -> dict:
        return {"step": self.step, "successes": self.successes, "episodes": self.episodes}


@dataclass(frozen=True)
class ResultRow:
    """One run of a study, as one line of results.jsonl (keys in docs/study.md).

    Example:
        >>> row = ResultRow(run_id="warm-s0", variation="finger_offset", strategy="warm",
        ...                 seed=0, new_episodes=100, share=0.5, indicator=False, steps=3000,
        ...                 chain_step=None,
        ...                 evaluations=(Evaluation("finger_offset", 61, 100),),
        ...                 curve=(CurvePoint(1500, 27, 50), CurvePoint(3000, 31, 50)),
        ...                 checkpoint="runs/warm-s0/checkpoints/best", run_dir="runs/warm-s0",
        ...                 logdir=None)
        >>> ResultRow.from_json(row.to_json()) == row
        True
        >>> row.trained_evaluation().rate
        0.61
    """

    run_id: str
    variation: str
    strategy: str
    seed: int
    new_episodes: int
    share: float
    indicator: bool
    steps: int
    chain_step: int | None
    evaluations: tuple[Evaluation, ...]
    curve: tuple[CurvePoint, ...]
    checkpoint: str
    run_dir: str
    logdir: str | None
    extra: dict[str, Any] = field(default_factory=dict, compare=False)

    def __post_init__(self) -> None:
        for key in ("run_id", "variation", "strategy", "checkpoint", "run_dir"):
            _text(getattr(self, key), key)
        _integer(self.seed, "seed")
        _integer(self.new_episodes, "new_episodes", minimum=0)
        _integer(self.steps, "steps", minimum=0)
        share = _number(self.share, "share")
        if not 0.0 <= share <= 1.0:
            raise ValueError(f"share: got {self.share!r}, expected the new-data share in [0, 1]")
        object.__setattr__(self, "share", share)
        if not isinstance(self.indicator, bool):
            raise ValueError(f"indicator: got {self.indicator!r}, expected true or false")
        if self.chain_step is not None:
            _integer(self.chain_step, "chain_step", minimum=0)
        if self.logdir is not None:
            _text(self.logdir, "logdir")
        evaluations = tuple(self.evaluations)
        for item in evaluations:
            if not isinstance(item, Evaluation):
                raise ValueError(f"evaluations: got {item!r}, expected Evaluation objects")
        names = [item.variation for item in evaluations]
        if len(set(names)) != len(names):
            raise ValueError(f"evaluations: got variations {names}, expected each at most once")
        curve = tuple(self.curve)
        for item in curve:
            if not isinstance(item, CurvePoint):
                raise ValueError(f"curve: got {item!r}, expected CurvePoint objects")
        steps = [point.step for point in curve]
        if any(later <= earlier for earlier, later in zip(steps, steps[1:], strict=False)):
            raise ValueError(f"curve: got steps {steps}, expected strictly increasing steps")
        object.__setattr__(self, "evaluations", evaluations)
        object.__setattr__(self, "curve", curve)
        clash = sorted(set(self.extra) & set(KEYS))
        if clash:
            raise ValueError(f"extra: got keys {clash}, expected none of the row's own keys")

    def evaluation(self, variation: str) -> Evaluation | None:
        """This run's evaluation on ``variation``, or None if it was not evaluated there."""
        for item in self.evaluations:
            if item.variation == variation:
                return item
        return None

    def trained_evaluation(self) -> Evaluation | None:
        """The evaluation on the variation this run was trained for (None if missing)."""
        return self.evaluation(self.variation)

    @classmethod
    def from_dict(cls, data) -> ResultRow:
        data = _object(data, "row")
        values = {key: _get(data, key, "") for key in KEYS}
        chain_step, logdir = values["chain_step"], values["logdir"]
        evaluations = tuple(
            Evaluation.from_dict(item, f"evaluations[{index}]")
            for index, item in enumerate(_array(values["evaluations"], "evaluations"))
        )
        curve = tuple(
            CurvePoint.from_dict(item, f"curve[{index}]")
            for index, item in enumerate(_array(values["curve"], "curve"))
        )
        return cls(
            run_id=values["run_id"], variation=values["variation"], strategy=values["strategy"],
            seed=values["seed"], new_episodes=values["new_episodes"], share=values["share"],
            indicator=values["indicator"], steps=values["steps"], chain_step=chain_step,
            evaluations=evaluations, curve=curve, checkpoint=values["checkpoint"],
            run_dir=values["run_dir"], logdir=logdir,
            extra={key: value for key, value in data.items() if key not in KEYS},
        )

    @classmethod
    def from_json(cls, text: str) -> ResultRow:
        """Parse one results.jsonl line; ValueError names the bad key and value."""
        try:
            data = json.loads(text)
        except json.JSONDecodeError as err:
            raise ValueError(f"not valid JSON ({err.msg} at column {err.colno})") from None
        return cls.from_dict(data)

    def to_dict(self) -> dict:
        data = {
            "run_id": self.run_id, "variation": self.variation, "strategy": self.strategy,
            "seed": self.seed, "new_episodes": self.new_episodes, "share": self.share,
            "indicator": self.indicator, "steps": self.steps, "chain_step": self.chain_step,
            "evaluations": [item.to_dict() for item in self.evaluations],
            "curve": [point.to_dict() for point in self.curve],
            "checkpoint": self.checkpoint, "run_dir": self.run_dir, "logdir": self.logdir,
        }
        data.update(self.extra)
        return data

    def to_json(self) -> str:
        """One line of JSON (no newline inside), keys in the documented order."""
        return json.dumps(self.to_dict(), allow_nan=False)


def read_results(path, allow_empty: bool = False) -> list[ResultRow]:
    """Read a results.jsonl file (blank lines are skipped).

    Raises ValueError "PATH line N: ..." for a line that is not a valid row, for a run_id that
    repeats an earlier line, and (unless ``allow_empty``) for a file without rows.
    """
    path = Path(path)
    if not path.is_file():
        raise ValueError(f"{path}: no such results file, expected a results.jsonl written by a "
                         "study")
    rows: list[ResultRow] = []
    first_line: dict[str, int] = {}
    with path.open(encoding="utf-8") as handle:
        for number, line in enumerate(handle, start=1):
            if not line.strip():
                continue
            try:
                row = ResultRow.from_json(line)
            except ValueError as err:
                raise ValueError(f"{path} line {number}: {err}") from None
            if row.run_id in first_line:
                raise ValueError(f"{path} line {number}: run_id {row.run_id!r} repeats line "
                                 f"{first_line[row.run_id]}, expected one line per run")
            first_line[row.run_id] = number
            rows.append(row)
    if not rows and not allow_empty:
        raise ValueError(f"{path}: holds no result rows, expected one JSON object per line")
    return rows


def append_result(path, row: ResultRow) -> None:
    """Append ``row`` as one line to ``path`` (created if missing), flushed and synced to disk."""
    if not isinstance(row, ResultRow):
        raise ValueError(f"row: got {type(row).__name__}, expected a ResultRow")
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("a", encoding="utf-8") as handle:
        handle.write(row.to_json() + "\n")
        handle.flush()
        os.fsync(handle.fileno())
