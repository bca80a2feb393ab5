"""The results.jsonl row format: round trips, validation and line-numbered errors."""

from __future__ import annotations

import doctest
import json

import pytest

from qadapt.study import results
from qadapt.study.results import CurvePoint, Evaluation, ResultRow, append_result, read_results


def row_dict(**changes) -> dict:
    data = {
        "run_id": "warm-finger_offset-s0", "variation": "finger_offset", "strategy": "warm",
        "seed": 0, "new_episodes": 100, "share": 0.5, "indicator": False, "steps": 3000,
        "chain_step": None,
        "evaluations": [{"variation": "finger_offset", "successes": 2, "episodes": 3,
                         "returns": [1.0, 0.0, 1.0], "lengths": [41, 80, 37]}],
        "curve": [{"step": 1000, "successes": 10, "episodes": 20}],
        "checkpoint": "runs/a/checkpoints/best", "run_dir": "runs/a", "logdir": "runs/a/logs",
    }
    data.update(changes)
    return data


def test_docstring_examples_hold():
    failures, _ = doctest.testmod(results)
    assert failures == 0


def test_round_trip_keeps_every_key_including_unknown_ones():
    data = row_dict(note="kept")
    row = ResultRow.from_json(json.dumps(data))
    assert row.evaluations[0] == Evaluation("finger_offset", 2, 3, (1.0, 0.0, 1.0), (41, 80, 37))
    assert row.curve == (CurvePoint(1000, 10, 20),)
    assert json.loads(row.to_json()) == data
    assert "\n" not in row.to_json()


@pytest.mark.parametrize(
    ("changes", "word"),
    [
        ({"seed": "0"}, "seed"),
        ({"seed": True}, "seed"),
        ({"share": 1.5}, "share"),
        ({"indicator": 1}, "indicator"),
        ({"chain_step": -1}, "chain_step"),
        ({"run_id": ""}, "run_id"),
        ({"new_episodes": -3}, "new_episodes"),
        ({"evaluations": [{"variation": "a", "successes": 4, "episodes": 3}]},
         "evaluations\\[0\\].successes"),
        ({"evaluations": [{"variation": "a", "successes": 1, "episodes": 3, "returns": [1.0],
                           "lengths": [5]}]}, "returns"),
        ({"evaluations": [{"successes": 1, "episodes": 3}]}, "evaluations\\[0\\].variation"),
        ({"curve": [{"step": 5, "successes": 1, "episodes": 2},
                     {"step": 5, "successes": 1, "episodes": 2}]}, "curve"),
        ({"logdir": 3}, "logdir"),
    ],
)
def test_bad_values_name_their_key(changes, word):
    with pytest.raises(ValueError, match=word):
        ResultRow.from_dict(row_dict(**changes))


def test_missing_key_is_named():
    data = row_dict()
    del data["steps"]
    with pytest.raises(ValueError, match="steps: missing"):
        ResultRow.from_dict(data)


def test_read_results_reports_the_bad_line_number(tmp_path):
    path = tmp_path / "results.jsonl"
    path.write_text(json.dumps(row_dict()) + "\n\n" + "{not json\n")
    with pytest.raises(ValueError, match="line 3: not valid JSON"):
        read_results(path)
    path.write_text(json.dumps(row_dict()) + "\n" + json.dumps(row_dict(seed=1)) + "\n")
    with pytest.raises(ValueError, match="line 2: run_id 'warm-finger_offset-s0' repeats line 1"):
        read_results(path)
    path.write_text(json.dumps(row_dict()) + "\n" + json.dumps(row_dict(run_id="b", steps=-1)))
    with pytest.raises(ValueError, match="line 2: steps"):
        read_results(path)


def test_read_results_empty_and_missing(tmp_path):
    path = tmp_path / "results.jsonl"
    path.write_text("\n")
    with pytest.raises(ValueError, match="no result rows"):
        read_results(path)
    assert read_results(path, allow_empty=True) == []
    with pytest.raises(ValueError, match="no such results file"):
        read_results(tmp_path / "absent.jsonl")


def test_append_then_read(tmp_path):
    path = tmp_path / "study" / "results.jsonl"
    first = ResultRow.from_dict(row_dict())
    second = ResultRow.from_dict(row_dict(run_id="b", chain_step=0, logdir=None))
    append_result(path, first)
    append_result(path, second)
    assert read_results(path) == [first, second]
