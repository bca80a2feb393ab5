"""Building the environments jobs run in, from typed configs, and recording how they were built.

Holds:
    registered_spec -- gymnasium's spec for an env id, importing the package that registers it.
    env_creator -- the class or function an env id's entry point names.
    env_kwargs -- the constructor kwargs of an env under a variation.
    make_vector_env -- a gymnasium vector env for an EnvConfig and a VariationConfig.
    make_recorded_env -- the vector env a dataset's environment record describes.
    env_record -- {"id", "kwargs", "wrappers"}: what a dataset or checkpoint records.

The pick cell (and any env registered with a batched ``vector_entry_point``) is built with
``gymnasium.make_vec``'s batched implementation; other ids with gymnasium's SyncVectorEnv,
each sub-env wrapped with the variation's generic perturbation wrappers.

Every env, the demo pick cell included, is reached through gymnasium's registry: nothing here
names one. A variation's ``perturbations`` and ``reveal`` go to the env's constructor, so they
work with any env whose constructor takes them (the pick cell does); ``wrappers`` work with any
Box-space env.
"""

from __future__ import annotations

import difflib
import importlib
import inspect
from typing import Any

import gymnasium as gym
from gymnasium.envs.registration import load_env_creator

from qadapt.config.schema import EnvConfig, VariationConfig
from qadapt.errors import BadInput
from qadapt.wrappers import apply_perturbations


def registered_spec(env_id: str):
    """gymnasium's ``EnvSpec`` for ``env_id``, or BadInput naming close registered ids.

    ``module:Name-v0`` imports ``module`` first (gymnasium's own convention). An id
    ``namespace/Name-v0`` that is not registered yet, whose namespace is an importable package,
    has that package imported once: a package that registers its envs when imported (as
    ``demo_envs`` does) then needs no import anywhere else.

    Example:
        >>> registered_spec("CartPole-v1").id
        'CartPole-v1'
        >>> registered_spec("demo_envs/PickCell-v0").vector_entry_point is not None
        True
        >>> try:
        ...     registered_spec("CartPol-v1")
        ... except BadInput as err:
        ...     print(str(err).split("; ")[1].split(",")[0])
        close matches: CartPole-v1
    """
    name = env_id.split(":", 1)[1] if ":" in env_id else env_id
    namespace = name.split("/", 1)[0] if "/" in name else None
    if ":" in env_id:
        _import_quietly(env_id.split(":", 1)[0])
    elif name not in gym.registry and namespace and namespace.isidentifier():
        _import_quietly(namespace)
    try:
        return gym.spec(name)
    except gym.error.Error as err:
        close = difflib.get_close_matches(name, list(gym.registry), n=5, cutoff=0.6)
        hint = f"; close matches: {', '.join(close)}" if close else ""
        raise BadInput(f"env.id: {env_id!r} is not a registered gymnasium environment"
                       f"{hint}") from err


def _import_quietly(module: str) -> None:
    try:
        importlib.import_module(module)
    except ImportError as err:
        raise BadInput(f"env.id: could not import {module!r}, which should register the env "
                       f"({err})") from err


def env_creator(env_id: str):
    """The class (or function) that builds the env ``env_id``: its registered entry point,
    loaded with gymnasium's own loader."""
    creator = registered_spec(env_id).entry_point
    return load_env_creator(creator) if isinstance(creator, str) else creator


def _takes(env_id: str, name: str) -> bool:
    """Whether the env's constructor accepts a keyword ``name`` (or any keyword)."""
    creator = env_creator(env_id)
    try:
        parameters = inspect.signature(creator).parameters.values()
    except (TypeError, ValueError):  # no signature to read: let the constructor decide
        return True
    return any(p.name == name or p.kind is inspect.Parameter.VAR_KEYWORD for p in parameters)


def env_kwargs(env: EnvConfig, variation: VariationConfig) -> dict[str, Any]:
    """``env.kwargs`` plus the variation's constructor settings (``perturbations``,
    ``reveal``); BadInput if the env's constructor takes no such argument."""
    kwargs = dict(env.kwargs)
    settings = {"perturbations": dict(variation.perturbations)} if variation.perturbations else {}
    if variation.reveal:
        settings["reveal"] = True
    for name in settings:
        if not _takes(env.id, name):
            raise BadInput(
                f"variation {variation.name!r}: {env.id} takes no {name!r} argument (the "
                "pick cell's perturbation families); use variation.wrappers for other envs"
            )
    return {**kwargs, **settings}


def env_record(env: EnvConfig, variation: VariationConfig) -> dict[str, Any]:
    """How to rebuild the env: gymnasium id, constructor kwargs, generic wrappers in order."""
    wrappers = [{"name": name, "kwargs": dict(kw)} for name, kw in variation.wrappers.items()]
    return {"id": env.id, "kwargs": env_kwargs(env, variation), "wrappers": wrappers}


def make_vector_env(env: EnvConfig, variation: VariationConfig, num_envs: int):
    """A vector env of ``num_envs`` sub-envs (next-step autoreset)."""
    kwargs = env_kwargs(env, variation)
    spec = registered_spec(env.id)
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
