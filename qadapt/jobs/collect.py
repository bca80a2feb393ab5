"""``qadapt collect``: run a policy in an environment (any variation) and write a dataset.

Holds:
    build_policy -- the collection policy a PolicyConfig names.
    collect_job -- the job body (typed config in, exit status out).
    main -- the console entry point (Hydra overrides on the command line).
"""

from __future__ import annotations

from collections.abc import Sequence

from demo_envs.pick_cell import PickCellVectorEnv, ScriptedPicker
from qadapt.config.hydra_entry import run_job
from qadapt.config.schema import CollectJob, PolicyConfig
from qadapt.data import UniformRandomPolicy, collect
from qadapt.envs import env_record, make_vector_env
from qadapt.errors import BadInput
from qadapt.jobs.outputs import output_dir
from qadapt.learner.loading import checkpoint_policy


def build_policy(policy: PolicyConfig, env, seed: int):
    """The policy object for collection (``act`` and ``describe``)."""
    if policy.kind == "scripted":
        if not isinstance(env.unwrapped, PickCellVectorEnv):
            raise BadInput("policy=scripted: the scripted picker only drives the pick cell")
        return ScriptedPicker(noise=policy.noise, random_rate=policy.random_rate, seed=seed)
    if policy.kind == "random":
        return UniformRandomPolicy(env.single_action_space, seed=seed)

    return checkpoint_policy(policy.checkpoint, env, seed=seed, gaussian_std=policy.noise,
                             epsilon=policy.random_rate)


def collect_job(cfg: CollectJob) -> int:
    out = output_dir(cfg.out, "dataset")
    n = cfg.num_envs if cfg.episodes is None else min(cfg.num_envs, cfg.episodes)
    env = make_vector_env(cfg.env, cfg.variation, n)
    policy = build_policy(cfg.policy, env, cfg.seed)
    summary = collect(
        env, policy, episodes=cfg.episodes, transitions=cfg.transitions, out=out,
        seed=cfg.seed, env_record=env_record(cfg.env, cfg.variation),
        progress=cfg.progress, overwrite=cfg.overwrite,
    )
    if not cfg.progress:  # with the progress bar on, collect() prints the summary itself
        print(summary.text())
    print(f"dataset written to {out}")
    return 0


def main(argv: Sequence[str]) -> int:
    return run_job("collect", CollectJob, collect_job, argv)
