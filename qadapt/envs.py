"""Building the environments jobs run in, from typed configs, and recording how they were built.

Holds:
    make_vector_env -- a gymnasium vector env for an EnvConfig and a VariationConfig.
    make_recorded_env -- the vector env a dataset's environment record describes.
    env_record -- {"id", "kwargs", "wrappers"}: what a dataset or checkpoint records.

The pick cell (and any env registered with a batched ``vector_entry_point``) is built with
``gymnasium.make_vec``'s batched implementation; other ids with gymnasium's SyncVectorEnv,
each sub-env wrapped with the variation's generic perturbation wrappers.
"""

from __future__ import annotations

from typing import Any

import gymnasium as gym

import demo_envs
from qadapt.config.schema import EnvConfig, VariationConfig
from qadapt.errors import BadInput
from qadapt.wrappers import apply_perturbations


def _kwargs(env: EnvConfig, variation: VariationConfig) -> dict[str, Any]:
    kwargs = dict(env.kwargs)
    if env.id == demo_envs.PICK_CELL_ID:
        if variation.perturbations:
            kwargs["perturbations"] = dict(variation.perturbations)
        if variation.reveal:
            kwargs["reveal"] = True
    elif variation.perturbations or variation.reveal:
        raise BadInput(
            f"variation {variation.name!r}: pick-cell perturbations and reveal apply only to "
            f"{demo_envs.PICK_CELL_ID}, not {env.id}; use variation.wrappers for other envs"
        )
    return kwargs


def env_record(env: EnvConfig, variation: VariationConfig) -> dict[str, Any]:
    """How to rebuild the env: gymnasium id, constructor kwargs, generic wrappers in order."""
    wrappers = [{"name": name, "kwargs": dict(kw)} for name, kw in variation.wrappers.items()]
    return {"id": env.id, "kwargs": _kwargs(env, variation), "wrappers": wrappers}


def make_vector_env(env: EnvConfig, variation: VariationConfig, num_envs: int):
    """A vector env of ``num_envs`` sub-envs (next-step autoreset)."""
    kwargs = _kwargs(env, variation)
    try:
        spec = gym.spec(env.id)
    except gym.error.Error as err:
        raise BadInput(f"env.id: {env.id!r} is not a registered gymnasium environment") from err
    try:
        if spec.vector_entry_point is not None and not variation.wrappers:
            return gym.make_vec(env.id, num_envs=num_envs, **kwargs)
        wrappers = [lambda e: apply_perturbations(e, variation.wrappers)] if (
            variation.wrappers) else None
        return gym.make_vec(env.id, num_envs=num_envs, vectorization_mode="sync",
                            wrappers=wrappers, **kwargs)
    except (TypeError, ValueError) as err:
        if isinstance(err, BadInput):
            raise
        raise BadInput(f"env {env.id}: {err}") from err


def make_recorded_env(record, num_envs: int):
    """A vector env rebuilt from a dataset's environment record (id, kwargs, wrappers)."""
    data = record.to_json() if hasattr(record, "to_json") else dict(record)
    kwargs = dict(data.get("kwargs") or {})
    env = EnvConfig(id=data["id"], kwargs={k: v for k, v in kwargs.items()
                                           if k not in ("perturbations", "reveal")})
    wrappers = {w["name"]: dict(w.get("kwargs") or {}) for w in data.get("wrappers") or []}
    variation = VariationConfig(name="recorded", perturbations=dict(kwargs.get("perturbations")
                                                                    or {}),
                                wrappers=wrappers, reveal=bool(kwargs.get("reveal", False)))
    return make_vector_env(env, variation, num_envs)
