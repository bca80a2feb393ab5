"""Every kind of bad input gives a BadInput that names the file, the field and the problem."""

from __future__ import annotations

import hashlib
import os

import gymnasium
import numpy as np
import pytest

from qadapt.data import import_arrays, open_dataset
from qadapt.data.writing.writer import DatasetWriter
from qadapt.errors import BadInput
from qadapt.spaces import check_spaces

MAPPING = {
    "observations": "s",
    "actions": "a",
    "rewards": "r",
    "next_observations": "s2",
    "terminated": "term",
    "truncated": "trunc",
}
SPACES = {
    "observation_space": gymnasium.spaces.Box(-np.inf, np.inf, (3,)),
    "action_space": gymnasium.spaces.Box(-1.0, 1.0, (2,)),
}
ENV = {"id": "Pendulum-v1", "kwargs": {}, "wrappers": []}


def _theirs(rows=6):
    rng = np.random.default_rng(0)
    states = rng.standard_normal((rows + 1, 3)).astype(np.float32)
    term = np.zeros(rows, bool)
    term[-1] = True
    return {
        "s": states[:-1],
        "a": rng.uniform(-1, 1, (rows, 2)).astype(np.float32),
        "r": np.ones(rows, np.float32),
        "s2": states[1:],
        "term": term,
        "trunc": np.zeros(rows, bool),
    }


def _import(tmp_path, arrays, mapping=MAPPING, **spaces):
    np.savez(tmp_path / "theirs.npz", **arrays)
    return import_arrays(
        tmp_path / "theirs.npz", mapping, tmp_path / "out", env_record=ENV, **(spaces or SPACES)
    )


def _rewrite_field(path, name, array):
    """Replace a field's file and fix its checksum, so only the content check can object."""
    np.save(path / f"{name}.npy", array)
    import json

    manifest = json.loads((path / "manifest.json").read_text())
    manifest["fields"][name]["sha256"] = hashlib.sha256(
        (path / f"{name}.npy").read_bytes()
    ).hexdigest()
    (path / "manifest.json").write_text(json.dumps(manifest))


# -- missing or extra fields -----------------------------------------------------------------
def test_missing_field_in_manifest(write_dataset, edit_manifest):
    path, _ = write_dataset()
    edit_manifest(path, lambda m: m["fields"].pop("truncated"))
    with pytest.raises(BadInput, match=r"manifest.json.*missing field 'truncated'"):
        open_dataset(path)


def test_extra_field_in_manifest(write_dataset, edit_manifest):
    path, _ = write_dataset()
    edit_manifest(path, lambda m: m["fields"].update(costs=dict(m["fields"]["rewards"])))
    with pytest.raises(BadInput, match="unknown \\(extra\\) field 'costs'"):
        open_dataset(path)


def test_stray_array_file_in_the_directory(write_dataset):
    path, _ = write_dataset()
    np.save(path / "costs.npy", np.zeros(3))
    with pytest.raises(BadInput, match="'costs.npy' is not listed in the manifest"):
        open_dataset(path)


def test_missing_file(write_dataset):
    path, _ = write_dataset()
    os.remove(path / "actions.npy")
    with pytest.raises(BadInput, match=r"actions.npy \(field 'actions'\): file is missing"):
        open_dataset(path)


def test_import_missing_field(tmp_path):
    mapping = dict(MAPPING)
    del mapping["next_observations"]
    with pytest.raises(BadInput, match="missing field 'next_observations'.*cannot be derived"):
        _import(tmp_path, _theirs(), mapping)


def test_import_extra_field(tmp_path):
    with pytest.raises(BadInput, match="unknown \\(extra\\) field 'costs'"):
        _import(tmp_path, _theirs(), {**MAPPING, "costs": "r"})
    arrays = {**_theirs(), "unused": np.zeros(6)}
    with pytest.raises(BadInput, match="array 'unused' is not mapped"):
        _import(tmp_path, arrays)


# -- shapes ----------------------------------------------------------------------------------
def test_import_shape_mismatch_between_fields(tmp_path):
    arrays = _theirs()
    arrays["a"] = arrays["a"][:5]
    with pytest.raises(
        BadInput, match="theirs.npz.*shape mismatch.*'actions' has 5 rows but 'observations' has 6"
    ):
        _import(tmp_path, arrays)


def test_import_width_does_not_match_space(tmp_path):
    arrays = _theirs()
    arrays["s2"] = np.zeros((6, 4), np.float32)
    with pytest.raises(
        BadInput,
        match=r"\[s2\]: shape mismatch: field 'next_observations' has "
        r"shape \(6, 4\)",
    ):
        _import(tmp_path, arrays)


def test_file_shape_differs_from_manifest(write_dataset):
    path, _ = write_dataset()
    np.save(path / "rewards.npy", np.zeros(14, np.float32))
    with pytest.raises(
        BadInput,
        match=r"rewards.npy: field 'rewards' has shape \(14,\), the "
        r"manifest says \(15,\)",
    ):
        open_dataset(path)


def test_manifest_shape_inconsistent_with_counts(write_dataset, edit_manifest):
    path, _ = write_dataset()
    edit_manifest(path, lambda m: m["fields"]["actions"].update(shape=[15, 3]))
    with pytest.raises(BadInput, match=r"fields.actions.shape: got \[15, 3\], expected \[15, 2\]"):
        open_dataset(path)


# -- NaN / Inf -------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "key,field", [("s", "observations"), ("r", "rewards"), ("s2", "next_observations")]
)
@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_import_refuses_non_finite_values(tmp_path, key, field, bad):
    arrays = _theirs()
    arrays[key] = arrays[key].copy()
    arrays[key].reshape(-1)[4] = bad  # row 4 (1-D) or row 1 (3 columns)
    with pytest.raises(
        BadInput, match=f"theirs.npz \\[{key}\\]: field '{field}' has (NaN|infinity) at row"
    ):
        _import(tmp_path, arrays)
    assert not (tmp_path / "out").exists()


def test_writer_refuses_nan_observations(write_dataset, tmp_path):
    writer = DatasetWriter(
        tmp_path / "w", environment=ENV, collected_by={"kind": "random"}, **SPACES
    )
    obs = np.zeros((2, 3), np.float32)
    obs[1, 2] = np.nan
    with pytest.raises(BadInput, match="field 'observations' has NaN at row 1, column 2"):
        writer.add_episodes(
            observations=obs,
            actions=np.zeros((2, 2)),
            rewards=np.zeros(2),
            next_observations=np.zeros((2, 3)),
            terminated=np.array([0, 1], bool),
            truncated=np.zeros(2, bool),
            episode_lengths=[2],
        )
    writer.discard()


def test_nan_inside_a_stored_file_is_caught_on_open(write_dataset):
    path, arrays = write_dataset()
    observations = arrays["observations"].copy()
    observations[9, 1] = np.inf
    _rewrite_field(path, "observations", observations)
    with pytest.raises(
        BadInput, match="observations.npy: field 'observations' has infinity at row 9, column 1"
    ):
        open_dataset(path)


def test_float64_overflow_to_infinity_is_caught(tmp_path):
    arrays = _theirs()
    arrays["r"] = arrays["r"].astype(np.float64)
    arrays["r"][2] = 1e300  # finite in float64, infinite once stored as float32
    with pytest.raises(BadInput, match="field 'rewards' has infinity at row 2"):
        _import(tmp_path, arrays)


# -- action bounds ---------------------------------------------------------------------------
def test_import_refuses_actions_outside_bounds(tmp_path):
    arrays = _theirs()
    arrays["a"] = arrays["a"].copy()
    arrays["a"][3, 1] = 1.5
    with pytest.raises(
        BadInput,
        match=r"\[a\]: field 'actions': action 1.5 at row 3, column 1 is "
        r"outside the declared bounds \[-1.0, 1.0\]",
    ):
        _import(tmp_path, arrays)


def test_discrete_action_not_in_space(tmp_path):
    arrays = _theirs()
    arrays["a"] = np.array([[0], [1], [2], [1], [0], [1]], np.float32)
    with pytest.raises(BadInput, match="action 2.0 at row 2 is not an integer in \\[0, 1\\]"):
        _import(
            tmp_path,
            arrays,
            observation_space=SPACES["observation_space"],
            action_space=gymnasium.spaces.Discrete(2),
        )


def test_out_of_bounds_action_in_stored_file(write_dataset):
    path, arrays = write_dataset()
    actions = arrays["actions"].copy()
    actions[0, 0] = -3.0
    _rewrite_field(path, "actions", actions)
    with pytest.raises(BadInput, match="actions.npy: field 'actions' action -3.0 at row 0"):
        open_dataset(path)


# -- dtypes ----------------------------------------------------------------------------------
def test_import_wrong_dtype(tmp_path):
    arrays = _theirs()
    arrays["s"] = arrays["s"].astype(np.int32)
    with pytest.raises(
        BadInput,
        match=r"\[s\]: field 'observations' has dtype int32, expected a "
        "floating dtype",
    ):
        _import(tmp_path, arrays)
    arrays = _theirs()
    arrays["term"] = arrays["term"].astype(np.float32)
    with pytest.raises(BadInput, match="field 'terminated' has dtype float32, expected bool"):
        _import(tmp_path, arrays)


def test_stored_file_of_wrong_dtype(write_dataset):
    path, arrays = write_dataset()
    np.save(path / "rewards.npy", arrays["rewards"].astype(np.float64))
    with pytest.raises(
        BadInput, match="rewards.npy: field 'rewards' has dtype float64 .*expected float32"
    ):
        open_dataset(path)
    np.save(path / "rewards.npy", arrays["rewards"].astype(">f4"))  # big-endian float32
    with pytest.raises(BadInput, match="field 'rewards' has dtype >f4|dtype float32 \\(>f4\\)"):
        open_dataset(path)


# -- empty -----------------------------------------------------------------------------------
def test_empty_import(tmp_path):
    arrays = {k: v[:0] for k, v in _theirs().items()}
    with pytest.raises(BadInput, match="no rows; an empty dataset is refused"):
        _import(tmp_path, arrays)


def test_empty_writer(tmp_path):
    writer = DatasetWriter(
        tmp_path / "e", environment=ENV, collected_by={"kind": "random"}, **SPACES
    )
    with pytest.raises(BadInput, match="no transitions to write; an empty dataset is refused"):
        writer.finish()
    assert not (tmp_path / "e").exists()


def test_empty_manifest_counts(write_dataset, edit_manifest):
    path, _ = write_dataset()
    edit_manifest(path, lambda m: m.update(transition_count=0))
    with pytest.raises(BadInput, match="transition_count is 0; an empty dataset is refused"):
        open_dataset(path)


# -- corrupt or truncated files --------------------------------------------------------------
def test_checksum_mismatch_names_file_and_field(write_dataset):
    path, _ = write_dataset()
    target = path / "next_observations.npy"
    data = bytearray(target.read_bytes())
    data[200] ^= 0x40
    target.write_bytes(bytes(data))
    with pytest.raises(
        BadInput, match="next_observations.npy: field 'next_observations': checksum mismatch"
    ):
        open_dataset(path)


def test_truncated_npy_file(write_dataset):
    path, _ = write_dataset()
    target = path / "observations.npy"
    target.write_bytes(target.read_bytes()[:-7])
    with pytest.raises(
        BadInput,
        match=r"observations.npy \(field 'observations'\): file is "
        "truncated",
    ):
        open_dataset(path, verify=False)  # caught before any verification


def test_not_an_npy_file(write_dataset):
    path, _ = write_dataset()
    (path / "rewards.npy").write_bytes(b"hello, not numpy")
    with pytest.raises(BadInput, match="rewards.npy \\(field 'rewards'\\): not a readable .npy"):
        open_dataset(path)


def test_unknown_format_version(write_dataset, edit_manifest):
    path, _ = write_dataset()
    edit_manifest(path, lambda m: m.update(format_version=2))
    with pytest.raises(
        BadInput, match="format_version 2 is not supported; this qadapt reads version 1"
    ):
        open_dataset(path)


def test_manifest_that_is_not_json(write_dataset):
    path, _ = write_dataset()
    (path / "manifest.json").write_text('{"format": NaN}')
    with pytest.raises(BadInput, match="manifest.json: not valid JSON"):
        open_dataset(path)


# -- files outside the directory -------------------------------------------------------------
@pytest.mark.parametrize("name", ["../rewards.npy", "/etc/passwd", "sub/rewards.npy", ".."])
def test_manifest_naming_a_file_outside_its_directory(write_dataset, edit_manifest, name):
    path, _ = write_dataset()
    edit_manifest(path, lambda m: m["fields"]["rewards"].update(file=name))
    with pytest.raises(
        BadInput,
        match="fields.rewards.file.*not a plain file name|"
        "fields.rewards.file.*expected a plain file name",
    ):
        open_dataset(path)


def test_symlink_leaving_the_directory(write_dataset, tmp_path):
    path, _ = write_dataset()
    outside = tmp_path / "elsewhere.npy"
    os.replace(path / "rewards.npy", outside)
    os.symlink(outside, path / "rewards.npy")
    with pytest.raises(BadInput, match="rewards.npy.*outside the dataset directory.*symlink"):
        open_dataset(path)


# -- spaces ----------------------------------------------------------------------------------
def test_check_spaces_names_both_shapes(write_dataset):
    dataset = open_dataset(write_dataset()[0])
    check_spaces(
        dataset, gymnasium.spaces.Box(-np.inf, np.inf, (3,)), gymnasium.spaces.Box(-1.0, 1.0, (2,))
    )  # matches: no error
    with pytest.raises(
        BadInput,
        match=r"observation space mismatch: the dataset has a Box of "
        r"shape \(3,\) but the env has a Box of shape \(61,\)",
    ):
        check_spaces(
            dataset, gymnasium.spaces.Box(-1, 1, (61,)), gymnasium.spaces.Box(-1.0, 1.0, (2,))
        )
    with pytest.raises(BadInput, match=r"action space mismatch at dimension 0.*checkpoint"):
        check_spaces(
            dataset,
            gymnasium.spaces.Box(-np.inf, np.inf, (3,)),
            gymnasium.spaces.Box(-2.0, 2.0, (2,)),
            what="checkpoint",
        )


# -- pickles ---------------------------------------------------------------------------------
class _WritesMarker:
    """Unpickling this object writes a marker file (via os.system at load time)."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return (os.system, (f"touch {self.marker}",))


def _write_trap_npy(path, array):
    """Write ``array`` (dtype object) as a .npy file the way numpy pickles object arrays; only
    writes, so no pickle is ever loaded here."""
    import pickle

    with open(path, "wb") as handle:
        np.lib.format.write_array_header_1_0(
            handle, {"descr": "|O", "fortran_order": False, "shape": array.shape})
        pickle.dump(array, handle, protocol=3)


def _object_array(marker):
    array = np.empty(2, dtype=object)
    array[0] = _WritesMarker(marker)
    array[1] = _WritesMarker(marker)
    return array


def test_pickled_object_array_in_dataset_is_refused_unread(write_dataset, tmp_path):
    marker = tmp_path / "unpickled.marker"
    path, _ = write_dataset()
    _write_trap_npy(path / "rewards.npy", _object_array(marker))
    with pytest.raises(BadInput, match="rewards.npy.*holds Python objects.*unpickling"):
        open_dataset(path)
    assert not marker.exists()


def test_pickled_object_array_in_import_is_refused_unread(tmp_path):
    marker = tmp_path / "unpickled.marker"
    arrays = _theirs()
    source = tmp_path / "npys"
    source.mkdir()
    for key, value in arrays.items():
        np.save(source / f"{key}.npy", value)
    _write_trap_npy(source / "r.npy", _object_array(marker))
    with pytest.raises(BadInput, match="r.npy.*holds Python objects"):
        import_arrays(source, MAPPING, tmp_path / "out", env_record=ENV, **SPACES)
    np.savez(tmp_path / "evil.npz", **{**arrays, "r": _object_array(marker)})
    with pytest.raises(BadInput, match="cannot be read without unpickling"):
        import_arrays(tmp_path / "evil.npz", MAPPING, tmp_path / "out", env_record=ENV, **SPACES)
    assert not marker.exists()
    # The payload really is a pickle that would run the marker (checked by reading its bytes,
    # never by unpickling: nothing in qadapt or its tests loads a pickle).
    assert f"touch {marker}".encode() in (source / "r.npy").read_bytes()


# -- episode structure -----------------------------------------------------------------------
def test_done_flag_in_the_middle_of_an_episode(tmp_path):
    arrays = _theirs()
    arrays["trunc"] = arrays["trunc"].copy()
    arrays["trunc"][2] = True
    mapping = {**MAPPING, "episode_index": "ep"}
    arrays["ep"] = np.zeros(6, np.int64)
    with pytest.raises(
        BadInput,
        match="field 'truncated' is set at row 2, which is not the last step of its episode",
    ):
        _import(tmp_path, arrays, mapping)


def test_episode_numbers_that_come_back(tmp_path):
    arrays = {**_theirs(), "ep": np.array([0, 0, 1, 1, 0, 0])}
    arrays["term"] = np.array([0, 1, 0, 1, 0, 1], bool)
    with pytest.raises(BadInput, match=r"\[ep\]: episode 0 appears again at row 4"):
        _import(tmp_path, arrays, {**MAPPING, "episode_index": "ep"})
