"""Collection from gymnasium vector envs: counts, NEXT_STEP autoreset, success, determinism."""

from __future__ import annotations

import gymnasium
import numpy as np
import pytest
from gymnasium.vector import AutoresetMode, SyncVectorEnv

from qadapt.data import UniformRandomPolicy, collect, open_dataset
from qadapt.errors import BadInput


def _record(env_id):
    return {"id": env_id, "kwargs": {}, "wrappers": []}


class _CoinFlipEnv(gymnasium.Env):
    """Episodes of 3 to 6 steps; on the last step info["is_success"] says whether the last
    action was positive. Other steps carry no is_success key (exercises the _is_success mask)."""

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
        info = {"is_success": bool(action[0] > 0)} if done else {}
        return np.array([self.t, self.length], np.float32), 1.0, done, False, info


def _coin_envs(count=3):
    return SyncVectorEnv([_CoinFlipEnv for _ in range(count)])


def test_cartpole_episode_count_and_next_step_autoreset(tmp_path):
    envs = gymnasium.make_vec("CartPole-v1", 4, vectorization_mode="sync")
    summary = collect(
        envs,
        UniformRandomPolicy(envs.single_action_space, seed=0),
        episodes=30,
        out=tmp_path / "cp",
        seed=0,
        env_record=_record("CartPole-v1"),
        progress=False,
        chunk_transitions=100,
    )
    dataset = open_dataset(summary.path)
    assert summary.episodes == dataset.episode_count == 30
    assert summary.finished_episodes == 30 and summary.chunks > 1
    lengths = dataset.array("episode_lengths")
    assert dataset.transition_count == int(lengths.sum())
    # CartPole pays 1 per real step; the ignored reset step of NEXT_STEP mode pays 0, so a
    # reward of 0 would mean a reset step was recorded as a transition.
    assert (dataset.array("rewards") == 1.0).all()
    starts = np.cumsum(lengths) - lengths
    # CartPole resets each state variable uniformly in [-0.05, 0.05] (gymnasium's CartPole).
    assert (np.abs(dataset.array("observations")[starts]) <= 0.05).all()
    index = dataset.array("episode_index")
    inside = index[1:] == index[:-1]
    np.testing.assert_array_equal(
        dataset.array("next_observations")[:-1][inside], dataset.array("observations")[1:][inside]
    )
    ends = np.cumsum(lengths) - 1
    assert (dataset.array("terminated")[ends] | dataset.array("truncated")[ends]).all()
    assert summary.success_rate is None  # a positive return is not success
    assert dataset.manifest.collected_by == {"kind": "random", "distribution": "uniform", "seed": 0}
    assert dataset.action_space.to_json() == {"type": "discrete", "n": 2, "start": 0}


def test_batched_vector_env_with_an_integer_seed(tmp_path):
    # gymnasium's own batched CartPole (vector_entry_point) takes only an integer reset seed,
    # like other batched implementations; the collector must work with it.
    envs = gymnasium.make_vec("CartPole-v1", 64, vectorization_mode="vector_entry_point")
    summary = collect(
        envs,
        UniformRandomPolicy(envs.single_action_space, seed=0),
        episodes=300,
        out=tmp_path / "batched",
        seed=2,
        env_record=_record("CartPole-v1"),
        progress=False,
        chunk_transitions=2000,
    )
    dataset = open_dataset(summary.path)
    assert dataset.episode_count == 300 and summary.chunks > 1
    assert (dataset.array("rewards") == 1.0).all()  # no reset step recorded
    index = dataset.array("episode_index")
    inside = index[1:] == index[:-1]
    np.testing.assert_array_equal(
        dataset.array("next_observations")[:-1][inside], dataset.array("observations")[1:][inside]
    )


def test_pendulum_exact_transition_count_with_cut_last_episode(tmp_path):
    envs = gymnasium.make_vec("Pendulum-v1", 2, vectorization_mode="sync")
    summary = collect(
        envs,
        UniformRandomPolicy(envs.single_action_space, seed=1),
        transitions=1100,
        out=tmp_path / "pd",
        seed=3,
        env_record=_record("Pendulum-v1"),
        progress=False,
        chunk_transitions=400,
    )
    dataset = open_dataset(summary.path)
    assert dataset.transition_count == 1100
    lengths = dataset.array("episode_lengths").tolist()
    assert lengths == [200] * 5 + [100]
    ends = np.cumsum(lengths) - 1
    assert not dataset.array("terminated").any()  # Pendulum only ends by its time limit
    assert dataset.array("truncated")[ends].tolist() == [True] * 5 + [False]
    assert summary.finished_episodes == 5
    low, high = dataset.action_space.low[0], dataset.action_space.high[0]
    assert (dataset.array("actions") >= low).all() and (dataset.array("actions") <= high).all()


def test_success_rate_from_vector_info_mask(tmp_path):
    summary = collect(
        _coin_envs(),
        UniformRandomPolicy(_CoinFlipEnv.action_space, seed=2),
        episodes=60,
        out=tmp_path / "coin",
        seed=0,
        env_record=_record("coin-flip"),
        progress=False,
    )
    dataset = open_dataset(summary.path)
    assert dataset.has_success
    ends = np.cumsum(dataset.array("episode_lengths")) - 1
    last_positive = dataset.array("actions")[ends, 0] > 0
    np.testing.assert_array_equal(dataset.array("episode_success"), last_positive)
    assert summary.success_rate == pytest.approx(last_positive.mean())
    # Only terminal steps reported success; others are stored as False.
    interior = np.ones(dataset.transition_count, bool)
    interior[ends] = False
    assert not dataset.array("success")[interior].any()


def test_same_seed_same_data_other_seed_other_data(tmp_path):
    arrays = []
    for name, seed in (("a", 5), ("b", 5), ("c", 6)):
        envs = gymnasium.make_vec("Pendulum-v1", 3, vectorization_mode="sync")
        path = collect(
            envs,
            UniformRandomPolicy(envs.single_action_space, seed=0),
            transitions=700,
            out=tmp_path / name,
            seed=seed,
            env_record=_record("Pendulum-v1"),
            progress=False,
            chunk_transitions=250,
        ).path
        arrays.append(np.array(open_dataset(path).array("observations")))
    np.testing.assert_array_equal(arrays[0], arrays[1])
    assert not np.array_equal(arrays[0], arrays[2])


def test_existing_dataset_refused_before_collecting(tmp_path):
    envs = gymnasium.make_vec("CartPole-v1", 2, vectorization_mode="sync")
    policy = UniformRandomPolicy(envs.single_action_space, seed=0)
    kwargs = dict(out=tmp_path / "x", seed=0, env_record=_record("CartPole-v1"), progress=False)
    collect(envs, policy, episodes=3, **kwargs)
    with pytest.raises(BadInput, match=f"{tmp_path / 'x'}: a complete dataset already exists"):
        collect(envs, policy, episodes=3, **kwargs)
    assert collect(envs, policy, episodes=4, overwrite=True, **kwargs).episodes == 4


def test_bad_arguments(tmp_path):
    envs = gymnasium.make_vec("CartPole-v1", 2, vectorization_mode="sync")
    policy = UniformRandomPolicy(envs.single_action_space, seed=0)
    common = dict(out=tmp_path / "y", seed=0, env_record=_record("CartPole-v1"), progress=False)
    with pytest.raises(BadInput, match="exactly one of episodes= or transitions="):
        collect(envs, policy, **common)
    with pytest.raises(BadInput, match="episodes: got 0, expected a positive integer"):
        collect(envs, policy, episodes=0, **common)
    with pytest.raises(BadInput, match="autoreset mode .* not supported"):
        same_step = SyncVectorEnv(
            [lambda: gymnasium.make("CartPole-v1")], autoreset_mode=AutoresetMode.SAME_STEP
        )
        collect(same_step, policy, episodes=2, **common)
    with pytest.raises(BadInput, match="collector_record: needs a non-empty string 'kind'"):
        collect(envs, policy, episodes=2, collector_record={"noise": 0.1}, **common)
    assert not (tmp_path / "y").exists()


class _WrongShapePolicy:
    def act(self, observations):
        return np.zeros((len(observations), 3), np.float32)

    def describe(self):
        return {"kind": "scripted"}


def test_policy_output_of_the_wrong_shape(tmp_path):
    envs = gymnasium.make_vec("Pendulum-v1", 2, vectorization_mode="sync")
    with pytest.raises(BadInput, match=r"policy.act returned shape \(2, 3\), expected \(2, 1\)"):
        collect(
            envs,
            _WrongShapePolicy(),
            transitions=10,
            out=tmp_path / "z",
            seed=0,
            env_record=_record("Pendulum-v1"),
            progress=False,
        )


def test_uniform_random_policy_stays_in_bounds_and_resumes_its_stream():
    space = gymnasium.spaces.Box(
        np.array([-2.0, 0.0], np.float32), np.array([2.0, 0.5], np.float32)
    )
    policy = UniformRandomPolicy(space, seed=4)
    actions = policy.act(np.zeros((5000, 1)))
    assert actions.dtype == np.float32 and actions.shape == (5000, 2)
    assert (actions >= space.low).all() and (actions <= space.high).all()
    state = policy.state_dict()
    expected = policy.act(np.zeros((7, 1)))
    other = UniformRandomPolicy(space, seed=99)
    other.load_state_dict(state)
    np.testing.assert_array_equal(other.act(np.zeros((7, 1))), expected)
    with pytest.raises(BadInput, match="finite Box bounds"):
        UniformRandomPolicy(gymnasium.spaces.Box(-np.inf, np.inf, (1,)), seed=0)
