"""`qadapt inspect PATH [--json]`: figures, provenance, checksum status, exit statuses."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np

from qadapt.data import inspect_dataset
from qadapt.jobs.inspect_job import main


def _cli(*args):
    return subprocess.run(
        [sys.executable, "-m", "qadapt.cli", "inspect", *map(str, args)],
        capture_output=True,
        text=True,
        timeout=60,
    )


def test_json_report_has_the_promised_keys_and_figures(write_dataset, capsys):
    path, arrays = write_dataset(lengths=(5, 7, 3, 4))
    assert main([str(path), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert {"transitions", "episodes", "success_rate", "checksums_ok"} <= set(report)
    assert report["transitions"] == 19 and report["episodes"] == 4
    assert report["checksums_ok"] is True and report["problem"] is None
    assert report["episode_length"] == {"min": 3, "mean": 4.75, "max": 7}
    ends = np.cumsum([5, 7, 3, 4])
    starts = ends - [5, 7, 3, 4]
    successes = [bool(arrays["success"][a:b].any()) for a, b in zip(starts, ends, strict=True)]
    assert report["success_rate"] == sum(successes) / 4
    returns = [
        float(arrays["rewards"][a:b].astype(np.float64).sum())
        for a, b in zip(starts, ends, strict=True)
    ]
    assert report["episode_return"]["mean"] == np.float64(np.mean(returns))
    mins, maxs = arrays["actions"].min(axis=0), arrays["actions"].max(axis=0)
    assert report["action_ranges"] == [
        {"min": float(a), "max": float(b)} for a, b in zip(mins, maxs, strict=True)
    ]
    assert report["collected_by"] == {"kind": "scripted", "noise": 0.1}
    assert report["environment"]["id"] == "Pendulum-v1"


def test_text_report_is_readable(write_dataset, capsys):
    path, _ = write_dataset(with_success=False)
    assert main([str(path)]) == 0
    text = capsys.readouterr().out
    assert "transitions" in text and "15" in text
    assert "unknown (the environment reported no success flag)" in text
    assert "checksums         ok" in text


def test_corrupt_file_is_reported_with_exit_status_1(write_dataset):
    path, _ = write_dataset()
    target = path / "actions.npy"
    data = bytearray(target.read_bytes())
    data[-3] ^= 0xFF
    target.write_bytes(bytes(data))
    report = inspect_dataset(path)
    assert report["checksums_ok"] is False and "actions.npy" in report["problem"]
    assert report["transitions"] == 15 and report["success_rate"] is None
    result = _cli(path, "--json")
    assert result.returncode == 1
    assert json.loads(result.stdout)["checksums_ok"] is False


def test_bad_input_is_one_line_and_exit_status_2(tmp_path):
    result = _cli(tmp_path / "nothing-here")
    assert result.returncode == 2
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "not a dataset directory" in lines[0]
    assert "Traceback" not in result.stderr


def test_unknown_version_through_the_cli(write_dataset, edit_manifest):
    path, _ = write_dataset()
    edit_manifest(path, lambda m: m.update(format_version=9))
    result = _cli(path)
    assert result.returncode == 2
    assert "format_version 9 is not supported" in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1
