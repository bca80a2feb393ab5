"""The ``preview`` job: the scripted picker in the pick cell and under every variation.

Holds:
    preview_rows -- success figures of the scripted picker per variation.
    main -- the job's command line: ``qadapt preview [--episodes N] [--seed S]``.

It shows what the demo environment offers before any learning: the base cell, each
perturbation family at its default magnitude, and all of them at once, with success rates
and 95% Wilson intervals for a near-noiseless picker and for the default-noise picker that
makes prior datasets.
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Sequence

import gymnasium as gym

import demo_envs
from demo_envs.pick_cell import FAMILIES, ScriptedPicker
from qadapt.rollout import run_episodes
from qadapt.stats import wilson_interval

NEAR_NOISELESS = 0.02


def _variations() -> dict[str, dict[str, float] | None]:
    out: dict[str, dict[str, float] | None] = {"none": None}
    out.update({name: {name: family.default} for name, family in FAMILIES.items()})
    return out


def preview_rows(episodes: int, seed: int) -> list[dict]:
    """One dict per variation: magnitude and successes for both picker noise levels."""
    rows = []
    default_noise = ScriptedPicker().noise
    for name, perturbations in _variations().items():
        row: dict = {
            "variation": name,
            "magnitude": None if perturbations is None else perturbations[name],
            "episodes": episodes,
        }
        for label, noise in (("near_noiseless", NEAR_NOISELESS), ("default_noise", default_noise)):
            envs = gym.make_vec(
                demo_envs.PICK_CELL_ID, num_envs=episodes, perturbations=perturbations
            )
            result = run_episodes(envs, ScriptedPicker(noise=noise, seed=seed), seed=seed)
            row[label] = {
                "noise": noise,
                "successes": result.successes,
                "mean_length": float(result.lengths.mean()),
            }
        rows.append(row)
    return rows


def _cell(successes: int, episodes: int) -> str:
    low, high = wilson_interval(successes, episodes)
    return f"{100 * successes / episodes:5.1f}% [{100 * low:5.1f}, {100 * high:5.1f}]"


def main(argv: Sequence[str]) -> int:
    parser = argparse.ArgumentParser(
        prog="qadapt preview",
        description="Run the scripted picker in the pick cell and under each variation.",
    )
    parser.add_argument("--episodes", type=int, default=1000, help="episodes per variation")
    parser.add_argument("--seed", type=int, default=0, help="seed of the scenes and noise")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    args = parser.parse_args(list(argv))
    if args.episodes < 1:
        parser.error(f"--episodes: got {args.episodes}, expected a positive integer")
    rows = preview_rows(args.episodes, args.seed)
    if args.json:
        print(json.dumps(rows))
        return 0
    default_noise = rows[0]["default_noise"]["noise"]
    print(f"Scripted picker, {args.episodes} episodes per row, seed {args.seed}; "
          "success rate [95% Wilson interval]")
    quiet_header = f"near-noiseless ({NEAR_NOISELESS})"
    noisy_header = f"default noise ({default_noise})"
    print(f"{'variation':<16}{'magnitude':>10}   {quiet_header:<26}{noisy_header:<26}")
    for row in rows:
        magnitude = "-" if row["magnitude"] is None else f"{row['magnitude']:g}"
        print(
            f"{row['variation']:<16}{magnitude:>10}   "
            f"{_cell(row['near_noiseless']['successes'], args.episodes):<26}"
            f"{_cell(row['default_noise']['successes'], args.episodes):<26}"
        )
    return 0
