"""``qadapt evaluate``: greedy CEM episodes of checkpoints under variations, with intervals.

Holds:
    recorded_env -- the EnvConfig a checkpoint's metadata records (perturbations left out).
    evaluate_checkpoint -- one checkpoint under one variation: counts, intervals, raw figures.
    evaluation_table -- the printed table of a list of evaluate_checkpoint results.
    evaluate_job -- the job body: every (checkpoint, variation) pair -> evaluation.json.
    main -- the console entry point (Hydra overrides on the command line).

Which environment: ``env`` unset evaluates each checkpoint in the environment its metadata
records (gymnasium id and constructor arguments; the recorded perturbations and reveal
setting belong to the training data's variation and are dropped, so the variation asked for
here is what applies). ``env=pick_cell`` or ``env=gym env.id=...`` evaluates every
checkpoint in that environment instead; a checkpoint trained for other observation or action
spaces is refused (exit 2, naming both shapes).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import torch
from omegaconf import OmegaConf

from qadapt import layout
from qadapt.checkpoint import load_checkpoint
from qadapt.config.compose import variation_by_name
from qadapt.config.evaluate_schema import EvaluateJob, register_evaluate_schema
from qadapt.config.hydra_entry import run_job
from qadapt.config.schema import EnvConfig, VariationConfig
from qadapt.envs import env_record, make_vector_env
from qadapt.errors import BadInput
from qadapt.files import write_text_durably
from qadapt.jobs.outputs import output_dir
from qadapt.layout import resolve_checkpoint
from qadapt.learner.loading import checkpoint_policy
from qadapt.locking import hold_directory
from qadapt.rollout import run_episodes
from qadapt.stats import bootstrap_mean_interval, wilson_interval

# Recorded by the pick cell for its variation; evaluation applies its own variation instead.
_VARIATION_KWARGS = ("perturbations", "reveal")


def recorded_env(metadata) -> EnvConfig:
    """The env a checkpoint was trained for, as an EnvConfig without the variation's kwargs."""
    kwargs = {k: v for k, v in dict(metadata.env_kwargs).items() if k not in _VARIATION_KWARGS}
    return EnvConfig(id=metadata.env_id, kwargs=kwargs)


def evaluate_checkpoint(
    ckpt_path: str | Path,
    env_cfg: EnvConfig | None,
    variation_cfg: VariationConfig,
    episodes: int,
    seed: int,
    threads: int = 1,
    num_envs: int = 256,
) -> dict[str, Any]:
    """Run ``episodes`` greedy CEM episodes of a checkpoint in one environment and variation.

    Args:
        ckpt_path: a checkpoint directory or a run directory (its selected checkpoint).
        env_cfg: the environment; None means the one the checkpoint records.
        variation_cfg: what is perturbed.
        episodes: episodes to run (one per sub-env, at most ``num_envs`` side by side).
        seed: sub-env k of episode block b is reset with ``seed + b * num_envs + k`` (so the
            scenes do not depend on ``num_envs``); the policy's CEM draws use ``seed`` too.
        threads: torch threads for the network (1 in parallel sweeps).

    Returns a JSON-able dict: "checkpoint" (resolved path), "checkpoint_sha256" (identity
    hash), "variation" (name), "env" ({"id", "kwargs", "wrappers"} as run), "successes",
    "episodes", "success_rate", "wilson_low"/"wilson_high" (95% Wilson score interval; all
    three None when the env reports no success: "success_reported" False),
    "returns" [episodes] and "lengths" [episodes] per episode, "success" [episodes] (bool per
    episode, for paired comparisons), "mean_return", "return_low"/"return_high" (95%
    percentile bootstrap of the mean, seeded with ``seed``) and "mean_length" (steps).
    """
    for key, value in (("episodes", episodes), ("threads", threads), ("num_envs", num_envs)):
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise BadInput(f"{key}: got {value!r}, expected a positive integer")
    torch.set_num_threads(threads)
    path = resolve_checkpoint(ckpt_path, key="ckpt")
    if env_cfg is None:
        env_cfg = recorded_env(load_checkpoint(path).metadata)
    width = min(num_envs, episodes)
    envs = make_vector_env(env_cfg, variation_cfg, width)
    try:
        policy = checkpoint_policy(path, envs, seed=seed)
    except BadInput as err:
        raise BadInput(f"env {env_cfg.id}: {err}") from err
    blocks = []
    for start in range(0, episodes, width):
        if episodes - start < width:  # the last, shorter block
            envs = make_vector_env(env_cfg, variation_cfg, episodes - start)
        blocks.append(run_episodes(envs, policy, seed=seed + start))
    success = np.concatenate([b.success for b in blocks])
    returns = np.concatenate([b.returns for b in blocks]).astype(np.float64)
    lengths = np.concatenate([b.lengths for b in blocks]).astype(np.int64)
    successes = int(success.sum())
    reported = all(b.success_reported for b in blocks)
    wilson_low, wilson_high = wilson_interval(successes, episodes) if reported else (None, None)
    return_low, return_high = bootstrap_mean_interval(returns, seed=seed)
    return {
        "checkpoint": str(path),
        "checkpoint_sha256": policy.provenance["checkpoint_sha256"],
        "variation": variation_cfg.name,
        "env": env_record(env_cfg, variation_cfg),
        "successes": successes,
        "episodes": episodes,
        "success_reported": reported,
        "success_rate": successes / episodes if reported else None,
        "wilson_low": wilson_low,
        "wilson_high": wilson_high,
        "returns": returns.tolist(),
        "lengths": lengths.tolist(),
        "success": success.tolist(),
        "mean_return": float(returns.mean()),
        "return_low": return_low,
        "return_high": return_high,
        "mean_length": float(lengths.mean()),
    }


def _kwargs_text(result: dict[str, Any]) -> str:
    kwargs = result.get("env", {}).get("kwargs") or {}
    return ", ".join(f"{k}={v}" for k, v in sorted(kwargs.items())) or "-"


def evaluation_table(results: list[dict[str, Any]]) -> str:
    """One line per result: checkpoint, variation and the env kwargs it ran with, success
    with its interval ("n/a" where the env reports none), return, length."""
    names = [r["checkpoint"] for r in results]
    name_width = max(10, *(len(n) for n in names))
    variation_width = max(9, *(len(r["variation"]) for r in results))
    kwargs_width = max(10, *(len(_kwargs_text(r)) for r in results))
    header = (f"{'checkpoint'.ljust(name_width)}  {'variation'.ljust(variation_width)}  "
              f"{'env kwargs'.ljust(kwargs_width)}  {'succeeded':>11}  "
              f"{'rate [95% Wilson]':<22}  {'mean return [95% bootstrap]':<30}  "
              f"{'mean length':>11}")
    lines = [header, "-" * len(header)]
    for name, r in zip(names, results, strict=True):
        if r["success_rate"] is None:
            counted, rate = f"{'n/a':>11}", "n/a (no success flag)"
        else:
            counted = f"{r['successes']:>5} / {r['episodes']:<3}"
            rate = (f"{100 * r['success_rate']:5.1f}% [{100 * r['wilson_low']:5.1f}, "
                    f"{100 * r['wilson_high']:5.1f}]")
        ret = f"{r['mean_return']:8.3f} [{r['return_low']:8.3f}, {r['return_high']:8.3f}]"
        lines.append(f"{name.ljust(name_width)}  {r['variation'].ljust(variation_width)}  "
                     f"{_kwargs_text(r).ljust(kwargs_width)}  {counted}  {rate:<22}  "
                     f"{ret:<30}  {r['mean_length']:>11.1f}")
    return "\n".join(lines)


def _variations(cfg: EvaluateJob) -> list[VariationConfig]:
    if cfg.variations is None:
        return [cfg.variation]
    return [variation_by_name(name) for name in cfg.variations]


def evaluate_job(cfg: EvaluateJob) -> int:
    # Everything the user named is checked before the first episode runs.
    variations = _variations(cfg)
    for path in cfg.ckpt:
        resolve_checkpoint(path, key="ckpt")
    out = output_dir(cfg.out, "evaluation")
    with hold_directory(out, "evaluate"):
        return _write_evaluations(cfg, variations, out)


def _write_evaluations(cfg: EvaluateJob, variations: list[VariationConfig], out: Path) -> int:
    results = [
        evaluate_checkpoint(path, cfg.env, variation, cfg.episodes, cfg.seed,
                            threads=cfg.threads, num_envs=cfg.num_envs)
        for path in cfg.ckpt for variation in variations
    ]
    try:
        out.mkdir(exist_ok=True)
    except OSError as err:
        raise BadInput(f"out: cannot create {out} ({err.strerror})") from err
    record = {"episodes": cfg.episodes, "seed": cfg.seed, "confidence": 0.95,
              "results": results}
    write_text_durably(out / layout.EVALUATION, json.dumps(record, indent=2, allow_nan=False))
    write_text_durably(out / "config.yaml", OmegaConf.to_yaml(OmegaConf.structured(cfg)))
    print(evaluation_table(results))
    print(f"outputs written to {out}")
    return 0


def main(argv: Sequence[str]) -> int:
    register_evaluate_schema()
    return run_job("evaluate", EvaluateJob, evaluate_job, argv)
