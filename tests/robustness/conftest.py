"""Fixtures of the reliability suite: one workspace of real job outputs per test session."""

from __future__ import annotations

import pytest

from tests.robustness.bad_inputs import Workspace, build_workspace


@pytest.fixture(scope="session")
def workspace(tmp_path_factory) -> Workspace:
    """A collected pick-cell dataset, a Pendulum dataset, exported arrays, a pretrain run."""
    return build_workspace(tmp_path_factory.mktemp("robustness") / "workspace")
