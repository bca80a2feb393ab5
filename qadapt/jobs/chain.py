"""``qadapt chain``: a chain of adaptations, one per variation, that survives interruptions.

Holds:
    ChainRecord -- chain.json: the plan's digest and every finished step, written durably.
    chain_job -- the job body: for each variation, explore -> fine-tune -> evaluate.
    main -- the console entry point (Hydra overrides on the command line).

With ``rounds=R`` each variation takes R steps, each exploring with the latest checkpoint
after the first and training on that variation's earlier rounds' data as well.
A chain directory holds ``chain.json`` and one folder per step (``step_01_<variation>``)
with the step's new dataset (``new_data``), its fine-tuning run (``finetune``) and
``step.json`` (what the step made, by hash, and its evaluations). Re-running the same
command after an interruption reuses finished steps after checking their hashes, resumes a
half-collected dataset at its last chunk and a half-trained run at its last checkpoint, so
the final checkpoint is the same bytes an uninterrupted run writes.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import torch

from qadapt import layout
from qadapt.checkpoint import load_checkpoint
from qadapt.config.chain_schema import ChainJob, register_chain_schemas
from qadapt.config.compose import variation_by_name
from qadapt.config.hydra_entry import run_job
from qadapt.config.schema import PolicyConfig
from qadapt.data import collect, open_dataset
from qadapt.envs import env_record, make_vector_env
from qadapt.errors import BadInput
from qadapt.files import strict_json, write_text_durably
from qadapt.jobs import training_run as run
from qadapt.jobs.collect import build_policy
from qadapt.jobs.evaluate import evaluate_checkpoint
from qadapt.jobs.finetune import run_finetune
from qadapt.jobs.outputs import output_dir
from qadapt.layout import resolve_checkpoint
from qadapt.locking import hold_directory

BASE_CELL = "none"


def _write_json(path: Path, value: dict[str, Any]) -> None:
    write_text_durably(path, strict_json(value, indent=2, sort_keys=True))


@dataclasses.dataclass
class ChainRecord:
    """What a chain directory says about itself (``chain.json``).

    ``plan`` identifies the chain (base checkpoint, prior data, variations and every setting
    that decides the result); a directory made by another plan is refused, never mixed.
    ``steps`` lists finished steps in order.
    """

    path: Path
    plan: dict[str, Any]
    steps: list[dict[str, Any]] = dataclasses.field(default_factory=list)

    @classmethod
    def open(cls, out: Path, plan: dict[str, Any]) -> ChainRecord:
        path = out / layout.CHAIN_RECORD
        if not path.exists():
            record = cls(path, plan)
            out.mkdir(parents=True, exist_ok=True)
            record.save()
            return record
        try:
            stored = json.loads(path.read_text())
            stored_plan, steps = stored["plan"], list(stored["steps"])
        except (OSError, ValueError, KeyError, TypeError) as err:
            raise BadInput(f"{path}: not a readable chain record ({err})") from err
        if stored_plan.get("digest") != plan["digest"]:
            raise BadInput(f"{path}: this directory holds a different chain (plan digest "
                           f"{str(stored_plan.get('digest'))[:12]}, this command "
                           f"{plan['digest'][:12]}); choose another out=")
        return cls(path, stored_plan, steps)

    def save(self) -> None:
        _write_json(self.path, {"plan": self.plan, "steps": self.steps})

    def finish_step(self, step: dict[str, Any]) -> None:
        self.steps.append(step)
        self.save()


def _verified_step(record: dict[str, Any]) -> None:
    """Check a finished step's dataset and checkpoint still hash to what it recorded."""
    dataset = open_dataset(record["dataset"]["path"])
    if dataset.fingerprint != record["dataset"]["sha256"]:
        raise BadInput(f"{record['dataset']['path']}: its fingerprint changed since chain step "
                       f"{record['index']} finished; move the chain directory aside and re-run")
    loaded = load_checkpoint(record["checkpoint"]["path"])
    if loaded.identity != record["checkpoint"]["sha256"]:
        raise BadInput(f"{record['checkpoint']['path']}: its identity changed since chain step "
                       f"{record['index']} finished; move the chain directory aside and re-run")


def _step_dataset(cfg: ChainJob, variation, policy_checkpoint: str, out: Path, seed: int):
    """The step's new dataset: reused when complete, resumed when half-written."""
    expected_env = env_record(cfg.env, variation)
    if out.exists() and (out / "manifest.json").exists():
        dataset = open_dataset(out)
        stored = json.loads(json.dumps(dataset.manifest.environment.to_json()))
        if stored != json.loads(json.dumps(expected_env)):
            raise BadInput(f"{out}: holds data from another environment than this chain "
                           "step's; move the chain directory aside and re-run")
        return dataset
    env = make_vector_env(cfg.env, variation, min(cfg.explore.num_envs, cfg.episodes))
    policy = build_policy(
        PolicyConfig(kind="checkpoint", noise=cfg.explore.noise,
                     random_rate=cfg.explore.random_rate, checkpoint=policy_checkpoint),
        env, seed)
    collect(env, policy, episodes=cfg.episodes, out=out, seed=seed,
            env_record=expected_env, progress=cfg.progress)
    return open_dataset(out)


def _plan(cfg: ChainJob, base_path: Path, base_identity: str, prior) -> dict[str, Any]:
    settings = {k: run.plain(v) for k, v in dataclasses.asdict(cfg).items()
                if k not in ("out", "progress", "base", "prior", "threads")}
    plan = {
        "base": {"path": str(base_path), "sha256": base_identity},
        "prior": [{"path": str(d.path), "sha256": d.fingerprint} for d in prior],
        "variations": list(cfg.variations),
        "settings": settings,
    }
    return {**plan, "digest": run.config_digest(plan)}


def _evaluations(cfg: ChainJob, checkpoint: str, seed: int) -> list[dict[str, Any]]:
    names = [BASE_CELL, *[v for v in dict.fromkeys(cfg.variations) if v != BASE_CELL]]
    return [evaluate_checkpoint(checkpoint, cfg.env, variation_by_name(name), cfg.eval_episodes,
                                seed=seed, threads=cfg.threads)
            for name in names]


def _schedule(cfg: ChainJob) -> list[tuple[str, int]]:
    """The chain's steps in order: (variation, round number from 1) for every round."""
    return [(name, r) for name in cfg.variations for r in range(1, cfg.rounds + 1)]


def _label(name: str, round_number: int, rounds: int) -> str:
    return f"{name}, round {round_number}" if rounds > 1 else name


def _cell(evaluation: dict[str, Any]) -> str:
    """Successes out of episodes, or the mean return where the env reports no success."""
    if evaluation.get("success_rate", 0.0) is None:
        return f"return {evaluation['mean_return']:.4g}"
    return f"{evaluation['successes']}/{evaluation['episodes']}"


def _print_table(steps: list[dict[str, Any]], rounds: int) -> None:
    if not steps:
        return
    columns = [e["variation"] for e in steps[0]["evaluations"]]
    width = max(12, *(len(c) for c in columns))
    if any(e.get("success_rate", 0.0) is None for e in steps[0]["evaluations"]):
        print("(the env reports no success: each cell is the mean return of its episodes)")
    print("chain step".ljust(28) + "".join(c.rjust(width + 2) for c in columns))
    for step in steps:
        label = f"{step['index']}. {_label(step['variation'], step.get('round', 1), rounds)}"
        cells = [_cell(e) for e in step["evaluations"]]
        print(label.ljust(28) + "".join(c.rjust(width + 2) for c in cells))


def _run_step(cfg: ChainJob, index: int, name: str, round_number: int, *, explorer: str,
              previous: str, prior, earlier_new: list[str], this_variation: list[str],
              out: Path) -> dict[str, Any]:
    """Explore, fine-tune and evaluate one step; its record (also written as step.json)."""
    step_dir = out / f"step_{index:02d}_{name}"
    step_dir.mkdir(parents=True, exist_ok=True)
    # Distinct, fixed seeds per step: collection and training never share a stream.
    dataset = _step_dataset(cfg, variation_by_name(name), explorer, step_dir / "new_data",
                            seed=cfg.seed * 1000 + index)
    # The variation's earlier rounds join the side of each batch ``earlier_rounds`` names.
    rounds_to_new = cfg.earlier_rounds == "new"
    new = [*(this_variation if rounds_to_new else []), str(dataset.path)]
    priors = ([str(d.path) for d in prior] + (earlier_new if cfg.keep_earlier else [])
              + ([] if rounds_to_new else this_variation))
    summary = run_finetune(cfg.finetune_settings(base=previous, prior=priors, new=new,
                                                 out=str(step_dir / "finetune"),
                                                 seed=cfg.seed * 1000 + index))
    checkpoint = summary["checkpoint"]
    step = {
        "index": index,
        "variation": name,
        "round": round_number,
        "explored_with": explorer,
        "parent": previous,
        "dataset": {"path": str(dataset.path), "sha256": dataset.fingerprint},
        "checkpoint": {"path": checkpoint, "sha256": load_checkpoint(checkpoint).identity},
        "training": {"steps": summary["steps"], "selected": summary["selected"],
                     "best_success_rate": summary["best_success_rate"],
                     "best_mean_return": summary["best_mean_return"]},
        "evaluations": _evaluations(cfg, checkpoint, seed=cfg.eval_seed),
    }
    _write_json(step_dir / layout.STEP_RECORD, step)
    return step


def chain_job(cfg: ChainJob) -> int:
    torch.set_num_threads(cfg.threads)
    out = output_dir(cfg.out, "chain")
    with hold_directory(out, "chain"):
        return _run_chain(cfg, out)


def _run_chain(cfg: ChainJob, out: Path) -> int:
    base_path = resolve_checkpoint(cfg.base, key="base")
    base = load_checkpoint(base_path)
    prior = run.open_sources(cfg.prior)
    record = ChainRecord.open(out, _plan(cfg, base_path, base.identity, prior))

    previous = str(base_path)
    earlier_new: list[str] = []  # new data of earlier variations' steps
    for index, (name, round_number) in enumerate(_schedule(cfg), start=1):
        if round_number == 1:
            this_variation: list[str] = []  # new data of this variation's earlier rounds
        label = _label(name, round_number, cfg.rounds)
        if index <= len(record.steps):
            step = record.steps[index - 1]
            _verified_step(step)
            print(f"chain step {index} ({label}): finished earlier; hashes checked, reused")
        else:
            first_round = round_number == 1
            explorer = str(base_path) if first_round and cfg.explore.policy == "base" else previous
            step = _run_step(cfg, index, name, round_number, explorer=explorer,
                             previous=previous, prior=prior, earlier_new=earlier_new,
                             this_variation=this_variation, out=out)
            record.finish_step(step)
            print(f"chain step {index} ({label}): checkpoint {step['checkpoint']['path']}")
        previous = step["checkpoint"]["path"]
        this_variation.append(step["dataset"]["path"])
        if round_number == cfg.rounds:
            earlier_new.extend(this_variation)

    _print_table(record.steps, cfg.rounds)
    print(f"chain of {len(record.steps)} steps; final checkpoint {previous}")
    print(f"outputs written to {out}")
    return 0


def main(argv: Sequence[str]) -> int:
    register_chain_schemas()
    return run_job("chain", ChainJob, chain_job, argv)
