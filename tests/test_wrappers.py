"""Tests for qadapt.wrappers: env-checker compliance, measured effects, rebuilds, bad input."""

from __future__ import annotations

import copy
import doctest
import json
import re
import warnings

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.envs.registration import EnvSpec
from gymnasium.spaces import Box, Discrete
from gymnasium.utils.env_checker import check_env
from scipy import stats

import qadapt.wrappers as wrappers_module
from qadapt.wrappers import (
    PERTURBATION_ORDER,
    ActionDelay,
    ActionGain,
    ActionOffset,
    ObservationBias,
    ObservationNoise,
    apply_perturbations,
    describe_wrappers,
)

# One setting per wrapper, chosen so each one visibly changes Pendulum-v1 (common practice:
# moderate values inside Pendulum's spaces, obs in [-1, 1]^2 x [-8, 8], action in [-2, 2]).
PENDULUM_SETTINGS = {
    "obs_bias": {"bias": [0.1, -0.2, 0.3]},
    "obs_noise": {"std": [0.01, 0.02, 0.05]},
    "action_gain": {"gain": 0.5},
    "action_offset": {"offset": 0.3},
    "action_delay": {"steps": 2},
}

# A chi-square or normal test is failed below this p-value. The streams are seeded, so each
# test is deterministic; the threshold only says how surprising a pass must not be.
ALPHA = 1e-3  # common practice


def pendulum() -> gym.Env:
    return gym.make("Pendulum-v1")


class ActionRecorder(gym.Env):
    """Tiny env that records every action it receives and always observes zeros."""

    metadata = {"render_modes": []}

    def __init__(self, low=(-1.0, -2.0), high=(1.0, 2.0)):
        self.action_space = Box(np.array(low, np.float32), np.array(high, np.float32))
        self.observation_space = Box(-1.0, 1.0, shape=(2,), dtype=np.float32)
        self.received: list[np.ndarray] = []

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return np.zeros(2, np.float32), {}

    def step(self, action):
        self.received.append(np.array(action, copy=True))
        return np.zeros(2, np.float32), 0.0, False, False, {}


class DiscreteEnv(gym.Env):
    """Tiny env with Discrete spaces, which every qadapt wrapper must refuse."""

    def __init__(self):
        self.action_space = Discrete(3)
        self.observation_space = Discrete(4)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return 0, {}

    def step(self, action):
        return 0, 0.0, False, False, {}


def rollout(env: gym.Env, seed: int, actions: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Observations (len(actions) + 1, obs dim) and rewards (len(actions),) from one seeded run."""
    observation, _ = env.reset(seed=seed)
    observations, rewards = [observation], []
    for action in actions:
        observation, reward, terminated, truncated, _ = env.step(action)
        observations.append(observation)
        rewards.append(reward)
        if terminated or truncated:
            observation, _ = env.reset()
    return np.stack(observations), np.asarray(rewards)


def pendulum_actions(count: int, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-2.0, 2.0, size=(count, 1)).astype(np.float32)


# --------------------------------------------------------------------------- env checker


def checker_warnings(env: gym.Env) -> set[str]:
    """Run gymnasium's checker and return its warnings, minus the one every wrapped env gets."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        # Rendering would open a window; the render path is untouched by these wrappers.
        check_env(env, skip_render_check=True)
    return {
        str(w.message)
        for w in caught
        if "different from the unwrapped version" not in str(w.message)
    }


@pytest.fixture(scope="module")
def reference_warnings() -> set[str]:
    return checker_warnings(pendulum())


@pytest.mark.parametrize("names", [[name] for name in PERTURBATION_ORDER] + [PERTURBATION_ORDER])
def test_env_checker_passes_and_adds_no_warnings(names, reference_warnings):
    # Published standard: gymnasium.utils.env_checker.check_env (gymnasium 1.4), run on
    # Pendulum-v1, a reference env gymnasium ships. Its assertions must hold, and since some of
    # its findings are only warnings (e.g. an observation outside observation_space), the
    # wrapped env must not add any warning the bare Pendulum-v1 does not already raise.
    env = apply_perturbations(pendulum(), {name: PENDULUM_SETTINGS[name] for name in names})
    assert checker_warnings(env) <= reference_warnings


def test_env_checker_with_unbounded_noise_only_warns_about_infinite_bounds(reference_warnings):
    env = ObservationNoise(pendulum(), std=0.1, bound_margin_stds=None)
    extra = checker_warnings(env) - reference_warnings
    assert extra and all("infinity" in message for message in extra)
    assert np.all(np.isinf(env.observation_space.low)) and np.all(
        np.isinf(env.observation_space.high)
    )


# --------------------------------------------------------------------------- observation bias


def test_observation_bias_shifts_by_exactly_the_bias():
    bias = [0.1, -0.2, 0.3]
    wrapped = ObservationBias(pendulum(), bias=bias)
    actions = pendulum_actions(250)  # crosses the 200-step time limit, so a reset is included
    plain_obs, plain_rewards = rollout(pendulum(), 11, actions)
    biased_obs, biased_rewards = rollout(wrapped, 11, actions)
    bias32 = np.asarray(bias, dtype=np.float32)
    np.testing.assert_array_equal(biased_obs, plain_obs + bias32)
    np.testing.assert_array_equal(biased_rewards, plain_rewards)
    assert biased_obs.dtype == np.float32
    assert all(obs in wrapped.observation_space for obs in biased_obs)
    inner = pendulum().observation_space
    np.testing.assert_array_equal(wrapped.observation_space.low, inner.low + bias32)
    np.testing.assert_array_equal(wrapped.observation_space.high, inner.high + bias32)


def test_observation_bias_keeps_infinite_bounds_infinite():
    class Unbounded(ActionRecorder):
        def __init__(self):
            super().__init__()
            self.observation_space = Box(
                np.array([-np.inf, -1.0], np.float32), np.array([1.0, np.inf], np.float32)
            )

    space = ObservationBias(Unbounded(), bias=2.0).observation_space
    np.testing.assert_array_equal(space.low, [-np.inf, 1.0])
    np.testing.assert_array_equal(space.high, [3.0, np.inf])


# --------------------------------------------------------------------------- observation noise


def chi_square_p_value(scaled: np.ndarray) -> float:
    """Two-sided p-value that ``scaled`` (N,) are N(0, 1) draws, by their sum of squares.

    The sum of N squared independent standard normals follows a chi-square law with N degrees
    of freedom (standard result); scipy.stats.chi2 is the reference distribution.
    """
    statistic = float(np.sum(scaled**2))
    dof = scaled.size
    return 2.0 * min(stats.chi2.cdf(statistic, dof), stats.chi2.sf(statistic, dof))


def noise_samples(env: gym.Env, steps: int, seed: int = 21) -> np.ndarray:
    """Observed minus noise-free Pendulum observations, shape (steps + 1, 3), in float64."""
    actions = pendulum_actions(steps, seed=1)
    plain_obs, _ = rollout(pendulum(), seed, actions)
    noisy_obs, _ = rollout(env, seed, actions)
    return noisy_obs.astype(np.float64) - plain_obs.astype(np.float64)


def test_observation_noise_has_the_stated_std_and_zero_mean():
    std = np.array([0.01, 0.02, 0.05])
    samples = noise_samples(ObservationNoise(pendulum(), std=std), steps=1500)
    count = samples.shape[0]
    for dim in range(3):
        scaled = samples[:, dim] / std[dim]
        assert chi_square_p_value(scaled) > ALPHA, f"std of dim {dim} is off"
        # The mean of N standard normals is N(0, 1/N) (standard result; scipy.stats.norm).
        z = scaled.mean() * np.sqrt(count)
        assert 2.0 * stats.norm.sf(abs(z)) > ALPHA, f"mean of dim {dim} is off"
        # Kolmogorov-Smirnov against scipy's standard normal checks the shape, not just moments.
        assert stats.kstest(scaled, stats.norm.cdf).pvalue > ALPHA, f"dim {dim} is not Gaussian"
        # The same test rejects a std 15% too small, so it can fail.
        assert chi_square_p_value(samples[:, dim] / (1.15 * std[dim])) < 1e-6


def test_stacked_noise_wrappers_draw_independent_streams():
    std = 0.02
    env = ObservationNoise(ObservationNoise(pendulum(), std=std), std=std)
    samples = noise_samples(env, steps=1500).ravel()
    # Independent draws add variances (std * sqrt 2); a shared stream would give 2 * std.
    assert chi_square_p_value(samples / (np.sqrt(2.0) * std)) > ALPHA
    assert chi_square_p_value(samples / (2.0 * std)) < 1e-6


def test_observation_noise_is_reproducible_and_leaves_the_inner_stream_alone():
    actions = pendulum_actions(30)
    first, _ = rollout(ObservationNoise(pendulum(), std=0.05), 5, actions)
    second, _ = rollout(ObservationNoise(pendulum(), std=0.05), 5, actions)
    other, _ = rollout(ObservationNoise(pendulum(), std=0.05), 6, actions)
    np.testing.assert_array_equal(first, second)
    assert not np.allclose(first[1:], other[1:])

    noisy, plain = ObservationNoise(pendulum(), std=0.05), pendulum()
    rollout(noisy, 5, actions), rollout(plain, 5, actions)
    noisy.reset(), plain.reset()  # unseeded resets draw from the inner generator
    assert (
        noisy.unwrapped.np_random.bit_generator.state
        == plain.unwrapped.np_random.bit_generator.state
    )


def test_observation_noise_respects_its_widened_bounds():
    env = ObservationNoise(ActionRecorder(), std=[2.0, 0.0], bound_margin_stds=0.25)
    np.testing.assert_array_equal(env.observation_space.low, [-1.5, -1.0])
    np.testing.assert_array_equal(env.observation_space.high, [1.5, 1.0])
    env.reset(seed=0)
    observations = [env.step(np.zeros(2, np.float32))[0] for _ in range(400)]
    assert all(obs in env.observation_space for obs in observations)
    first_dim = np.array([obs[0] for obs in observations])
    # Zero observations, edges at 1.5 = 0.75 std: P(|N(0,1)| > 0.75) is about 45%, so both edges
    # are hit many times in 400 draws.
    assert np.any(first_dim == 1.5) and np.any(first_dim == -1.5)
    assert all(obs[1] == 0.0 for obs in observations)


def test_observation_noise_state_dict_resumes_the_stream():
    original = ObservationNoise(ActionRecorder(), std=0.3)
    assert original.state_dict() == {"generator_state": None}
    original.reset(seed=3)
    for _ in range(4):
        original.step(np.zeros(2, np.float32))
    saved = json.loads(json.dumps(original.state_dict()))  # must survive a JSON round trip
    expected = [original.step(np.zeros(2, np.float32))[0] for _ in range(3)]

    resumed = ObservationNoise(ActionRecorder(), std=0.3)
    resumed.reset(seed=99)
    resumed.load_state_dict(saved)
    got = [resumed.step(np.zeros(2, np.float32))[0] for _ in range(3)]
    np.testing.assert_array_equal(np.stack(got), np.stack(expected))


# --------------------------------------------------------------------------- action gain / offset


def test_action_gain_scales_then_clips_what_the_inner_env_receives():
    inner = ActionRecorder()  # action bounds [-1, 1] x [-2, 2]
    env = ActionGain(inner, gain=[0.5, 3.0])
    env.reset(seed=0)
    env.step(np.array([0.8, 1.0], np.float32))
    env.step(np.array([-1.0, -0.5], np.float32))
    # Worked by hand: 0.5 * 0.8 = 0.4; 3 * 1 = 3 clipped to 2; 0.5 * -1 = -0.5; 3 * -0.5 = -1.5.
    np.testing.assert_allclose(inner.received[0], [0.4, 2.0], rtol=1e-6)
    np.testing.assert_allclose(inner.received[1], [-0.5, -1.5], rtol=1e-6)
    assert all(action.dtype == np.float32 for action in inner.received)


def test_action_offset_shifts_then_clips_what_the_inner_env_receives():
    inner = ActionRecorder()
    env = ActionOffset(inner, offset=[0.25, -1.5])
    env.reset(seed=0)
    env.step(np.array([0.8, 1.0], np.float32))
    env.step(np.array([-1.0, -1.0], np.float32))
    # Worked by hand: 0.8 + 0.25 = 1.05 clipped to 1; 1 - 1.5 = -0.5; -1 + 0.25 = -0.75;
    # -1 - 1.5 = -2.5 clipped to -2.
    np.testing.assert_allclose(inner.received[0], [1.0, -0.5], rtol=1e-6)
    np.testing.assert_allclose(inner.received[1], [-0.75, -2.0], rtol=1e-6)


@pytest.mark.parametrize(
    "wrap, transform",
    [
        (lambda env: ActionGain(env, gain=0.5), lambda a: np.clip(a * np.float32(0.5), -2, 2)),
        (lambda env: ActionGain(env, gain=-1.7), lambda a: np.clip(a * np.float32(-1.7), -2, 2)),
        (lambda env: ActionOffset(env, offset=0.3), lambda a: np.clip(a + np.float32(0.3), -2, 2)),
    ],
)
def test_action_transform_matches_pendulum_dynamics(wrap, transform):
    # Pendulum-v1's own dynamics are the reference: stepping it with the hand-transformed
    # action must give exactly what the wrapped env gives for the raw action.
    actions = pendulum_actions(60)
    wrapped_obs, wrapped_rewards = rollout(wrap(pendulum()), 4, actions)
    plain_obs, plain_rewards = rollout(pendulum(), 4, np.stack([transform(a) for a in actions]))
    np.testing.assert_array_equal(wrapped_obs, plain_obs)
    np.testing.assert_array_equal(wrapped_rewards, plain_rewards)
    untouched_obs, _ = rollout(pendulum(), 4, actions)
    assert not np.array_equal(wrapped_obs, untouched_obs)


# --------------------------------------------------------------------------- action delay


def test_action_delay_applies_the_action_from_k_steps_earlier():
    inner = ActionRecorder()
    env = ActionDelay(inner, steps=2)
    env.reset(seed=0)
    actions = [np.array([0.1 * t, -0.1 * t], np.float32) for t in range(1, 7)]
    for action in actions:
        env.step(action)
    expected = [np.zeros(2), np.zeros(2), *actions[:4]]
    np.testing.assert_array_equal(np.stack(inner.received), np.stack(expected))

    # The queue restarts from the hold action on reset.
    inner.received.clear()
    env.reset()
    env.step(np.array([0.9, 0.9], np.float32))
    np.testing.assert_array_equal(inner.received[0], [0.0, 0.0])


def test_action_delay_hold_defaults_to_zeros_clipped_into_the_space_or_is_given():
    inner = ActionRecorder(low=(0.5, -2.0), high=(1.0, 2.0))
    env = ActionDelay(inner, steps=1)
    env.reset(seed=0)
    env.step(np.array([0.7, 0.7], np.float32))
    np.testing.assert_array_equal(inner.received[0], [0.5, 0.0])

    inner = ActionRecorder()
    env = ActionDelay(inner, steps=1, hold=[0.2, -0.3])
    env.reset(seed=0)
    env.step(np.array([0.7, 0.7], np.float32))
    np.testing.assert_allclose(inner.received[0], [0.2, -0.3], rtol=1e-6)


def test_action_delay_keeps_a_copy_of_each_action():
    inner = ActionRecorder()
    env = ActionDelay(inner, steps=1)
    env.reset(seed=0)
    buffer = np.array([0.4, 0.4], np.float32)
    env.step(buffer)
    buffer[:] = -1.0  # the caller reuses its buffer
    env.step(buffer)
    np.testing.assert_allclose(inner.received[1], [0.4, 0.4], rtol=1e-6)


def test_action_delay_matches_pendulum_fed_the_shifted_actions():
    steps = 3
    actions = pendulum_actions(40)
    delayed_obs, delayed_rewards = rollout(ActionDelay(pendulum(), steps=steps), 8, actions)
    shifted = np.concatenate([np.zeros((steps, 1), np.float32), actions[:-steps]])
    plain_obs, plain_rewards = rollout(pendulum(), 8, shifted)
    np.testing.assert_array_equal(delayed_obs, plain_obs)
    np.testing.assert_array_equal(delayed_rewards, plain_rewards)


def test_action_delay_state_dict_restores_the_queue():
    original_inner = ActionRecorder()
    original = ActionDelay(original_inner, steps=2)
    original.reset(seed=0)
    for t in range(3):
        original.step(np.array([0.1 * t, 0.2], np.float32))
    saved = original.state_dict()
    assert saved["pending_actions"].shape == (2, 2)

    resumed_inner = ActionRecorder()
    resumed = ActionDelay(resumed_inner, steps=2)
    resumed.reset(seed=0)
    resumed.load_state_dict(copy.deepcopy(saved))
    for env in (original, resumed):
        for t in range(2):
            env.step(np.array([0.9, -0.1 * t], np.float32))
    np.testing.assert_array_equal(
        np.stack(resumed_inner.received), np.stack(original_inner.received[-2:])
    )


# --------------------------------------------------------------------------- rebuilding


REBUILD_CASES = {
    **{name: {name: PENDULUM_SETTINGS[name]} for name in PERTURBATION_ORDER},
    "numpy_inputs": {
        "obs_bias": {"bias": np.array([0.1, -0.2, 0.3], dtype=np.float32)},
        "obs_noise": {"std": np.float64(0.03), "bound_margin_stds": np.float32(4.0)},
        "action_gain": {"gain": np.array([0.7])},
        "action_delay": {"steps": np.int64(1), "hold": np.array([0.25], dtype=np.float32)},
    },
    "all": PENDULUM_SETTINGS,
}


@pytest.mark.parametrize("case", list(REBUILD_CASES))
def test_recorded_constructor_args_rebuild_an_identical_env(case):
    original = apply_perturbations(pendulum(), REBUILD_CASES[case])
    description = describe_wrappers(original)
    json.dumps(description)  # provenance must be JSON-serialisable
    rebuilt = [
        gym.make(original.spec),  # gymnasium's own rebuild path via WrapperSpec kwargs
        gym.make(EnvSpec.from_json(original.spec.to_json())),
        apply_perturbations(pendulum(), {e["name"]: e["kwargs"] for e in description}),
    ]
    actions = pendulum_actions(50)
    expected_obs, expected_rewards = rollout(original, 13, actions)
    for env in rebuilt:
        assert describe_wrappers(env) == description
        assert env.observation_space == original.observation_space
        obs, rewards = rollout(env, 13, actions)
        np.testing.assert_array_equal(obs, expected_obs)
        np.testing.assert_array_equal(rewards, expected_rewards)


def test_describe_wrappers_lists_outermost_first_and_spec_order_does_not_matter():
    forward = apply_perturbations(pendulum(), PENDULUM_SETTINGS)
    backward = apply_perturbations(pendulum(), dict(reversed(list(PENDULUM_SETTINGS.items()))))
    description = describe_wrappers(forward)
    assert [e["name"] for e in description] == list(reversed(PERTURBATION_ORDER))
    assert description == describe_wrappers(backward)
    assert description[0] == {"name": "action_delay", "kwargs": {"steps": 2, "hold": None}}
    assert describe_wrappers(pendulum()) == []


def test_module_examples_run():
    result = doctest.testmod(wrappers_module)
    assert result.attempted > 0 and result.failed == 0


# --------------------------------------------------------------------------- bad input


def integer_action_env() -> gym.Env:
    env = ActionRecorder()
    env.action_space = Box(-3, 3, shape=(2,), dtype=np.int64)
    return env


BAD_INPUTS = [
    (lambda: ObservationBias(DiscreteEnv(), bias=0.0), "observation_space"),
    (lambda: ObservationNoise(DiscreteEnv(), std=0.1), "observation_space"),
    (lambda: ActionGain(DiscreteEnv(), gain=1.0), "action_space"),
    (lambda: ActionOffset(DiscreteEnv(), offset=0.0), "action_space"),
    (lambda: ActionDelay(DiscreteEnv(), steps=1), "action_space"),
    (lambda: ActionGain(integer_action_env(), gain=2.0), "floating-point dtype"),
    (lambda: ObservationBias(pendulum(), bias=[0.1, 0.2]), "bias=[0.1, 0.2]"),
    (lambda: ObservationBias(pendulum(), bias=np.nan), "bias=nan"),
    (lambda: ObservationBias(pendulum(), bias="0.1"), "bias='0.1'"),
    (lambda: ObservationBias(pendulum(), bias=True), "bias=True"),
    (lambda: ObservationBias(pendulum(), bias=1e39), "bias=1e+39"),
    (lambda: ObservationNoise(pendulum(), std=-0.1), "std=-0.1"),
    (lambda: ObservationNoise(pendulum(), std=[0.1, -0.1, 0.1]), "std=[0.1, -0.1, 0.1]"),
    (lambda: ObservationNoise(pendulum(), std=np.inf), "std=inf"),
    (lambda: ObservationNoise(pendulum(), std=0.1, bound_margin_stds=-1.0), "bound_margin_stds"),
    (lambda: ActionGain(pendulum(), gain=[1.0, 2.0]), "gain=[1.0, 2.0]"),
    (lambda: ActionGain(pendulum(), gain=np.inf), "gain=inf"),
    (lambda: ActionOffset(pendulum(), offset=np.nan), "offset=nan"),
    (lambda: ActionOffset(pendulum(), offset=np.zeros((1, 1))), "offset="),
    (lambda: ActionDelay(pendulum(), steps=0), "steps=0"),
    (lambda: ActionDelay(pendulum(), steps=-2), "steps=-2"),
    (lambda: ActionDelay(pendulum(), steps=1.5), "steps=1.5"),
    (lambda: ActionDelay(pendulum(), steps=True), "steps=True"),
    (lambda: ActionDelay(pendulum(), steps=1, hold=5.0), "hold=5.0"),
    (lambda: ActionDelay(pendulum(), steps=1, hold=[0.0, 0.0]), "hold=[0.0, 0.0]"),
    (lambda: apply_perturbations(pendulum(), {"obs_scale": {}}), "obs_scale"),
    (lambda: apply_perturbations(pendulum(), ["obs_bias"]), "spec="),
    (lambda: apply_perturbations(pendulum(), {"obs_bias": 0.1}), "obs_bias"),
    (lambda: apply_perturbations(pendulum(), {"obs_bias": {"offset": 0.1}}), "bias"),
    (lambda: apply_perturbations(pendulum(), {"action_delay": {}}), "steps"),
]


@pytest.mark.parametrize("make, fragment", BAD_INPUTS)
def test_bad_input_raises_value_error_naming_the_parameter(make, fragment):
    with pytest.raises(ValueError, match=re.escape(fragment)) as error:
        make()
    assert "accepted" in str(error.value)


def test_unknown_perturbation_lists_every_accepted_name():
    with pytest.raises(ValueError) as error:
        apply_perturbations(pendulum(), {"obs_scale": {"scale": 2.0}})
    assert all(name in str(error.value) for name in PERTURBATION_ORDER)


@pytest.mark.parametrize(
    "wrap",
    [lambda e: ActionGain(e, 1.0), lambda e: ActionOffset(e, 0.0), lambda e: ActionDelay(e, 1)],
)
def test_action_of_the_wrong_shape_is_refused(wrap):
    env = wrap(ActionRecorder())
    env.reset(seed=0)
    with pytest.raises(ValueError, match=re.escape("shape (3,)")):
        env.step(np.zeros(3, np.float32))


def test_bad_state_dicts_are_refused():
    delay = ActionDelay(ActionRecorder(), steps=2)
    with pytest.raises(ValueError, match="pending_actions"):
        delay.load_state_dict({"pending_actions": np.zeros((3, 2))})
    with pytest.raises(ValueError, match="pending_actions"):
        delay.load_state_dict({"queue": np.zeros((2, 2))})
    noise = ObservationNoise(ActionRecorder(), std=0.1)
    with pytest.raises(ValueError, match="generator_state"):
        noise.load_state_dict({"generator_state": {"bit_generator": "MT19937"}})
