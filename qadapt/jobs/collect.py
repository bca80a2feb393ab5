"""``qadapt collect``: run a policy in an environment (any variation) and write a dataset.

Holds:
    build_policy -- the collection policy a PolicyConfig names.
    collect_job -- the job body (typed config in, exit status out).
    main -- the console entry point (Hydra overrides on the command line).
"""

from __future__ import annotations

import importlib
from collections.abc import Sequence

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
        # An env offers a hand-written controller through its metadata ("module:class",
        # built with noise, random_rate and seed); the demo pick cell offers its picker.
        entry_point = env.metadata.get("scripted_policy")
        if not isinstance(entry_point, str) or ":" not in entry_point:
            raise BadInput("policy=scripted: this env offers no scripted controller (its "
                           "metadata has no 'scripted_policy'); use policy=random or "
                           "policy=checkpoint")
        module, _, name = entry_point.partition(":")
        controller = getattr(importlib.import_module(module), name)
        return controller(noise=policy.noise, random_rate=policy.random_rate, seed=seed)
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
