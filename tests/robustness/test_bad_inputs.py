"""Every row of the bad-input table: exit status 2, one line on stderr naming the file or key,
no traceback, every earlier output byte-for-byte unchanged, no pickle ever loaded.

Rows run in this process through ``qadapt.cli.main`` (fast); the rows marked ``subprocess``
also run as a real ``python -m qadapt.cli`` process.
"""

from __future__ import annotations

import pytest

from tests.robustness.bad_inputs import CASES, cases_for_available_jobs, describe, try_case

ROWS = cases_for_available_jobs()


def test_the_table_covers_every_area_with_at_least_30_rows():
    assert len({c.name for c in ROWS}) >= 30
    assert {"dataset", "checkpoint", "config", "command line", "output"} <= {c.area for c in ROWS}
    assert sum(c.trap for c in ROWS) >= 3


@pytest.mark.parametrize("row", ROWS, ids=[c.name for c in ROWS])
def test_bad_input_in_process(row, workspace, tmp_path):
    result = try_case(row, workspace, tmp_path / "row")
    if result.skipped:
        pytest.skip(result.skipped)
    assert result.clean, describe(result)


SUBPROCESS_ROWS = [c for c in ROWS if c.subprocess]


@pytest.mark.parametrize("row", SUBPROCESS_ROWS, ids=[c.name for c in SUBPROCESS_ROWS])
def test_bad_input_in_a_real_process(row, workspace, tmp_path):
    result = try_case(row, workspace, tmp_path / "row", in_subprocess=True)
    assert result.clean, describe(result)


def test_every_row_runs_a_job_the_cli_has():
    # A row naming a job the dispatcher does not list would be left out of ROWS silently.
    from qadapt.cli import JOBS

    assert [c.name for c in CASES if c.job != "-" and c.job not in JOBS] == []


def test_every_job_that_reads_settings_has_rows():
    jobs = {c.job for c in ROWS}
    assert {"collect", "import", "split", "inspect", "pretrain", "finetune", "chain",
            "evaluate", "study", "score"} <= jobs, sorted(jobs)
