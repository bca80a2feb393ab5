"""``qadapt score``: rank checkpoints from held-out logged data, without running an env.

Holds:
    checkpoints_below -- the checkpoints a path names (itself, or every one below it).
    episode_fingerprints -- one SHA-256 per episode of a dataset (observations and actions).
    HeldOutData -- a held-out dataset's transitions, start states and episode fingerprints.
    score_checkpoint -- one checkpoint's three offline signals on held-out data.
    score_table -- the printed table of score_checkpoint results, with each signal's rank.
    score_job -- the job body: every checkpoint -> score.json.
    main -- the console entry point (Hydra overrides on the command line).

Per checkpoint, three signals of its greedy policy, all in the data's reward units:
- **fitted Q evaluation** (learner.policy_value): a fresh critic fitted to the greedy
  policy's value on the held-out transitions; its mean over the episodes' start states, with a
  95% percentile bootstrap interval over those episodes (the critic held fixed: the interval
  covers which episodes were held out, not the fit's own error);
- **TD error**: the root-mean-square one-step error of the checkpoint's own critic on the
  held-out transitions under its own greedy policy (lower is better; it includes the
  environment's noise, so even an exact critic has some);
- **own Q**: the checkpoint's own critic at the start states (what it believes it is worth;
  an over-estimating critic ranks itself high).
"""

from __future__ import annotations

import dataclasses
import hashlib
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import torch
from omegaconf import OmegaConf

from qadapt import layout
from qadapt.checkpoint import load_checkpoint
from qadapt.config.hydra_entry import run_job
from qadapt.config.score_schema import ScoreJob, register_score_schema
from qadapt.data import open_dataset
from qadapt.errors import BadInput
from qadapt.files import strict_json, write_text_durably
from qadapt.jobs.outputs import output_dir
from qadapt.learner.assembly import observation_statistics, transition_arrays
from qadapt.learner.config import in_reward_units
from qadapt.learner.loading import checkpoint_maximizer, load_q_network
from qadapt.learner.policy_value import (
    ValueFitSettings,
    fit_policy_value,
    greedy_actions,
    own_critic_signals,
    start_values,
)
from qadapt.locking import hold_directory
from qadapt.nets import QNetworkConfig, build_q_network
from qadapt.spaces import action_bounds
from qadapt.stats import bootstrap_mean_interval

# What a checkpoint that records no value units was trained with (the learner's defaults).
_DEFAULT_UNITS = {"gamma": 0.9, "reward_scale": 1.0, "reward_shift": 0.0}


def checkpoints_below(path: str | Path) -> list[Path]:
    """``path`` if it is a checkpoint, else every checkpoint below it, sorted; BadInput if
    there is none."""
    given = Path(path)
    if (given / layout.CHECKPOINT_RECORD).exists():
        return [given]
    found = sorted(p.parent for p in given.rglob(layout.CHECKPOINT_RECORD))
    if not found:
        raise BadInput(f"ckpt: {given} holds no checkpoint")
    return found


def episode_fingerprints(dataset) -> list[str]:
    """SHA-256 of each episode's observations and actions (float32 bytes), in episode order:
    the same logged episode gives the same fingerprint in any dataset that holds it."""
    index = np.asarray(dataset.array("episode_index"))
    obs, act = dataset.array("observations"), dataset.array("actions")
    starts = np.flatnonzero(np.r_[True, index[1:] != index[:-1]])
    ends = np.r_[starts[1:], index.shape[0]]
    prints = []
    for start, end in zip(starts, ends, strict=True):
        digest = hashlib.sha256(np.ascontiguousarray(obs[start:end], np.float32).tobytes())
        digest.update(np.ascontiguousarray(act[start:end], np.float32).tobytes())
        prints.append(digest.hexdigest())
    return prints


@dataclasses.dataclass
class HeldOutData:
    """The held-out dataset as scoring needs it."""

    dataset: Any
    arrays: Any
    start_observations: np.ndarray
    fingerprints: list[str]
    statistics: tuple[torch.Tensor, torch.Tensor]

    @classmethod
    def open(cls, path: str) -> HeldOutData:
        dataset = open_dataset(path)
        if dataset.transition_count == 0 or dataset.episode_count == 0:
            raise BadInput(f"data: {path} holds no episodes; score needs held-out episodes")
        index = np.asarray(dataset.array("episode_index"))
        starts = np.flatnonzero(np.r_[True, index[1:] != index[:-1]])
        arrays = transition_arrays(dataset)
        return cls(dataset=dataset, arrays=arrays,
                   start_observations=np.asarray(arrays.observations[starts], np.float32),
                   fingerprints=episode_fingerprints(dataset),
                   statistics=observation_statistics([arrays]))


def _overlap(metadata, held_out: HeldOutData, seen: dict[str, set[str]]) -> tuple[int, list]:
    """(held-out episodes that also trained the checkpoint, training datasets not found)."""
    mine, missing = set(held_out.fingerprints), []
    count = 0
    for ref in metadata.datasets:
        if ref.sha256 not in seen:
            try:
                seen[ref.sha256] = set(episode_fingerprints(open_dataset(ref.path)))
            except BadInput:
                missing.append(ref.path)
                continue
        count += len(mine & seen[ref.sha256])
    return count, missing


def score_checkpoint(path: Path, held_out: HeldOutData, fit: ValueFitSettings, seed: int,
                     reps: int) -> dict[str, Any]:
    """The three signals of one checkpoint (module docstring) as a JSON-able dict."""
    data = held_out.dataset
    network, loaded = load_q_network(path, data.observation_space, data.action_space,
                                     what="held-out dataset")
    meta = loaded.metadata
    action_space = meta.action_space
    maximizer = checkpoint_maximizer(meta, action_space, str(path))
    units = {**_DEFAULT_UNITS, **{k: v for k, v in (meta.network.get("value") or {}).items()
                                  if k in _DEFAULT_UNITS}}
    gamma, reward_map = units["gamma"], (units["reward_scale"], units["reward_shift"])
    arrays = held_out.arrays
    next_actions = greedy_actions(network, maximizer, np.asarray(arrays.next_observations),
                                  seed=seed)
    first_actions = greedy_actions(network, maximizer, held_out.start_observations, seed=seed)
    config = dataclasses.replace(QNetworkConfig.from_dict(meta.network["q_network"]),
                                 output="linear", initial_value=0.0)
    low, high = (torch.as_tensor(b) for b in action_bounds(action_space))

    def make_network():
        critic = build_q_network(int(data.obs_dim), low, high, config)
        critic.set_normalizer(*held_out.statistics)
        return critic

    critic = fit_policy_value(arrays, next_actions, make_network, gamma, fit, reward_map)
    raw = in_reward_units(start_values(critic, held_out.start_observations, first_actions),
                          gamma, *reward_map)
    low_v, high_v = bootstrap_mean_interval(raw, resamples=reps, seed=seed)
    rmse, own = own_critic_signals(network, arrays, next_actions, held_out.start_observations,
                                   first_actions, gamma, reward_map)
    return {
        "checkpoint": str(path),
        "checkpoint_sha256": loaded.identity,
        "gradient_step": meta.gradient_step,
        "parent_checkpoint": meta.parent_checkpoint,
        "datasets": [{"path": d.path, "sha256": d.sha256} for d in meta.datasets],
        "gamma": gamma, "reward_scale": reward_map[0], "reward_shift": reward_map[1],
        "fqe_value": float(raw.mean()), "fqe_low": low_v, "fqe_high": high_v,
        "fqe_start_values": raw.tolist(),
        "td_error": rmse / reward_map[0],
        "own_q": float(in_reward_units(own, gamma, *reward_map).mean()),
    }


def _ranks(values: list[float], higher_is_better: bool) -> list[int]:
    order = sorted(range(len(values)), key=lambda i: -values[i] if higher_is_better
                   else values[i])
    ranks = [0] * len(values)
    for place, i in enumerate(order, start=1):
        ranks[i] = place
    return ranks


def score_table(results: list[dict[str, Any]]) -> str:
    """One line per checkpoint, best FQE value first: rank, checkpoint, FQE value with its
    interval, TD error and own Q, each with the rank it alone would give."""
    name_width = max(10, *(len(r["checkpoint"]) for r in results))
    header = (f"{'rank':>4}  {'checkpoint'.ljust(name_width)}  "
              f"{'FQE start value [95% bootstrap]':<33}  {'TD error (rank)':>16}  "
              f"{'own Q (rank)':>15}")
    lines = [header, "-" * len(header)]
    for r in sorted(results, key=lambda r: r["rank_fqe"]):
        value = f"{r['fqe_value']:9.4f} [{r['fqe_low']:9.4f}, {r['fqe_high']:9.4f}]"
        lines.append(f"{r['rank_fqe']:>4}  {r['checkpoint'].ljust(name_width)}  {value:<33}  "
                     f"{r['td_error']:>10.4f} ({r['rank_td_error']:>2})  "
                     f"{r['own_q']:>9.4f} ({r['rank_own_q']:>2})")
    return "\n".join(lines)


def score_job(cfg: ScoreJob) -> int:
    # Everything the user named is checked before the first fit.
    fit = cfg.fit_settings()
    paths = [p for given in cfg.ckpt for p in checkpoints_below(given)]
    held_out = HeldOutData.open(cfg.data)
    torch.set_num_threads(cfg.threads)
    seen: dict[str, set[str]] = {}
    overlaps = {}
    for path in paths:
        meta = load_checkpoint(path, expect_observation_space=held_out.dataset.observation_space,
                               expect_action_space=held_out.dataset.action_space,
                               what="held-out dataset").metadata
        shared, missing = _overlap(meta, held_out, seen)
        overlaps[str(path)] = {"episodes": shared, "unchecked_datasets": missing}
        if shared and not cfg.allow_overlap:
            raise BadInput(f"data: {shared} of its {len(held_out.fingerprints)} episodes also "
                           f"trained {path}; hold out other episodes (qadapt split) or set "
                           "allow_overlap=true")
    out = output_dir(cfg.out, "score")
    if out.exists() and any(p for p in out.iterdir() if not p.name.startswith(".")) and not (
            out / layout.SCORE).exists():
        raise BadInput(f"out: {out} holds files that are not a score's; give a new folder")
    with hold_directory(out, "score"):
        for path, overlap in overlaps.items():
            if overlap["episodes"]:
                print(f"warning: {overlap['episodes']} held-out episodes also trained {path} "
                      "(allow_overlap=true); its scores are optimistic")
        results = [score_checkpoint(p, held_out, fit, cfg.seed, cfg.reps) for p in paths]
        for key, higher in (("fqe", True), ("td_error", False), ("own_q", True)):
            figures = [r["fqe_value" if key == "fqe" else key] for r in results]
            for r, rank in zip(results, _ranks(figures, higher), strict=True):
                r[f"rank_{key}"] = rank
        for r in results:
            r["overlap"] = overlaps[r["checkpoint"]]
        try:
            out.mkdir(parents=True, exist_ok=True)
        except OSError as err:
            raise BadInput(f"out: cannot create {out} ({err.strerror})") from err
        record = {"data": str(held_out.dataset.path),
                  "data_sha256": held_out.dataset.fingerprint,
                  "episodes": len(held_out.fingerprints), "confidence": 0.95,
                  "fit": dataclasses.asdict(fit), "seed": cfg.seed, "results": results}
        write_text_durably(out / layout.SCORE, strict_json(record, indent=2))
        write_text_durably(out / "config.yaml", OmegaConf.to_yaml(OmegaConf.structured(cfg)))
    print(score_table(results))
    print(f"outputs written to {out}")
    return 0


def main(argv: Sequence[str]) -> int:
    register_score_schema()
    return run_job("score", ScoreJob, score_job, argv)
