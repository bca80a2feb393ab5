"""Shared helpers for the job tests: run the console script, fingerprint a folder, export arrays.

Every job runs as its own process (``python -m qadapt.cli ...``) with the working directory
set to a temporary folder, so a job run without out= writes there, not in the repo.
"""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

STEP_FIELDS = (
    "observations",
    "actions",
    "rewards",
    "next_observations",
    "terminated",
    "truncated",
)


def run_qadapt(*args, cwd: Path) -> subprocess.CompletedProcess:
    """``qadapt ARGS...`` in a fresh process; the result holds exit status, stdout, stderr."""
    return subprocess.run(
        [sys.executable, "-m", "qadapt.cli", *map(str, args)],
        cwd=cwd, capture_output=True, text=True, timeout=120,
    )


def run_ok(*args, cwd: Path) -> subprocess.CompletedProcess:
    """Like run_qadapt, but fail the test (showing stderr) unless the exit status is 0."""
    done = run_qadapt(*args, cwd=cwd)
    assert done.returncode == 0, f"qadapt {' '.join(map(str, args))} failed:\n{done.stderr}"
    return done


def inspect_json(path: Path, cwd: Path) -> dict:
    """``qadapt inspect PATH --json`` parsed."""
    return json.loads(run_ok("inspect", path, "--json", cwd=cwd).stdout)


def tree_fingerprint(root: Path) -> dict[str, str]:
    """Every file (SHA-256 of its bytes) and folder under ``root``, by relative path."""
    prints = {}
    for path in sorted(root.rglob("*")):
        key = path.relative_to(root).as_posix()
        prints[key] = "<dir>" if path.is_dir() else hashlib.sha256(path.read_bytes()).hexdigest()
    return prints


def dataset_arrays(path: Path) -> dict[str, np.ndarray]:
    """Every ``.npy`` array of a dataset folder, loaded without pickles."""
    return {p.stem: np.load(p, allow_pickle=False) for p in sorted(Path(path).glob("*.npy"))}


def export_npz(dataset: Path, target: Path, rename: dict[str, str] | None = None,
               extra: tuple[str, ...] = ()) -> Path:
    """Write a dataset's step arrays (plus ``extra`` fields) to ``target`` with np.savez,
    under our field names or the names ``rename`` gives them."""
    arrays = dataset_arrays(dataset)
    rename = rename or {}
    np.savez(target, **{rename.get(name, name): arrays[name] for name in STEP_FIELDS + extra})
    return target


@pytest.fixture(scope="module")
def pick_cell_dataset(tmp_path_factory) -> Path:
    """A pick-cell dataset, finger_offset variation, scripted picker, 20 episodes, seed 3."""
    root = tmp_path_factory.mktemp("collected")
    out = root / "prior"
    run_ok("collect", "env=pick_cell", "variation=finger_offset", "policy=scripted",
           "episodes=20", "seed=3", f"out={out}", "progress=false", cwd=root)
    return out


@pytest.fixture(scope="module")
def prior(tmp_path_factory) -> Path:
    """64 scripted-picker episodes in the base cell (module-wide)."""
    import gymnasium as gym

    import demo_envs
    from demo_envs.pick_cell import ScriptedPicker
    from qadapt.data import collect

    out = tmp_path_factory.mktemp("data") / "prior"
    envs = gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=32)
    collect(envs, ScriptedPicker(noise=0.15, seed=0), episodes=64, out=out, seed=0,
            env_record={"id": demo_envs.PICK_CELL_ID, "kwargs": {}, "wrappers": []},
            progress=False)
    return out
