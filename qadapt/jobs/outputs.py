"""Where a job writes: the ``out=`` path, or a folder in the Hydra run directory.

Holds:
    output_dir -- the job's output path, with its parent folder created.
"""

from __future__ import annotations

from pathlib import Path

from hydra.core.hydra_config import HydraConfig

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
