"""``qadapt import``: build a dataset from a user's own arrays, with the usual validation.

Holds:
    import_job -- the job body (typed config in, exit status out).
    main -- the console entry point (Hydra overrides on the command line).
"""

from __future__ import annotations

from collections.abc import Sequence

from qadapt.config.hydra_entry import run_job
from qadapt.config.schema import ImportJob
from qadapt.data import import_arrays
from qadapt.envs import env_record, make_vector_env
from qadapt.jobs.outputs import output_dir


def import_job(cfg: ImportJob) -> int:
    out = output_dir(cfg.out, "dataset")
    env = make_vector_env(cfg.env, cfg.variation, 1)
    path = import_arrays(
        cfg.source, dict(cfg.fields), out,
        env_record=env_record(cfg.env, cfg.variation),
        observation_space=env.single_observation_space,
        action_space=env.single_action_space,
        seed=cfg.seed, overwrite=cfg.overwrite,
    )
    print(f"dataset written to {path}")
    return 0


def main(argv: Sequence[str]) -> int:
    return run_job("import", ImportJob, import_job, argv)
