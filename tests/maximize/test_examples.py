"""The runnable Examples in qadapt.maximize's docstrings run and print what they show."""

from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["base", "checks", "cem", "exhaustive", "factory"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(f"qadapt.maximize.{name}")
    outcome = doctest.testmod(module, verbose=False)
    assert outcome.failed == 0
    if name != "checks":  # the checks module holds plain functions with no examples
        assert outcome.attempted > 0
