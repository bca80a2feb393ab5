"""Running a policy in a gymnasium vector environment and writing what it saw as a dataset.

Holds:
    CollectionSummary -- what a collection produced: counts, success rate, mean return.
    collect -- run a policy until N complete episodes or N transitions; stream them to disk in
        chunks; resume an interrupted run with the same arguments; publish atomically.
    episode_quotas -- how many episodes each sub-environment owes a chunk (fixed up front).
"""

from __future__ import annotations

import hashlib
import json
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import gymnasium
import numpy as np
from gymnasium.vector import AutoresetMode
from tqdm import tqdm

from qadapt.checks import positive_int
from qadapt.data.format.dataset import open_dataset
from qadapt.data.format.manifest import EnvironmentRecord
from qadapt.data.format.schema import FORMAT_VERSION
from qadapt.data.format.validation import check_actions
from qadapt.data.statistics import dataset_statistics
from qadapt.data.writing.policy import Policy
from qadapt.data.writing.step_log import StepLog
from qadapt.data.writing.writer import DatasetWriter, check_collector_record
from qadapt.errors import BadInput
from qadapt.spaces import DiscreteDescription, describe_space

DEFAULT_CHUNK_TRANSITIONS = 1 << 16
# Episode length assumed when sizing the first chunk of an episode-count run whose env has no
# spec.max_episode_steps (later chunks use the mean length of the committed ones). Only the
# chunk size depends on it, never which episodes are kept. Common practice, no source.
FIRST_CHUNK_EPISODE_LENGTH_GUESS = 1000
# Which episodes a run keeps; part of the resume digest, so that a staging directory left by
# the former finishing-order rule is never continued with this one.
_EPISODE_SELECTION = "fixed quota of consecutive episodes per sub-environment"


@dataclass(frozen=True)
class CollectionSummary:
    """The outcome of :func:`collect`.

    ``success_rate`` is over finished episodes and None when the environment reported no
    ``is_success`` (unknown, not zero); ``mean_return`` is over finished episodes.
    """

    path: Path
    transitions: int
    episodes: int
    finished_episodes: int
    success_rate: float | None
    mean_return: float | None
    chunks: int
    resumed_chunks: int
    seconds: float

    def text(self) -> str:
        success = "unknown" if self.success_rate is None else f"{self.success_rate:.3f}"
        mean = "n/a" if self.mean_return is None else f"{self.mean_return:.3f}"
        resumed = f", resumed after {self.resumed_chunks} chunks" if self.resumed_chunks else ""
        return (
            f"collected {self.episodes} episodes ({self.transitions} transitions) into "
            f"{self.path}: success rate {success}, mean return {mean}{resumed}"
        )


def _run_digest(description: dict[str, Any]) -> str:
    text = json.dumps(description, sort_keys=True, allow_nan=False, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def _chunk_seeds(seed: int, chunk: int) -> tuple[int, int]:
    """``(reset seed, policy seed)`` for chunk ``chunk``.

    One integer reset seed, because batched VectorEnv implementations accept only that;
    gymnasium's Sync/AsyncVectorEnv seed their sub-environments ``s, s + 1, ...`` from it.
    """
    env_seed, policy_seed = np.random.SeedSequence([seed, chunk]).generate_state(2)
    return int(env_seed), int(policy_seed)


def episode_quotas(episodes: int, count: int) -> np.ndarray:
    """Episodes each of ``count`` sub-environments must deliver for a chunk of ``episodes``.

    ``episodes // count`` each, one more for the first ``episodes % count``; int64 [count].
    Sub-environment ``i`` keeps its first ``quota[i]`` episodes after the chunk's reset and
    discards any later one, so which episodes are kept is decided before any is observed:
    they are a random sample whatever their lengths. (Keeping the first N episodes to *finish*
    instead over-represents short ones: in the pick cell, successes, which end early.)

    Example:
        >>> episode_quotas(10, 4).tolist(), episode_quotas(2, 4).tolist()
        ([3, 3, 2, 2], [1, 1, 0, 0])
    """
    episodes = positive_int("episodes", episodes, BadInput)
    count = positive_int("count", count, BadInput)
    base, extra = divmod(episodes, count)
    quotas = np.full(count, base, dtype=np.int64)
    quotas[:extra] += 1
    return quotas


def _chunk_episode_count(
    remaining: int, count: int, chunk_transitions: int, writer: DatasetWriter, first_guess: int
) -> int:
    """Episodes the next chunk of an episode-count run collects: about ``chunk_transitions``
    worth, judged by the mean length of the episodes already committed (``first_guess`` steps
    before there are any), rounded down to a multiple of ``count`` so that every
    sub-environment owes the same number, at least one each, and never more than
    ``remaining``. The size depends only on earlier chunks, so each chunk is still an unbiased
    sample, and on resume it is recomputed from the same committed chunks."""
    if writer.committed_episodes:
        budget = chunk_transitions * writer.committed_episodes // writer.committed_transitions
    else:
        budget = chunk_transitions // first_guess
    return min(remaining, count * max(1, budget // count))


def _success_flags(infos: dict[str, Any], count: int) -> tuple[np.ndarray, np.ndarray]:
    """Per-sub-environment ``(success, reported)`` from vector infos (``_is_success`` mask)."""
    if "is_success" not in infos:
        return np.zeros(count, dtype=bool), np.zeros(count, dtype=bool)
    values = np.asarray(infos["is_success"]).reshape(count).astype(bool)
    mask = infos.get("_is_success")
    reported = np.ones(count, dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    return values & reported, reported


def _to_env_actions(actions: np.ndarray, space, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Policy output as ``(stored [N, act_dim] float32, what the vector env takes)``."""
    actions = np.asarray(actions)
    if isinstance(space, DiscreteDescription):
        stored = actions.reshape(count, 1).astype(np.float32)
        return stored, stored[:, 0].astype(np.int64)
    if actions.shape != (count, space.width):
        raise BadInput(
            f"policy.act returned shape {actions.shape}, expected ({count}, {space.width})"
        )
    stored = actions.astype(np.float32)
    return stored, stored


def collect(
    vector_env: gymnasium.vector.VectorEnv,
    policy: Policy,
    *,
    episodes: int | None = None,
    transitions: int | None = None,
    out: str | Path,
    seed: int,
    env_record: dict[str, Any],
    collector_record: dict[str, Any] | None = None,
    progress: bool = True,
    chunk_transitions: int = DEFAULT_CHUNK_TRANSITIONS,
    overwrite: bool = False,
) -> CollectionSummary:
    """Run ``policy`` in ``vector_env`` and write a dataset at ``out``; return a summary.

    Give exactly one of ``episodes`` or ``transitions``. ``episodes=N``: that many complete
    episodes, chosen before any is run so that their mix does not depend on their lengths:
    a chunk of M episodes over n sub-environments takes the first ``M // n`` episodes of every
    sub-environment after its reset (one more from the first ``M % n``, see
    :func:`episode_quotas`) and discards any beyond; sub-environments owing nothing run and
    are ignored. Episodes are stored grouped by sub-environment, in order within each, so any
    prefix of a chunk is unbiased too. ``transitions=N``: exactly that many, kept in the order
    episodes finish; the last episode may be cut short, its last step then has neither done
    flag. The environment must use gymnasium's NEXT_STEP autoreset: the step after a done step
    returns the reset observation, and that step's reward and flags are discarded, not
    recorded.

    Transitions go to disk in chunks of about ``chunk_transitions``; for ``episodes`` a chunk's
    episode count is set before it starts, from the mean length of the committed episodes
    (for the first chunk, the env's ``spec.max_episode_steps`` or
    ``FIRST_CHUNK_EPISODE_LENGTH_GUESS``). Every chunk starts by
    resetting all sub-environments with seeds derived from ``(seed, chunk number)`` (and
    reseeding the policy if it has ``reseed``), so chunks do not depend on one another: re-run
    an interrupted call with the same arguments and it continues after the last chunk on disk,
    producing the same arrays as an uninterrupted run (for a deterministic or reseedable
    policy). ``env_record`` is ``{"id", "kwargs", "wrappers"}``; ``collector_record`` (default:
    ``policy.describe()``) says what collected the data. An existing dataset at ``out`` is
    only replaced with ``overwrite=True``.

    Example:
        >>> import tempfile
        >>> from qadapt.data.writing.policy import UniformRandomPolicy
        >>> envs = gymnasium.make_vec("CartPole-v1", 2, vectorization_mode="sync")
        >>> summary = collect(envs, UniformRandomPolicy(envs.single_action_space, seed=1),
        ...     episodes=5, out=Path(tempfile.mkdtemp()) / "cartpole", seed=0,
        ...     env_record={"id": "CartPole-v1", "kwargs": {}, "wrappers": []}, progress=False)
        >>> summary.episodes, summary.success_rate
        (5, None)
    """
    started = time.perf_counter()
    if (episodes is None) == (transitions is None):
        raise BadInput("collect: give exactly one of episodes= or transitions=")
    target_episodes = None if episodes is None else positive_int("episodes", episodes, BadInput)
    target_transitions = (None if transitions is None
                          else positive_int("transitions", transitions, BadInput))
    chunk_transitions = positive_int("chunk_transitions", chunk_transitions, BadInput)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise BadInput(f"seed: got {seed!r}, expected a non-negative integer")
    if not isinstance(vector_env, gymnasium.vector.VectorEnv):
        raise BadInput(f"vector_env: got {type(vector_env).__name__}, expected a VectorEnv")
    mode = vector_env.metadata.get("autoreset_mode", AutoresetMode.NEXT_STEP)
    if mode not in (AutoresetMode.NEXT_STEP, AutoresetMode.NEXT_STEP.value):
        raise BadInput(
            f"vector_env: autoreset mode {mode} is not supported; use gymnasium's default "
            "NEXT_STEP mode"
        )
    for method in ("act", "describe"):
        if not callable(getattr(policy, method, None)):
            raise BadInput(f"policy: {type(policy).__name__} has no {method}() method")
    environment = EnvironmentRecord.parse(env_record, where="env_record")
    policy_description = check_collector_record(policy.describe(), where="policy.describe()")
    collected_by = check_collector_record(
        policy_description if collector_record is None else collector_record,
        where="collector_record",
    )
    observation_space = describe_space(
        vector_env.single_observation_space, role="observation space"
    )
    action_space = describe_space(vector_env.single_action_space, role="action space")
    count = int(vector_env.num_envs)
    description = {
        "format_version": FORMAT_VERSION,
        "environment": environment.to_json(),
        "collected_by": collected_by,
        "policy": policy_description,
        "seed": seed,
        "episodes": target_episodes,
        "transitions": target_transitions,
        "chunk_transitions": chunk_transitions,
        "num_envs": count,
        "episode_selection": _EPISODE_SELECTION if target_episodes is not None else None,
        "observation_space": observation_space.to_json(),
        "action_space": action_space.to_json(),
    }
    writer = DatasetWriter(
        out,
        environment=environment,
        observation_space=observation_space,
        action_space=action_space,
        collected_by=collected_by,
        seed=seed,
        run_digest=_run_digest(description),
        run_description=description,
        resume=True,
        overwrite=overwrite,
    )
    resumed_chunks = writer.committed_chunks
    target = target_episodes if target_episodes is not None else target_transitions
    unit = "episodes" if target_episodes is not None else "transitions"
    done_so_far = writer.committed_episodes if target_episodes else writer.committed_transitions
    bar = tqdm(
        total=target,
        initial=min(done_so_far, target),
        unit=unit[:-1],
        disable=not progress,
        desc="collecting",
        file=sys.stderr,
    )
    spec = getattr(vector_env, "spec", None)
    first_guess = getattr(spec, "max_episode_steps", None) or FIRST_CHUNK_EPISODE_LENGTH_GUESS
    finished = False
    try:
        while not _target_reached(writer, target_episodes, target_transitions):
            env_seed, policy_seed = _chunk_seeds(seed, writer.committed_chunks)
            if callable(getattr(policy, "reseed", None)):
                policy.reseed(policy_seed)
            run = _ChunkRun(vector_env, policy, action_space, env_seed)
            if target_episodes is not None:
                size = _chunk_episode_count(
                    target_episodes - writer.committed_episodes,
                    count,
                    chunk_transitions,
                    writer,
                    int(first_guess),
                )
                _collect_episode_chunk(run, writer, bar, episode_quotas(size, count))
            else:
                _collect_transition_chunk(
                    run,
                    writer,
                    bar,
                    chunk_transitions=chunk_transitions,
                    target_transitions=target_transitions,
                )
        path = writer.finish()
        finished = True
    finally:
        bar.close()
        if not finished:
            writer.keep_for_resume()
    dataset = open_dataset(path)
    stats = dataset_statistics(dataset)
    summary = CollectionSummary(
        path=path,
        transitions=stats.transitions,
        episodes=stats.episodes,
        finished_episodes=stats.finished_episodes,
        success_rate=stats.success_rate,
        mean_return=stats.return_mean,
        chunks=writer.committed_chunks,
        resumed_chunks=resumed_chunks,
        seconds=time.perf_counter() - started,
    )
    if progress:
        print(summary.text())
    return summary


def _target_reached(writer: DatasetWriter, episodes: int | None, transitions: int | None) -> bool:
    if episodes is not None:
        return writer.committed_episodes >= episodes
    return writer.committed_transitions >= transitions


class _ChunkRun:
    """The steps of one chunk: a freshly reset vector env, the policy, and a StepLog.

    ``ignored`` [count] bool marks sub-environments whose episodes are not wanted (their
    quota is filled, or was zero): they keep stepping, but their rows are never held in the
    log and their episode ends are never reported.
    """

    def __init__(self, vector_env, policy, action_space, env_seed: int) -> None:
        self.vector_env, self.policy, self.action_space = vector_env, policy, action_space
        self.count = int(vector_env.num_envs)
        observations, _ = vector_env.reset(seed=env_seed)
        # Copies: a vector env built with copy=False reuses its observation buffer every step.
        self.observations = np.array(observations, dtype=np.float32)
        self.log = StepLog(self.count, self.observations.shape[1], action_space.width)
        self.restarting = np.zeros(self.count, dtype=bool)  # this step returns a reset obs
        self.ignored = np.zeros(self.count, dtype=bool)

    def step(self) -> np.ndarray:
        """One vector step; the sub-environments (int64, ascending) whose wanted episode
        ended in it, ready for ``self.log.take``."""
        count = self.count
        stored, env_actions = _to_env_actions(
            self.policy.act(self.observations), self.action_space, count
        )
        check_actions(stored, self.action_space, where="policy.act output")
        next_observations, rewards, terminated, truncated, infos = self.vector_env.step(env_actions)
        next_observations = np.array(next_observations, dtype=np.float32)
        terminated = np.asarray(terminated, dtype=bool)
        truncated = np.asarray(truncated, dtype=bool)
        success, reported = _success_flags(infos, count)
        skip = self.restarting | self.ignored
        self.log.record(
            observations=self.observations,
            actions=stored,
            rewards=rewards,
            next_observations=next_observations,
            terminated=terminated,
            truncated=truncated,
            success=success,
            success_reported=reported,
            restarting=skip,
        )
        self.observations = next_observations
        done = terminated | truncated
        self.restarting = done
        return np.flatnonzero(done & ~skip)


def _collect_episode_chunk(run: _ChunkRun, writer, bar, quotas: np.ndarray) -> None:
    """Collect exactly ``quotas[i]`` consecutive episodes from every sub-environment ``i``,
    then commit them grouped by sub-environment (in episode order within each)."""
    delivered = np.zeros(run.count, dtype=np.int64)
    run.ignored[:] = quotas == 0
    blocks: list[dict[str, np.ndarray]] = []
    lengths, owners, numbers = [], [], []
    while (delivered < quotas).any():
        finished = run.step()
        if not finished.size:
            continue
        block, finished_lengths = run.log.take(finished)
        blocks.append(block)
        lengths.append(finished_lengths)
        owners.append(finished)
        numbers.append(delivered[finished].copy())
        delivered[finished] += 1
        run.ignored[finished] = delivered[finished] >= quotas[finished]
        bar.update(int(finished.size))
    block = {name: np.concatenate([b[name] for b in blocks]) for name in blocks[0]}
    lengths = np.concatenate(lengths)
    order = np.lexsort((np.concatenate(numbers), np.concatenate(owners)))
    # Row permutation that puts the episodes in `order`, each episode's rows kept together.
    starts = np.cumsum(lengths) - lengths
    sorted_lengths = lengths[order]
    offsets_in_episode = np.arange(int(sorted_lengths.sum()), dtype=np.int64) - np.repeat(
        np.cumsum(sorted_lengths) - sorted_lengths, sorted_lengths
    )
    rows = np.repeat(starts[order], sorted_lengths) + offsets_in_episode
    _commit(writer, [{name: array[rows] for name, array in block.items()}], [sorted_lengths])


def _collect_transition_chunk(
    run: _ChunkRun, writer, bar, *, chunk_transitions: int, target_transitions: int
) -> None:
    """Collect one chunk of episodes in the order they finish (sub-environment order within
    a step) until the transition target (that episode is cut to fit) or the chunk size is
    reached; episodes still running then are dropped. Commit the chunk."""
    blocks: list[dict[str, np.ndarray]] = []
    lengths_so_far: list[np.ndarray] = []
    rows = writer.committed_transitions
    chunk_rows = 0
    while True:
        finished = run.step()
        if not finished.size:
            continue
        block, lengths = run.log.take(finished)
        # Which of these episodes (in order) reaches a stopping point first?
        after = np.cumsum(lengths)
        keep = min(
            finished.size,
            int(np.searchsorted(after, target_transitions - rows)) + 1,
            int(np.searchsorted(after, chunk_transitions - chunk_rows)) + 1,
        )
        lengths = lengths[:keep].copy()
        lengths[-1] -= max(0, rows + int(lengths.sum()) - target_transitions)
        kept_rows = int(lengths.sum())
        blocks.append({name: array[:kept_rows] for name, array in block.items()})
        lengths_so_far.append(lengths)
        rows += kept_rows
        chunk_rows += kept_rows
        bar.update(kept_rows)
        if keep < finished.size or rows >= target_transitions or chunk_rows >= chunk_transitions:
            return _commit(writer, blocks, lengths_so_far)


def _commit(writer: DatasetWriter, blocks: list[dict[str, np.ndarray]], lengths: list) -> None:
    block = {name: np.concatenate([b[name] for b in blocks]) for name in blocks[0]}
    writer.add_episodes(
        **block, episode_lengths=np.concatenate(lengths), where="collected episodes"
    )
    writer.commit_chunk()
