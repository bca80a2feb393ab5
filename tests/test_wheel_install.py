"""A regular (non-editable) install of the wheel runs jobs with no source tree in sight.

The wheel is built from a copy of the files pyproject.toml names (so no ``build/`` folder
lands in the repo), checked against the wheel format (PEP 427: a zip archive whose paths are
relative to site-packages), installed into a fresh venv, and ``qadapt collect`` and
``qadapt pretrain`` run from a folder outside the repo. The fresh venv reaches qadapt's
dependencies through a ``.pth`` file naming the project venv's site-packages directory: a
plain path line there is appended to ``sys.path`` and the ``.pth`` files inside that
directory are not run (the ``site`` module's documented behaviour), so the editable
install's finder, which would map ``qadapt`` to the source tree, stays inactive.
No network: ``--no-build-isolation`` builds with the project venv's setuptools.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import sysconfig
import tomllib
import zipfile
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
TIMEOUT = 180


def _run(args, cwd: Path) -> subprocess.CompletedProcess:
    """Run ``args`` with an environment that cannot point Python at the source tree."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("PYTHONPATH", "PYTHONHOME", "PYTHONSTARTUP", "VIRTUAL_ENV")}
    env.update(PYTHONNOUSERSITE="1", OMP_NUM_THREADS="1")
    return subprocess.run([str(a) for a in args], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=TIMEOUT)


def _run_ok(args, cwd: Path) -> subprocess.CompletedProcess:
    done = _run(args, cwd)
    assert done.returncode == 0, (
        f"{' '.join(map(str, args))} exited {done.returncode}:\n{done.stdout}\n{done.stderr}")
    return done


def _source_copy(target: Path) -> Path:
    """The files the build reads, as pyproject.toml names them: packages, their folders
    (package-dir), the readme."""
    config = tomllib.loads((REPO / "pyproject.toml").read_text())
    setuptools_cfg = config["tool"]["setuptools"]
    package_dir = setuptools_cfg.get("package-dir", {})
    tops = {name.split(".")[0] for name in setuptools_cfg["packages"]
            if name not in package_dir}
    folders = tops | {path.split("/")[0] for path in package_dir.values()}
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc")
    target.mkdir()
    for folder in sorted(folders):
        shutil.copytree(REPO / folder, target / folder, ignore=ignore)
    for name in ("pyproject.toml", config["project"]["readme"]):
        shutil.copy2(REPO / name, target / name)
    return target


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    pytest.importorskip("setuptools", minversion="68",
                        reason="building without network needs setuptools>=68 in the venv")
    root = tmp_path_factory.mktemp("wheel")
    source = _source_copy(root / "src")
    _run_ok([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
             "--disable-pip-version-check", "-q", "-w", root / "dist", source], cwd=root)
    (built,) = (root / "dist").glob("qadapt-*.whl")
    return built


@pytest.fixture(scope="module")
def venv(wheel, tmp_path_factory) -> Path:
    """A fresh venv holding the wheel, with the project venv's dependencies on its path."""
    venv = tmp_path_factory.mktemp("venv") / "venv"
    _run_ok([sys.executable, "-m", "venv", "--without-pip", venv], cwd=venv.parent)
    python = venv / "bin" / "python"
    site = Path(_run_ok([python, "-c", "import sysconfig; print(sysconfig.get_path('purelib'))"],
                        cwd=venv.parent).stdout.strip())
    deps = dict.fromkeys(sysconfig.get_path(key) for key in ("purelib", "platlib"))
    (site / "_project_dependencies.pth").write_text("".join(f"{d}\n" for d in deps))
    _run_ok([sys.executable, "-m", "pip", "--python", python, "install", "--no-deps",
             "--disable-pip-version-check", "-q", wheel], cwd=venv.parent)
    return venv


def test_the_wheel_holds_every_config_file_and_every_package(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    configs = {p.relative_to(REPO / "configs").as_posix() for p in (REPO / "configs").rglob("*")
               if p.is_file() and "__pycache__" not in p.parts}
    assert {"collect.yaml", "pretrain.yaml", "env/pick_cell.yaml"} <= configs
    assert {f"qadapt/configs/{name}" for name in configs} <= names
    assert not any(name.startswith("configs/") for name in names)  # no top-level package
    # pyproject.toml lists the packages by hand: every package folder must be in it.
    for top in ("qadapt", "demo_envs"):
        for init in (REPO / top).rglob("__init__.py"):
            assert init.relative_to(REPO).as_posix() in names, f"{init.parent} not packaged"
    dist_info = {name.split("/")[0] for name in names if ".dist-info/" in name}
    assert dist_info == {"qadapt-0.1.0.dist-info"}
    assert "qadapt-0.1.0.dist-info/entry_points.txt" in names


def test_the_installed_wheel_runs_jobs_outside_the_repo(venv, tmp_path):
    work = tmp_path / "work"
    work.mkdir()
    probe = _run_ok([venv / "bin" / "python", "-c", (
        "import json, sys, qadapt\n"
        "from qadapt.config.hydra_entry import CONFIG_DIR\n"
        "print(json.dumps({'qadapt': qadapt.__file__, 'configs': str(CONFIG_DIR),"
        " 'path': sys.path, 'finders': [repr(f) for f in sys.meta_path]}))")], cwd=work)
    found = json.loads(probe.stdout)
    site = venv.resolve() / "lib"
    assert Path(found["qadapt"]).resolve().is_relative_to(site), found["qadapt"]
    assert Path(found["configs"]).is_relative_to(site), found["configs"]
    assert str(REPO) not in found["path"] and str(REPO / "qadapt") not in found["path"]
    assert not any("editable" in finder.lower() for finder in found["finders"])

    qadapt = venv / "bin" / "qadapt"
    data, run = work / "data", work / "run"
    _run_ok([qadapt, "collect", "env=pick_cell", "variation=none", "policy=scripted",
             "episodes=4", "num_envs=4", "seed=0", "progress=false", f"out={data}"], cwd=work)
    assert {"manifest.json", "observations.npy", "actions.npy", "rewards.npy"} <= {
        p.name for p in data.iterdir()}
    done = _run_ok([qadapt, "pretrain", f"data={data}", "steps=10", "eval=off",
                    "learner.batch_size=32", "learner.refresh_every=5", "progress=false",
                    f"out={run}"], cwd=work)
    assert f"outputs written to {run}" in done.stdout
    for name in ("summary.json", "lineage.json", "checkpoints/last/weights.safetensors",
                 "checkpoints/last/checkpoint.json"):
        assert (run / name).is_file(), name
    # The jobs wrote only under out=: nothing else in the working folder (no Hydra run folders).
    assert sorted(p.name for p in work.iterdir()) == ["data", "run"]
