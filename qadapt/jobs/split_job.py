"""``qadapt split``: divide a dataset by episode into a training part and a held-out part.

Holds:
    split_job -- the job body (typed config in, exit status out).
    main -- the console entry point (Hydra overrides on the command line).
"""

from __future__ import annotations

from collections.abc import Sequence

from qadapt.config.hydra_entry import run_job
from qadapt.config.schema import SplitJob
from qadapt.data import open_dataset, split_dataset


def split_job(cfg: SplitJob) -> int:
    train, held_out = split_dataset(
        cfg.source, cfg.held_out_fraction, cfg.seed, cfg.out_train, cfg.out_held_out,
        overwrite=cfg.overwrite,
    )
    for label, path in (("training part", train), ("held-out part", held_out)):
        part = open_dataset(path, verify=False)
        print(f"{label}: {part.episode_count} episodes ({part.transition_count} transitions) "
              f"written to {path}")
    return 0


def main(argv: Sequence[str]) -> int:
    return run_job("split", SplitJob, split_job, argv)
