"""The package's exported names: lazily imported, never shadowed by a submodule."""

from __future__ import annotations

import importlib
import inspect
import subprocess
import sys

import qadapt.data


def test_every_exported_name_is_the_object_not_a_module():
    for home in set(qadapt.data._HOMES.values()):
        importlib.import_module(f"qadapt.data.{home}")  # importing submodules first
    for name in qadapt.data.__all__:
        assert not inspect.ismodule(getattr(qadapt.data, name)), name


def test_reading_datasets_does_not_import_torch():
    code = (
        "import sys; from qadapt.data import open_dataset, collect, inspect_dataset; "
        "print('torch' in sys.modules)"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    )
    assert result.stdout.strip() == "False"
