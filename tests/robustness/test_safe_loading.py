"""Configs cannot make qadapt (or Hydra on its behalf) import or call arbitrary code.

qadapt never calls ``hydra.utils.instantiate`` (or ``call``, ``get_class``, ``get_method``):
jobs turn the composed config into typed dataclasses and pick components by name. Hydra itself
builds the objects ``hydra.callbacks`` lists, so ``qadapt.config.hydra_entry`` refuses those
overrides and any ``_target_``. A config directory passed with ``--config-dir`` is trusted
like code: Hydra builds the callbacks and launchers a config there names.
"""

from __future__ import annotations

import re

import pytest

from tests.robustness.bad_inputs import REPO, run_in_process

HYDRA_BUILDERS = re.compile(r"\binstantiate\b|hydra\.utils|\bget_method\b|\bget_class\b|_target_\b")


def test_qadapt_never_asks_hydra_to_build_objects():
    sources = sorted((REPO / "qadapt").rglob("*.py"))
    assert len(sources) > 20
    hits = [f"{p.relative_to(REPO)}:{n}" for p in sources
            for n, line in enumerate(p.read_text().splitlines(), 1)
            if HYDRA_BUILDERS.search(line) and p.name != "hydra_entry.py"]
    assert hits == []
    # The configs name no _target_ either (launchers are Hydra's own, chosen by name).
    configs = [p for p in (REPO / "configs").rglob("*.yaml") if "_target_" in p.read_text()]
    assert configs == []


@pytest.mark.parametrize("overrides", [
    ["+policy._target_=builtins.open", "+policy._args_=[{marker},w]"],
    ["+_target_=builtins.open", "+_args_=[{marker},w]"],
    ["+env.kwargs={{_target_: builtins.open, _args_: [{marker}, w]}}"],
    ["+hydra.callbacks.trap._target_=builtins.open", "+hydra.callbacks.trap.file={marker}",
     "+hydra.callbacks.trap.mode=w"],
    ["+hydra.callbacks={{trap: {{_target_: builtins.open, file: {marker}, mode: w}}}}"],
    ["--multirun", "+hydra.callbacks.trap._target_=builtins.open",
     "+hydra.callbacks.trap.file={marker}", "+hydra.callbacks.trap.mode=w"],
], ids=["policy target", "root target", "target in env kwargs", "hydra callback",
        "callback as a dict", "multirun"])
def test_target_overrides_are_refused_and_run_nothing(overrides, tmp_path):
    marker = tmp_path / "built.marker"
    argv = ["collect", "policy=random", "episodes=1", "num_envs=1", f"out={tmp_path / 'out'}",
            "progress=false", *(o.format(marker=marker) for o in overrides)]
    done = run_in_process(argv, tmp_path, tmp_path / "hydra")
    assert done.code == 2, done.stderr
    assert len(done.stderr.strip().splitlines()) == 1 and "_target_" in done.stderr
    assert not marker.exists()
    assert not (tmp_path / "out").exists()


def test_a_path_that_merely_contains_the_word_is_accepted(tmp_path):
    out = tmp_path / "cell__target_run"
    argv = ["collect", "policy=random", "episodes=1", "num_envs=1", f"out={out}",
            "progress=false"]
    done = run_in_process(argv, tmp_path, tmp_path / "hydra")
    assert done.code == 0, done.stderr
    assert (out / "manifest.json").exists()


@pytest.mark.parametrize("env_id", ["os:system", "qadapt.cli:main"])
def test_env_ids_that_would_import_a_module_are_refused(env_id, tmp_path):
    # gymnasium's make() imports the part before ":" (gymnasium/envs/registration.py); an id
    # from a config or from a dataset's manifest must not get that far.
    from qadapt.config.schema import EnvConfig
    from qadapt.envs import make_recorded_env
    from qadapt.errors import BadInput

    with pytest.raises(BadInput, match="env.id"):
        EnvConfig(id=env_id)
    with pytest.raises(BadInput, match="env.id"):
        make_recorded_env({"id": env_id, "kwargs": {}, "wrappers": []}, 1)
