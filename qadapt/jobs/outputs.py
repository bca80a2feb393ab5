"""Where a job writes: the ``out=`` path, or a folder in the Hydra run directory.

Holds:
    output_dir -- the job's output path, with its parent folder created.
    check_training_folder -- refuse a non-empty out= that is not a training run.
"""

from __future__ import annotations

from pathlib import Path

from hydra.core.hydra_config import HydraConfig

from qadapt import layout
from qadapt.errors import BadInput


def output_dir(out: str | None, default_name: str) -> Path:
    """``out`` if given, else ``default_name`` inside the Hydra run directory (the working
    directory for the jobs whose configs set ``hydra.run.dir: .``); the parent folder is
    created."""
    if out:
        path = Path(out)
    else:
        path = Path(HydraConfig.get().runtime.output_dir) / default_name
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise BadInput(f"out: cannot create {path.parent} ({err.strerror})") from err
    return path


# What a training run leaves in its folder (a killed one may have only some of them).
_RUN_ENTRIES = {layout.SUMMARY, layout.LINEAGE, layout.CHECKPOINTS, layout.LOGS}


def check_training_folder(out: Path) -> None:
    """BadInput unless ``out`` is absent, empty, or a training run (to resume or re-use):
    a folder holding anything else is the user's, and a run must not mix its files in."""
    if not out.exists():
        return
    if not out.is_dir():
        raise BadInput(f"out: {out} is a file, expected a folder for the run")
    entries = sorted(p.name for p in out.iterdir())
    if entries and not set(entries) & _RUN_ENTRIES:
        shown = ", ".join(entries[:3]) + (", ..." if len(entries) > 3 else "")
        raise BadInput(f"out: {out} holds files that are not a qadapt run ({shown}); choose "
                       "a new or empty folder")
