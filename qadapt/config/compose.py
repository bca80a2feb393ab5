"""Composing configs in-process: a job's typed config from overrides, a variation by name.

Holds:
    compose_typed -- ``configs/NAME.yaml`` plus overrides -> the job's dataclass (validated).
    variation_by_name -- the VariationConfig of one option of the ``variation`` config group.

Both work inside a running job (any launcher, the job's own search path) and outside one
(qadapt's configs/ folder), so a study cell composes a fine-tuning run exactly the way
``qadapt finetune OVERRIDES`` does.
"""

from __future__ import annotations

import re
from typing import Any

from hydra import compose, initialize_config_dir
from hydra.core.global_hydra import GlobalHydra

from qadapt.config.hydra_entry import CONFIG_DIR, _first_line
from qadapt.config.schema import VariationConfig, register_schemas, to_typed
from qadapt.errors import BadInput


def _compose(config_name: str | None, overrides: list[str]):
    if GlobalHydra.instance().is_initialized():
        return compose(config_name=config_name, overrides=overrides)
    with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
        return compose(config_name=config_name, overrides=overrides)


def compose_typed(config_name: str, overrides: list[str], schema: type, key: str) -> Any:
    """The typed config of ``qadapt CONFIG_NAME OVERRIDES`` (BadInput names ``key`` and the
    first line of the composition error)."""
    register_schemas()
    try:
        return to_typed(_compose(config_name, overrides), schema)
    except BadInput as err:
        raise BadInput(f"{key}: {err}") from err
    except Exception as err:  # Hydra's composition errors
        message = re.sub(r"^In '[^']*': ", "", _first_line(err))
        raise BadInput(f"{key}: {message}") from err


def variation_by_name(name: str, key: str = "variations") -> VariationConfig:
    """The typed config of ``configs/variation/NAME.yaml`` (or a stored option of that group).

    BadInput names ``key``, the unknown option and the options there are.
    """
    register_schemas()
    try:
        return to_typed(_compose(None, [f"+variation={name}"]).variation, VariationConfig)
    except BadInput:
        raise
    except Exception as err:  # Hydra's composition errors: name the option and the choices
        # "In '<primary config>': Could not find ..." -> "Could not find ..."
        message = re.sub(r"^In '[^']*': ", "", _first_line(err))
        raise BadInput(f"{key}: {message}") from err
