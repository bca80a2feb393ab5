"""The ``qadapt`` console script: the first word picks a job, the rest goes to that job.

Holds:
    JOBS -- job name -> (one-line summary, "module:function" entry point).
    main -- the console entry point; returns the process exit status.
"""

from __future__ import annotations

import importlib
import sys
from collections.abc import Sequence

from qadapt import __version__

# Entry points are imported lazily so `qadapt --help` stays fast and a broken
# optional dependency of one job cannot stop the others.
JOBS: dict[str, tuple[str, str]] = {
    "preview": (
        "run the scripted picker in the pick cell and under each variation; print success rates",
        "qadapt.preview:main",
    ),
    "collect": (
        "run a policy (scripted, random or a checkpoint) in an environment; write a dataset",
        "qadapt.jobs.collect:main",
    ),
    "import": (
        "build a dataset from your own .npz / .npy arrays",
        "qadapt.jobs.import_job:main",
    ),
    "split": (
        "divide a dataset by episode into a training part and a held-out part",
        "qadapt.jobs.split_job:main",
    ),
    "pretrain": (
        "train a Q-function from one or more datasets; write a checkpoint",
        "qadapt.jobs.pretrain:main",
    ),
    "finetune": (
        "adapt a pretrained Q-function (init=warm|scratch) on a mix of prior and new data",
        "qadapt.jobs.finetune:main",
    ),
    "chain": (
        "adapt step by step to a list of variations (explore, fine-tune, evaluate); resumable",
        "qadapt.jobs.chain:main",
    ),
    "evaluate": (
        "run greedy episodes of checkpoints under variations; success and return with intervals",
        "qadapt.jobs.evaluate:main",
    ),
    "score": (
        "rank checkpoints from held-out logged data alone (fitted Q evaluation, TD error, own Q)",
        "qadapt.jobs.score:main",
    ),
    "study": (
        "run a grid of fine-tuning runs (strategies, variations, seeds, budgets, chains); report",
        "qadapt.study.runner:main",
    ),
    "cell": (
        "run one cell of a study (qadapt study launches these)",
        "qadapt.study.cells:main",
    ),
    "report": (
        "write report.html and summary.md from a study directory",
        "qadapt.study.report:report_main",
    ),
    "inspect": (
        "summarise a replay dataset: counts, returns, success, actions, provenance, checksums",
        "qadapt.jobs.inspect_job:main",
    ),
}


def _usage() -> str:
    width = max(len(name) for name in JOBS)
    lines = [
        f"qadapt {__version__}: offline Q-learning fine-tuning on the CPU",
        "",
        "usage: qadapt JOB [arguments...]",
        "       qadapt JOB --help",
        "",
        "jobs:",
    ]
    lines += [f"  {name.ljust(width)}  {summary}" for name, (summary, _) in JOBS.items()]
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    """Dispatch ``argv`` (defaults to ``sys.argv[1:]``) to a job; return its exit status."""
    args = list(sys.argv[1:] if argv is None else argv)
    if not args or args[0] in ("-h", "--help", "help"):
        print(_usage())
        return 0
    if args[0] in ("-V", "--version"):
        print(f"qadapt {__version__}")
        return 0
    name, rest = args[0], args[1:]
    if name not in JOBS:
        print(
            f"qadapt: unknown job {name!r}; known jobs: {', '.join(JOBS)} (see qadapt --help)",
            file=sys.stderr,
        )
        return 2
    module_name, func_name = JOBS[name][1].split(":")
    job = getattr(importlib.import_module(module_name), func_name)
    return int(job(rest) or 0)


if __name__ == "__main__":
    raise SystemExit(main())
