"""The qadapt console script: job listing, version, unknown jobs, and the preview job."""

from __future__ import annotations

import json
import subprocess
import sys

from qadapt import __version__
from qadapt.cli import JOBS, main


def test_help_lists_every_job(capsys):
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    for name in JOBS:
        assert name in out


def test_version(capsys):
    assert main(["--version"]) == 0
    assert __version__ in capsys.readouterr().out


def test_unknown_job_exits_2_with_one_line(capsys):
    assert main(["nonsense"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "nonsense" in err


def test_console_script_preview_json():
    done = subprocess.run(
        [sys.executable, "-m", "qadapt.cli", "preview", "--episodes", "50", "--json"],
        capture_output=True, text=True, check=True,
    )
    rows = json.loads(done.stdout)
    assert rows[0]["variation"] == "none"
    assert {row["variation"] for row in rows} >= {"finger_offset", "drive_lag", "ghost_items"}
    assert all(0 <= row["near_noiseless"]["successes"] <= 50 for row in rows)
