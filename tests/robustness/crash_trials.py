"""Crash-and-resume trials: SIGKILL a training job at a moment, re-run the same command, compare.

Holds:
    TRAINING_COMMANDS -- job name -> the arguments of a short run of that job in a workspace.
    checkpoint_digests -- SHA-256 of every checkpoint file of a run (hidden leftovers excluded).
    reference_run -- an uninterrupted run: its checkpoint digests and wall time.
    TrialResult -- what one trial found: whether the kill hit a running job, the step saved,
        whether the resume ended byte-identical and whether saved work was kept.
    crash_trial -- start the job, SIGKILL it after ``kill_after`` seconds, resume, compare.

Only jobs that ``qadapt.cli.JOBS`` lists are tried (``available_jobs``).
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from tests.robustness.bad_inputs import SMALL_TRAINING, Workspace

_SCHEDULE = ("checkpoint_every=10", "eval.every=20", "eval.episodes=2")


def _pretrain(ws: Workspace, out: Path, steps: int) -> list[str]:
    return ["pretrain", f"data={ws.dataset}", f"steps={steps}", *_SCHEDULE, f"out={out}",
            *SMALL_TRAINING]


def _finetune(ws: Workspace, out: Path, steps: int) -> list[str]:
    small = [a for a in SMALL_TRAINING if not a.startswith("network.")]  # from the base
    return ["finetune", f"base={ws.checkpoint}", f"prior={ws.dataset}", f"new={ws.dataset}",
            f"steps={steps}", *_SCHEDULE, f"out={out}", *small]


def _chain(ws: Workspace, out: Path, steps: int) -> list[str]:
    small = [a for a in SMALL_TRAINING if not a.startswith("network.")]
    return ["chain", f"base={ws.run}", f"prior={ws.dataset}", "variations=[finger_offset]",
            "episodes=4", f"steps={steps}", "eval_episodes=2", *_SCHEDULE, f"out={out}",
            *small]


TRAINING_COMMANDS: dict[str, Callable[[Workspace, Path, int], list[str]]] = {
    "pretrain": _pretrain,
    "finetune": _finetune,
    "chain": _chain,
}


def available_jobs() -> list[str]:
    from qadapt.cli import JOBS

    return [job for job in TRAINING_COMMANDS if job in JOBS]


def _command(job: str, ws: Workspace, out: Path, steps: int) -> list[str]:
    out.parent.mkdir(parents=True, exist_ok=True)
    return [sys.executable, "-m", "qadapt.cli", *TRAINING_COMMANDS[job](ws, out, steps),
            f"hydra.run.dir={out}-hydra"]


def checkpoint_digests(run: Path) -> dict[str, str]:
    """Every file of every checkpoint under ``run`` (not the hidden ``.NAME.writing-*`` or
    ``.NAME.replaced-*`` leftovers of a killed save); ``run``'s own path inside
    checkpoint.json is replaced by ``<run>`` so runs in two folders compare."""
    digests = {}
    for path in sorted(run.rglob("*")):
        parts = path.relative_to(run).parts
        if path.is_file() and not any(p.startswith(".") for p in parts) and (
                path.suffix == ".safetensors" or path.name == "checkpoint.json"):
            data = path.read_bytes()
            if path.name == "checkpoint.json":  # a chain records paths of data inside ``run``
                data = data.replace(str(run).encode(), b"<run>")
            digests["/".join(parts)] = hashlib.sha256(data).hexdigest()
    return digests


def reference_run(job: str, ws: Workspace, out: Path, steps: int) -> tuple[dict, float]:
    start = time.perf_counter()
    done = subprocess.run(_command(job, ws, out, steps), capture_output=True, text=True,
                          cwd=out.parent, timeout=600)
    if done.returncode != 0:
        raise RuntimeError(f"qadapt {job} failed:\n{done.stderr}")
    return checkpoint_digests(out), time.perf_counter() - start


@dataclass
class TrialResult:
    job: str
    kill_after: float
    killed_running: bool        # the job was still running when SIGKILL arrived
    saved_step: int | None      # gradient step of checkpoints/last after the kill
    resumed_from: int | None    # what the re-run reported resuming from
    identical: bool             # final checkpoint bytes equal the uninterrupted run's
    nothing_lost: bool          # checkpoints left by the kill load, and the re-run used them
    detail: str = ""


def _saved_state(run: Path) -> tuple[int | None, str]:
    """The gradient step of ``run/checkpoints/last`` (None if absent), and the problems of
    every checkpoint under ``run`` that does not load (verified) after the kill."""
    from qadapt.checkpoint import load_checkpoint
    from qadapt.errors import BadInput

    problems = []
    step = None
    for meta in sorted(run.rglob("checkpoint.json")):
        path = meta.parent
        if any(p.startswith(".") for p in path.relative_to(run).parts):
            continue  # a killed save's hidden staging copy: never mistaken for a checkpoint
        try:
            loaded = load_checkpoint(path, load_training_state=path.name == "last")
        except BadInput as err:
            problems.append(f"{path} does not load after the kill: {err}")
            continue
        if path == run / "checkpoints" / "last":
            step = loaded.metadata.gradient_step
    return step, "; ".join(problems)


def crash_trial(job: str, ws: Workspace, out: Path, steps: int, kill_after: float,
                reference: dict[str, str]) -> TrialResult:
    """Run ``job`` into ``out``, SIGKILL it after ``kill_after`` s, re-run it, compare."""
    command = _command(job, ws, out, steps)
    proc = subprocess.Popen(command, cwd=out.parent, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    try:
        proc.wait(timeout=kill_after)
        killed_running = False
    except subprocess.TimeoutExpired:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        killed_running = True
    saved_step, problems = _saved_state(out)
    aside = [p for p in out.rglob(".*.replaced-*") if (p / "checkpoint.json").exists()]
    if aside:  # killed between a save's two renames: the old copy is only in the aside
        problems += f" a checkpoint was left only in {aside[0]}"
    done = subprocess.run(command, cwd=out.parent, capture_output=True, text=True, timeout=600)
    resumed_from = None
    detail = problems
    if done.returncode != 0:
        detail += f" re-run exit {done.returncode}: {done.stderr.strip()[-300:]}"
    elif (out / "summary.json").exists():  # pretrain, finetune (a chain keeps one per step)
        resumed_from = json.loads((out / "summary.json").read_text())["resumed_from_step"]
    final = checkpoint_digests(out)
    identical = done.returncode == 0 and final == reference
    if done.returncode == 0 and not identical:
        differing = sorted(k for k in set(final) | set(reference)
                           if final.get(k) != reference.get(k))
        detail += f" differing files: {differing}"
    # Nothing lost: what the kill left loads, and the re-run continued from it (a kill before
    # the job finished resumes from the saved step; a finished job resumes at its end).
    nothing_lost = not problems and done.returncode == 0 and (
        resumed_from is None or resumed_from == (saved_step or 0))
    return TrialResult(job, kill_after, killed_running, saved_step, resumed_from, identical,
                       nothing_lost, detail.strip())
