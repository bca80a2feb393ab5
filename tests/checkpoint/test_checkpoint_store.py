"""save_checkpoint / load_checkpoint: round trip, identity, determinism, replacing, spaces."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
import textwrap
from pathlib import Path

import gymnasium
import numpy as np
import pytest
import safetensors.torch
import torch

from qadapt.checkpoint import (
    FORMAT_VERSION,
    CheckpointMetadata,
    DatasetReference,
    load_checkpoint,
    save_checkpoint,
)
from qadapt.errors import BadInput

from .conftest import FIXED_TIME, make_metadata, make_training_state, make_weights
from .test_state_packing import assert_identical


def _files(path: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(path.iterdir())}


def test_round_trip_of_weights_metadata_and_training_state(saved):
    path, info, weights, metadata, state = saved
    loaded = load_checkpoint(path, load_training_state=True)
    assert sorted(p.name for p in path.iterdir()) == [
        "checkpoint.json", "training_state.safetensors", "weights.safetensors"]
    assert list(loaded.weights) == sorted(weights)
    for name, tensor in weights.items():
        assert loaded.weights[name].dtype == tensor.dtype
        assert torch.equal(loaded.weights[name], tensor), name
    assert loaded.metadata == metadata
    assert loaded.metadata.datasets[0] == DatasetReference("data/prior", "01" * 32)
    assert loaded.identity == info.identity
    assert loaded.has_training_state
    assert_identical(state, loaded.training_state)


def test_training_state_is_only_read_when_asked(saved):
    path, *_ = saved
    loaded = load_checkpoint(path)
    assert loaded.training_state is None and loaded.has_training_state


def test_weights_only_checkpoint_cannot_resume(tmp_path):
    path = tmp_path / "inference"
    save_checkpoint(path, make_weights(), make_metadata())
    assert sorted(p.name for p in path.iterdir()) == ["checkpoint.json", "weights.safetensors"]
    assert not load_checkpoint(path).has_training_state
    with pytest.raises(BadInput, match=rf"{path}: holds no training state"):
        load_checkpoint(path, load_training_state=True)


def test_the_files_are_plain_safetensors_and_json(saved):
    """Other tools can read the checkpoint: the weights with stock safetensors, the metadata
    with any JSON parser (strict: no NaN tokens)."""
    path, _, weights, *_ = saved
    plain = safetensors.torch.load_file(path / "weights.safetensors")
    assert sorted(plain) == sorted(weights)
    document = json.loads((path / "checkpoint.json").read_text(),
                          parse_constant=lambda token: pytest.fail(token))
    assert document["format_version"] == FORMAT_VERSION
    assert document["observation_space"]["low"][0] == "-inf"
    assert document["environment"] == {"id": "demo_envs/PickCell-v0", "kwargs": {
        "perturbations": {"finger_offset": 0.07}, "max_items": 4}}
    for name in ("weights.safetensors", "training_state.safetensors"):
        data = (path / name).read_bytes()
        assert document["files"][name] == {
            "sha256": hashlib.sha256(data).hexdigest(), "size_bytes": len(data)}


def test_identity_is_the_sha256_of_canonical_checkpoint_json(saved):
    path, info, *_ = saved
    document = json.loads((path / "checkpoint.json").read_text(encoding="utf-8"))
    canonical = json.dumps(document, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert info.identity == hashlib.sha256(canonical.encode("utf-8")).hexdigest()
    # Re-indenting the file keeps the content, hence the identity.
    (path / "checkpoint.json").write_text(json.dumps(document, indent=7), encoding="utf-8")
    assert load_checkpoint(path).identity == info.identity


def test_two_saves_are_byte_identical(tmp_path):
    first = save_checkpoint(tmp_path / "a", make_weights(), make_metadata(),
                            training_state=make_training_state())
    second = save_checkpoint(tmp_path / "b", make_weights(), make_metadata(),
                             training_state=make_training_state())
    assert _files(tmp_path / "a") == _files(tmp_path / "b")
    assert first.identity == second.identity


def test_weight_order_does_not_change_the_bytes(tmp_path):
    weights = make_weights()
    save_checkpoint(tmp_path / "a", weights, make_metadata())
    save_checkpoint(tmp_path / "b", dict(reversed(list(weights.items()))), make_metadata())
    assert _files(tmp_path / "a") == _files(tmp_path / "b")


def test_a_save_in_another_process_is_byte_identical(tmp_path):
    """Hash-seed or allocation order must not leak into the files (a fresh interpreter has
    its own hash seed and safetensors its own map order)."""
    save_checkpoint(tmp_path / "here", make_weights(), make_metadata(),
                    training_state=make_training_state())
    script = textwrap.dedent(f"""
        import sys
        sys.path.insert(0, {str(Path(__file__).resolve().parents[2])!r})
        from tests.checkpoint.conftest import make_metadata, make_training_state, make_weights
        from qadapt.checkpoint import save_checkpoint
        save_checkpoint({str(tmp_path / "there")!r}, make_weights(), make_metadata(),
                        training_state=make_training_state())
    """)
    subprocess.run([sys.executable, "-c", script], check=True, timeout=120,
                   env={"PYTHONHASHSEED": "12345", "PATH": "/usr/bin:/bin"})
    assert _files(tmp_path / "here") == _files(tmp_path / "there")


def test_any_change_changes_the_identity(tmp_path):
    base = save_checkpoint(tmp_path / "base", make_weights(), make_metadata())
    other_weights = make_weights()
    other_weights["count"] = torch.tensor(8)
    changed = [
        save_checkpoint(tmp_path / "w", other_weights, make_metadata()),
        save_checkpoint(tmp_path / "m", make_weights(), make_metadata(gradient_step=1201)),
        save_checkpoint(tmp_path / "s", make_weights(), make_metadata(), training_state={}),
    ]
    assert len({base.identity, *(c.identity for c in changed)}) == 4


def test_created_at_defaults_to_the_time_of_saving(tmp_path):
    from datetime import UTC, datetime

    before = datetime.now(UTC)
    info = save_checkpoint(tmp_path / "c", make_weights(), make_metadata(created_at=None))
    after = datetime.now(UTC)
    assert before <= info.created_at <= after
    assert load_checkpoint(tmp_path / "c").metadata.created_at == info.created_at


def test_existing_checkpoint_needs_overwrite(tmp_path):
    path = tmp_path / "ckpt"
    save_checkpoint(path, make_weights(0), make_metadata())
    old = _files(path)
    with pytest.raises(BadInput, match=rf"{path}: a checkpoint already exists"):
        save_checkpoint(path, make_weights(1), make_metadata())
    assert _files(path) == old
    info = save_checkpoint(path, make_weights(1), make_metadata(), overwrite=True)
    assert load_checkpoint(path).identity == info.identity
    assert _files(path) != old
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ckpt"]  # nothing left aside


def test_what_is_not_a_checkpoint_is_never_replaced(tmp_path):
    user_dir = tmp_path / "notes"
    user_dir.mkdir()
    (user_dir / "todo.txt").write_text("keep me")
    with pytest.raises(BadInput, match=rf"{user_dir}: exists and is not a checkpoint"):
        save_checkpoint(user_dir, make_weights(), make_metadata(), overwrite=True)
    a_file = tmp_path / "file"
    a_file.write_text("x")
    with pytest.raises(BadInput, match=rf"{a_file}: exists and is not a directory"):
        save_checkpoint(a_file, make_weights(), make_metadata(), overwrite=True)
    assert (user_dir / "todo.txt").read_text() == "keep me"


def test_an_empty_directory_and_missing_parents_are_fine(tmp_path):
    (tmp_path / "empty").mkdir()
    save_checkpoint(tmp_path / "empty", make_weights(), make_metadata())
    save_checkpoint(tmp_path / "runs" / "a" / "step-100", make_weights(), make_metadata())
    load_checkpoint(tmp_path / "empty")
    load_checkpoint(tmp_path / "runs" / "a" / "step-100")


# -- spaces ----------------------------------------------------------------------------------
def test_matching_spaces_load(saved):
    path, *_ = saved
    obs = gymnasium.spaces.Box(-np.inf, np.inf, (61,), dtype=np.float64)  # dtype not compared
    act = gymnasium.spaces.Box(-1.0, 1.0, (4,))
    assert load_checkpoint(path, expect_observation_space=obs, expect_action_space=act)


def test_observation_shape_mismatch_names_both_shapes(saved):
    path, *_ = saved
    with pytest.raises(BadInput) as caught:
        load_checkpoint(path, expect_observation_space=gymnasium.spaces.Box(-1, 1, (63,)))
    assert str(caught.value) == (
        f"checkpoint {path} was trained for observations of shape (61,), the dataset has (63,)"
    )


def test_action_bound_and_kind_mismatches(saved):
    path, *_ = saved
    with pytest.raises(BadInput, match=r"actions of shape \(4,\) with bounds \[-1.0, 1.0\] in "
                                       r"dimension 0, the env has shape \(4,\) with bounds "
                                       r"\[-2.0, 2.0\]"):
        load_checkpoint(path, expect_action_space=gymnasium.spaces.Box(-2.0, 2.0, (4,)),
                        what="env")
    with pytest.raises(BadInput, match=r"in a Box of shape \(4,\), the env has a Discrete space "
                                       r"of 3 choices"):
        load_checkpoint(path, expect_action_space=gymnasium.spaces.Discrete(3), what="env")


def test_dataset_space_descriptions_are_accepted(saved):
    from qadapt.spaces import describe_space

    path, *_ = saved
    ok = describe_space(gymnasium.spaces.Box(-np.inf, np.inf, (61,)))
    load_checkpoint(path, expect_observation_space=ok)
    wrong = describe_space(gymnasium.spaces.Box(-np.inf, np.inf, (60,)))
    with pytest.raises(BadInput, match=r"\(61,\), the dataset has \(60,\)"):
        load_checkpoint(path, expect_observation_space=wrong)


def test_discrete_spaces_round_trip(tmp_path):
    metadata = make_metadata(action_space=gymnasium.spaces.Discrete(5, start=-2))
    save_checkpoint(tmp_path / "d", make_weights(), metadata)
    expected = gymnasium.spaces.Discrete(5, start=-2)
    loaded = load_checkpoint(tmp_path / "d", expect_action_space=expected)
    assert loaded.metadata.action_space == gymnasium.spaces.Discrete(5, start=-2)
    with pytest.raises(BadInput, match="5 choices from -2 .*6 choices from -2"):
        load_checkpoint(tmp_path / "d", expect_action_space=gymnasium.spaces.Discrete(6, start=-2))


# -- bad arguments ---------------------------------------------------------------------------
@pytest.mark.parametrize("weights, fragment", [
    ({}, "non-empty dict"),
    ([torch.ones(1)], "non-empty dict"),
    ({"w": np.ones(2)}, "expected a tensor"),
    ({"": torch.ones(1)}, "not usable"),
    ({"__metadata__": torch.ones(1)}, "not usable"),
    ({3: torch.ones(1)}, "not usable"),
    ({"w": torch.ones(2).to_sparse()}, "dense CPU tensor"),
    ({"w": torch.ones(2, dtype=torch.complex128)}, "cannot be stored"),
])
def test_bad_weights_are_refused(tmp_path, weights, fragment):
    with pytest.raises(BadInput, match=fragment):
        save_checkpoint(tmp_path / "c", weights, make_metadata())
    assert not (tmp_path / "c").exists()


def test_shared_memory_weights_are_saved_as_copies(tmp_path):
    """With EMA off the acting network is critic 0: the same tensors under two names."""
    w = torch.randn(3, 3)
    save_checkpoint(tmp_path / "c", {"critic.w": w, "acting.w": w, "half": w[1:]},
                    make_metadata())
    loaded = load_checkpoint(tmp_path / "c").weights
    assert torch.equal(loaded["acting.w"], w) and torch.equal(loaded["half"], w[1:])


@pytest.mark.parametrize("overrides, fragment", [
    ({"gradient_step": -1}, "gradient_step"),
    ({"gradient_step": True}, "gradient_step"),
    ({"config_digest": ""}, "config_digest"),
    ({"parent_checkpoint": "abc"}, "parent_checkpoint"),
    ({"datasets": [{"path": "x", "sha256": "zz"}]}, "sha256"),
    ({"datasets": [{"path": "x"}]}, "missing"),
    ({"env_kwargs": {"g": float("nan")}}, "env_kwargs.g"),
    ({"network": {"widths": np.array([3])}}, "network.widths"),
    ({"extra": {1: "x"}}, "extra"),
    ({"observation_space": gymnasium.spaces.Box(0, 1, (2, 2))}, "observation_space"),
    ({"created_at": FIXED_TIME.replace(tzinfo=None)}, "created_at"),
])
def test_bad_metadata_is_refused_at_the_door(overrides, fragment):
    with pytest.raises(BadInput, match=fragment):
        make_metadata(**overrides)


def test_metadata_json_is_copied_and_tuples_become_lists():
    kwargs = {"sizes": (1, 2)}
    metadata = make_metadata(env_kwargs=kwargs)
    kwargs["sizes"] = "changed"
    assert metadata.env_kwargs == {"sizes": [1, 2]}
    assert isinstance(metadata, CheckpointMetadata)
