"""``qadapt import``: arrays exported from a collected dataset come back unchanged."""

from __future__ import annotations

import numpy as np

from tests.jobs.conftest import STEP_FIELDS, dataset_arrays, export_npz, inspect_json, run_ok


def _assert_same_steps(original: dict, imported: dict, names) -> None:
    for name in names:
        assert imported[name].dtype == original[name].dtype, name
        np.testing.assert_array_equal(imported[name], original[name], err_msg=name)


def test_import_of_exported_arrays_gives_the_same_dataset(pick_cell_dataset, tmp_path):
    source = export_npz(pick_cell_dataset, tmp_path / "export.npz", extra=("success",))
    out = tmp_path / "imported"
    done = run_ok("import", f"source={source}", f"out={out}", "+fields.success=success",
                  cwd=tmp_path)
    assert done.stdout.strip().splitlines()[-1] == f"dataset written to {out}"
    original, imported = dataset_arrays(pick_cell_dataset), dataset_arrays(out)
    # The episode split is not in the export: it is derived again from the done flags.
    _assert_same_steps(original, imported, STEP_FIELDS + ("success", "episode_lengths"))
    report = inspect_json(out, cwd=tmp_path)
    assert report["checksums_ok"] and report["episodes"] == 20
    assert report["success_rate"] == inspect_json(pick_cell_dataset, cwd=tmp_path)["success_rate"]


def test_import_with_renamed_arrays(pick_cell_dataset, tmp_path):
    source = export_npz(pick_cell_dataset, tmp_path / "renamed.npz",
                        rename={"observations": "obs", "next_observations": "obs_after"})
    with np.load(source, allow_pickle=False) as archive:
        assert "observations" not in archive.files and "obs" in archive.files
    out = tmp_path / "imported"
    run_ok("import", f"source={source}", f"out={out}", "fields.observations=obs",
           "fields.next_observations=obs_after", cwd=tmp_path)
    _assert_same_steps(dataset_arrays(pick_cell_dataset), dataset_arrays(out), STEP_FIELDS)
