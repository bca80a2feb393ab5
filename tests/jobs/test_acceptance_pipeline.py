"""Acceptance: the whole pipeline on the pick cell with one perturbation, through the real jobs.

Collect prior data with the scripted picker, pretrain a base, explore the perturbed cell
(finger_offset) with the base policy, fine-tune warm and from scratch on the same new data,
and evaluate all three on the perturbed cell. The warm fine-tuned checkpoint must beat the
base there: one-sided Fisher exact test (scipy.stats.fisher_exact, the reference library) at
p < 0.01, on 1,000 evaluation episodes each. It must also beat scratch on the same data.

Sizes follow the demo (docs/learner.md): 2,000 prior episodes, 3,000 pretraining steps, 100
new episodes, 1,000 fine-tuning steps at the fine-tuning default (learner=light_penalty).
Everything is seeded, so the figures are the same on every run with the same torch build.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from scipy.stats import fisher_exact

EVAL_EPISODES = 1000
pytestmark = pytest.mark.slow


def _qadapt(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    done = subprocess.run([sys.executable, "-m", "qadapt.cli", *args],
                          cwd=cwd, capture_output=True, text=True, timeout=900)
    assert done.returncode == 0, f"qadapt {' '.join(args)} failed:\n{done.stderr[-3000:]}"
    return done


def _successes(run: Path, variation: str, cwd: Path) -> tuple[int, int]:
    out = cwd / f"eval_{run.name}"
    _qadapt("evaluate", f"ckpt={run}", f"variation={variation}", f"episodes={EVAL_EPISODES}",
            f"out={out}", cwd=cwd)
    result = json.loads((out / "evaluation.json").read_text())["results"][0]
    return result["successes"], result["episodes"]


def test_warm_fine_tuning_beats_the_base_and_scratch_on_the_perturbed_cell(tmp_path):
    prior, base, new = tmp_path / "prior", tmp_path / "base", tmp_path / "new"
    quiet = "progress=false"
    _qadapt("collect", "policy=scripted", "policy.noise=0.15", "episodes=2000", "seed=0",
            f"out={prior}", quiet, cwd=tmp_path)
    _qadapt("pretrain", f"data={prior}", "steps=3000", "seed=0", f"out={base}", quiet,
            cwd=tmp_path)
    _qadapt("collect", "policy=checkpoint", f"policy.checkpoint={base}", "policy.noise=0.1",
            "variation=finger_offset", "episodes=100", "seed=1", f"out={new}", quiet,
            cwd=tmp_path)
    runs = {}
    for init in ("warm", "scratch"):
        runs[init] = tmp_path / init
        _qadapt("finetune", f"init={init}", f"base={base}", f"prior={prior}", f"new={new}",
                "share=0.5", "steps=1000", "seed=0", f"out={runs[init]}", "eval.every=250",
                "eval.episodes=100", quiet, cwd=tmp_path)

    base_wins, base_n = _successes(base, "finger_offset", tmp_path)
    warm_wins, warm_n = _successes(runs["warm"], "finger_offset", tmp_path)
    scratch_wins, scratch_n = _successes(runs["scratch"], "finger_offset", tmp_path)
    figures = (f"base {base_wins}/{base_n}, warm {warm_wins}/{warm_n}, "
               f"scratch {scratch_wins}/{scratch_n}")
    over_base = fisher_exact([[warm_wins, warm_n - warm_wins], [base_wins, base_n - base_wins]],
                             alternative="greater").pvalue
    over_scratch = fisher_exact([[warm_wins, warm_n - warm_wins],
                                 [scratch_wins, scratch_n - scratch_wins]],
                                alternative="greater").pvalue
    print(f"{figures}; warm vs base p = {over_base:.3g}, warm vs scratch p = {over_scratch:.3g}")
    assert over_base < 0.01, f"warm vs base p = {over_base:.3g} ({figures})"
    assert over_scratch < 0.01, f"warm vs scratch p = {over_scratch:.3g} ({figures})"
