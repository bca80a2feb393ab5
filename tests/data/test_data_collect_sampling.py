"""Episode-count collection keeps a sample of episodes fixed before they run: per-sub-env
quotas of consecutive episodes, so the kept mix does not depend on episode length."""

from __future__ import annotations

import gymnasium
import numpy as np
import pytest
import scipy.stats
from gymnasium.utils import seeding
from gymnasium.vector import SyncVectorEnv

import demo_envs
from demo_envs.pick_cell import ScriptedPicker
from qadapt.data import UniformRandomPolicy, collect, open_dataset
from qadapt.data.writing.collection import _chunk_seeds, episode_quotas
from qadapt.errors import BadInput
from qadapt.rollout import run_episodes


class _RandomLengthEnv(gymnasium.Env):
    """Episodes of 3 to 6 steps drawn from the env's own generator at every reset; the
    observation is ``[step, length]``, so a dataset shows which draw each episode was."""

    observation_space = gymnasium.spaces.Box(-10.0, 10.0, (2,), np.float32)
    action_space = gymnasium.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.t = 0
        self.length = int(self.np_random.integers(3, 7))
        return np.array([0.0, self.length], np.float32), {}

    def step(self, action):
        self.t += 1
        done = self.t == self.length
        return np.array([self.t, self.length], np.float32), 1.0, done, False, {}


def _lengths_drawn(seed, draws):
    """The episode lengths a _RandomLengthEnv reset with ``seed`` and then autoreset (no seed,
    so its generator continues) plays, in order."""
    generator, _ = seeding.np_random(seed)
    return [int(generator.integers(3, 7)) for _ in range(draws)]


def test_episode_quotas():
    assert episode_quotas(10, 4).tolist() == [3, 3, 2, 2]
    assert episode_quotas(8, 4).tolist() == [2, 2, 2, 2]
    assert episode_quotas(3, 5).tolist() == [1, 1, 1, 0, 0]
    for episodes, count in ((1, 1), (7, 3), (1000, 64), (5, 1024)):
        quotas = episode_quotas(episodes, count)
        assert quotas.sum() == episodes and quotas.max() - quotas.min() <= 1
    with pytest.raises(BadInput, match="episodes: got 0, expected a positive integer"):
        episode_quotas(0, 3)
    with pytest.raises(BadInput, match="count: got -1, expected a positive integer"):
        episode_quotas(4, -1)


@pytest.mark.parametrize(("episodes", "count"), [(10, 3), (2, 5)])
def test_each_sub_env_delivers_its_first_episodes_after_reset(tmp_path, episodes, count):
    # One chunk (the default chunk size holds them all). Sub-env i is reset with seed s + i
    # (gymnasium's SyncVectorEnv) and must deliver exactly its quota of consecutive episodes
    # from that reset, grouped by sub-env: never a later, shorter one in place of a long one.
    # With count > episodes the sub-envs owing nothing run and are ignored.
    envs = SyncVectorEnv([_RandomLengthEnv for _ in range(count)])
    summary = collect(
        envs,
        UniformRandomPolicy(_RandomLengthEnv.action_space, seed=0),
        episodes=episodes,
        out=tmp_path / "lengths",
        seed=3,
        env_record={"id": "random-length", "kwargs": {}, "wrappers": []},
        progress=False,
    )
    assert summary.chunks == 1
    dataset = open_dataset(summary.path)
    env_seed, _ = _chunk_seeds(3, 0)
    expected = []
    for number, quota in enumerate(episode_quotas(episodes, count).tolist()):
        expected += _lengths_drawn(env_seed + number, quota)
    lengths = dataset.array("episode_lengths")
    assert lengths.tolist() == expected
    starts = np.cumsum(lengths) - lengths
    np.testing.assert_array_equal(dataset.array("observations")[starts, 1], lengths)
    assert (dataset.array("observations")[starts, 0] == 0).all()
    assert (dataset.array("rewards") == 1.0).all()  # no reset step recorded


def test_pick_cell_success_rate_does_not_depend_on_episode_length(tmp_path):
    # In the pick cell a success ends the episode early and a failure runs to the horizon,
    # so keeping the first episodes to finish over-represents successes. Small chunks make
    # that worst (the former rule kept 78% successes here against 52%): 400
    # episodes over 64 sub-envs in chunks of 64, then a last chunk of 16 with 48 idle sub-envs.
    envs = gymnasium.make_vec(demo_envs.PICK_CELL_ID, num_envs=64)
    summary = collect(
        envs,
        ScriptedPicker(noise=0.15, seed=0),
        episodes=400,
        out=tmp_path / "picks",
        seed=0,
        env_record={"id": demo_envs.PICK_CELL_ID, "kwargs": {}, "wrappers": []},
        progress=False,
        chunk_transitions=600,
    )
    assert summary.chunks == 7
    dataset = open_dataset(summary.path)
    collected = dataset.array("episode_success")
    assert collected.size == 400
    # Reference: the first episode of each of 400 fresh sub-envs, no selection at all.
    reference = run_episodes(
        gymnasium.make_vec(demo_envs.PICK_CELL_ID, num_envs=400),
        ScriptedPicker(noise=0.15, seed=1),
        seed=10_000,
    )
    hits, other_hits = int(collected.sum()), reference.successes
    table = [[hits, 400 - hits], [other_hits, reference.episodes - other_hits]]
    # Two-sample test from the reference library: scipy.stats.fisher_exact on the 2x2
    # counts (SciPy docs, scipy.stats.fisher_exact), one-sided "collected rate is higher";
    # the 0.01 level is common practice.
    _, p_value = scipy.stats.fisher_exact(table, alternative="greater")
    assert p_value > 0.01, (hits / 400, other_hits / reference.episodes, p_value)
    # And close in absolute terms: 0.08 is about 2.3 standard errors of the difference of two
    # rates near 0.5 from 400 episodes each (common practice); the former rule was 0.27 off.
    assert abs(hits / 400 - other_hits / reference.episodes) < 0.08
    # The length mix too: collected episodes are not shorter (scipy.stats.mannwhitneyu,
    # SciPy docs; one-sided "collected lengths are stochastically less").
    lengths = dataset.array("episode_lengths")
    _, p_value = scipy.stats.mannwhitneyu(lengths, reference.lengths, alternative="less")
    assert p_value > 0.01, (lengths.mean(), reference.lengths.mean(), p_value)
