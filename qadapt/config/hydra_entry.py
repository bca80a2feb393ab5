"""Running a job through Hydra, with bad input reported in one line and exit status 2.

Holds:
    CONFIG_DIR -- the configs/ folder (config groups as folders, one primary file per job).
    refuse_instantiation -- refuse overrides that would make Hydra build objects (_target_).
    run_job -- compose a job's config from command-line overrides, validate it, run it.

Hydra keeps its own features (``--multirun``, ``--cfg job``, ``--help``,
``hydra.run.dir=...``). Before handing over, a plain run's overrides are composed once with
Hydra's compose API, so an unknown group option, a wrong type or a failed check stops the job
before any work with one line naming the key, instead of Hydra's multi-line report.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

import hydra
from hydra import compose, initialize_config_dir
from hydra.core.global_hydra import GlobalHydra

from qadapt.config.schema import register_schemas, to_typed
from qadapt.errors import BadInput, TrainingFailed


def _config_dir() -> Path:
    """configs/ inside the installed package (a wheel ships it as qadapt/configs), else the
    one at the top of the source tree (a checkout or an editable install)."""
    package = Path(__file__).resolve().parents[1]
    packaged = package / "configs"
    return packaged if packaged.is_dir() else package.parent / "configs"


CONFIG_DIR = _config_dir()
# A ``_target_`` key inside a dict value (``key={_target_: os.system}``), not in a path.
_TARGET_IN_VALUE = re.compile(r"(^|[{,\s])['\"]?_target_['\"]?\s*:")
HYDRA_FLAGS_WITH_VALUE = {"--cfg", "-c", "--package", "-p", "--config-name", "-cn",
                          "--config-path", "-cp", "--config-dir", "-cd", "--info", "-i"}


def _first_line(err: BaseException, with_cause: bool = True) -> str:
    """One line from Hydra's and OmegaConf's multi-line errors: the message, the key, the
    cause and, for an unknown group option, the options there are."""
    text = str(err).strip() or type(err).__name__
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    message = lines[0]
    key = next((line for line in lines if line.startswith("full_key:")), None)
    if key and "full_key" not in message:
        message = f"{key.split(',')[0].removeprefix('full_key: ')}: {message}"
    if "Available options in" in text:
        raw = text.split("Available options in", 1)[1].split("Config search path", 1)[0]
        options = [o.strip() for o in raw.splitlines()[1:] if o.strip()]
        options = [o for o in options if not o.endswith("_schema")]
        message += f"; available: {', '.join(options)}"
    cause = err.__cause__ or err.__context__
    if with_cause and cause is not None and str(cause).strip():
        detail = _first_line(cause, with_cause=False)
        if detail not in message:
            message += f" ({detail})"
    return message


def fail(job: str, err: BaseException) -> None:
    """Print ``qadapt JOB: message`` on one line and exit with status 2."""
    print(f"qadapt {job}: {_first_line(err)}", file=sys.stderr)
    raise SystemExit(2)


def _plain_overrides(argv: Sequence[str]) -> list[str] | None:
    """Overrides of a single run, or None when Hydra must see the arguments itself."""
    out: list[str] = []
    skip = False
    for arg in argv:
        if skip:
            skip = False
            continue
        # --cfg/--info only show the config: one still missing mandatory values (``???``)
        # must show, not be refused.
        if arg in ("--multirun", "-m", "--help", "-h", "--hydra-help", "--version",
                   "--shell-completion", "-sc", "--cfg", "-c", "--info", "-i"):
            return None
        if arg in HYDRA_FLAGS_WITH_VALUE:
            skip = True
            continue
        if arg.startswith("-"):
            continue
        out.append(arg)
    return out


def refuse_instantiation(job: str, argv: Sequence[str]) -> None:
    """Refuse command-line overrides that would make Hydra instantiate an object: any
    ``_target_`` key or value, and ``hydra.callbacks`` (Hydra builds every callback listed
    there at start-up, calling whatever its ``_target_`` names). qadapt itself never
    instantiates from a config; launchers are chosen by name (``launcher=...``)."""
    for arg in argv:
        key, _, value = arg.partition("=")
        key = key.lstrip("+~")
        builds = "_target_" in re.split(r"[./]", key) or _TARGET_IN_VALUE.search(value)
        if builds or key.startswith(("hydra.callbacks", "hydra/callbacks")):
            fail(job, BadInput(f"{key}: overrides that make Hydra build objects (_target_, "
                               "hydra.callbacks) are refused"))


def check_config(job: str, overrides: list[str], schema: type) -> None:
    """Compose the job's config with Hydra's compose API and build the typed object."""
    GlobalHydra.instance().clear()
    try:
        with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
            cfg = compose(config_name=job, overrides=overrides)
        to_typed(cfg, schema)
    except BadInput as err:
        fail(job, err)
    except Exception as err:  # Hydra's and OmegaConf's composition errors
        fail(job, err)
    finally:
        GlobalHydra.instance().clear()


def run_job(job: str, schema: type, task: Callable, argv: Sequence[str]) -> int:
    """Run ``task(typed_config)`` for ``qadapt JOB argv...`` under Hydra; return exit status."""
    register_schemas()
    refuse_instantiation(job, argv)
    overrides = _plain_overrides(argv)
    if overrides is not None:
        check_config(job, overrides, schema)

    status = {"code": 0}

    def _body(cfg) -> None:
        try:
            typed = to_typed(cfg, schema)
            status["code"] = int(task(typed) or 0)
        except BadInput as err:
            fail(job, err)
        except TrainingFailed as err:
            print(f"qadapt {job}: {_first_line(err, with_cause=False)}", file=sys.stderr)
            raise SystemExit(3) from None

    # Hydra names the job (help title, log file) after the last part of the task function's
    # module; without this every job would be called "hydra_entry".
    _body.__module__ = f"qadapt.{job}"
    _entry = hydra.main(config_path=str(CONFIG_DIR), config_name=job, version_base="1.3")(_body)

    saved = sys.argv
    sys.argv = [f"qadapt {job}", *argv]
    try:
        _entry()
    finally:
        sys.argv = saved
    return status["code"]
