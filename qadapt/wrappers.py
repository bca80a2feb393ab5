"""Perturbation wrappers that turn any Box-space gymnasium environment into a variation of itself.

Holds:
    ObservationBias      -- adds a fixed offset (scalar or per-dimension) to every observation.
    ObservationNoise     -- adds zero-mean Gaussian noise, seeded through ``reset(seed=...)``.
    ActionGain           -- multiplies the action by a gain, then clips it into the inner space.
    ActionOffset         -- adds an offset to the action, then clips it into the inner space.
    ActionDelay          -- the inner environment receives the action from ``steps`` steps earlier.
    PERTURBATION_ORDER   -- the short names ``apply_perturbations`` accepts, innermost first.
    apply_perturbations  -- wraps an environment from a ``{short name: kwargs}`` mapping.
    describe_wrappers    -- lists the qadapt wrappers on an environment, outermost first, as JSON.

Every wrapper records its constructor arguments (``gymnasium.utils.RecordConstructorArgs``) as
plain JSON values, so ``env.spec`` can rebuild the whole chain with ``gymnasium.make(env.spec)``
and ``env.spec.to_json()`` works.
"""

from __future__ import annotations

import copy
import inspect
import numbers
from collections import deque
from collections.abc import Mapping
from typing import Any, SupportsFloat

import gymnasium as gym
import numpy as np
from gymnasium.spaces import Box

__all__ = [
    "PERTURBATION_ORDER",
    "ActionDelay",
    "ActionGain",
    "ActionOffset",
    "ObservationBias",
    "ObservationNoise",
    "apply_perturbations",
    "describe_wrappers",
]

# Keeps the noise stream apart from the environment's own generator, which gymnasium seeds
# with ``SeedSequence(seed)`` and no spawn key; the value itself is arbitrary.
_NOISE_STREAM_KEY = 0x6E6F697365


def _float_box(space: gym.Space, attribute: str, wrapper: str) -> Box:
    """Return ``space`` if it is a Box with a floating dtype, else raise a ValueError."""
    if not isinstance(space, Box):
        raise ValueError(
            f"{wrapper} needs env.{attribute} to be a gymnasium.spaces.Box, got {space!r}; "
            "accepted: a Box with a floating-point dtype"
        )
    if not np.issubdtype(space.dtype, np.floating):
        raise ValueError(
            f"{wrapper} needs env.{attribute} to have a floating-point dtype, got {space!r} "
            f"with dtype {space.dtype}; accepted: float16, float32 or float64 Boxes"
        )
    return space


def _real_array(value: Any, name: str, shape: tuple[int, ...]) -> np.ndarray:
    """Parse a scalar or an array of ``shape`` into float64, rejecting anything else."""
    accepted = f"a finite real number or an array of shape {shape}"
    try:
        raw = np.asarray(value)
    except (TypeError, ValueError) as error:
        raise ValueError(f"{name}={value!r} is not numeric; accepted: {accepted}") from error
    if raw.dtype.kind not in "iuf":  # bool, complex, str and object arrays are all mistakes here
        raise ValueError(
            f"{name}={value!r} has dtype {raw.dtype}, which is not a real number type; "
            f"accepted: {accepted}"
        )
    array = raw.astype(np.float64)
    if array.shape not in ((), shape):
        raise ValueError(f"{name}={value!r} has shape {array.shape}; accepted: {accepted}")
    if not np.all(np.isfinite(array)):
        raise ValueError(f"{name}={value!r} has non-finite entries; accepted: {accepted}")
    return array


def _in_dtype(array: np.ndarray, name: str, shape: tuple[int, ...], dtype: np.dtype) -> np.ndarray:
    """Broadcast a parsed float64 value to ``shape`` and cast it, checking it stays finite."""
    with np.errstate(over="ignore"):  # overflow is reported below, with the parameter's name
        cast = np.broadcast_to(array, shape).astype(dtype)
    if not np.all(np.isfinite(cast)):
        raise ValueError(
            f"{name}={array.tolist()!r} overflows the space dtype {dtype}; "
            f"accepted: values representable in {dtype}"
        )
    return cast


def _as_json(array: np.ndarray) -> float | list:
    """Record a parsed value as a plain float or nested list, which rebuilds it exactly."""
    return array.tolist()


def _check_action_shape(action: Any, space: Box, wrapper: str) -> np.ndarray:
    """Convert an incoming action to the space dtype; a wrong shape would broadcast silently."""
    array = np.asarray(action, dtype=space.dtype)
    if array.shape != space.shape:
        raise ValueError(
            f"{wrapper} got an action of shape {array.shape}; accepted: shape {space.shape} "
            "(the action space's shape)"
        )
    return array


class ObservationBias(gym.ObservationWrapper, gym.utils.RecordConstructorArgs):
    """Adds a fixed ``bias`` to every observation, like a mis-calibrated sensor.

    The observation space is shifted by the same bias (infinite bounds stay infinite), so every
    returned observation still lies in ``observation_space``. Observations keep the inner
    space's dtype.

    Args:
        env: environment with a floating-point Box observation space of shape ``S``.
        bias: scalar or array of shape ``S``, in observation units; must be finite.

    Example:
        >>> import gymnasium as gym
        >>> import numpy as np
        >>> from qadapt.wrappers import ObservationBias
        >>> env = ObservationBias(gym.make("Pendulum-v1"), bias=[0.0, 0.0, 0.5])
        >>> env.observation_space.high
        array([1. , 1. , 8.5], dtype=float32)
        >>> shifted, _ = env.reset(seed=0)
        >>> plain, _ = gym.make("Pendulum-v1").reset(seed=0)
        >>> bool(shifted[2] == plain[2] + np.float32(0.5))
        True
    """

    def __init__(self, env: gym.Env, bias: float | np.ndarray | list):
        space = _float_box(env.observation_space, "observation_space", "ObservationBias")
        parsed = _real_array(bias, "bias", space.shape)
        gym.utils.RecordConstructorArgs.__init__(self, bias=_as_json(parsed))
        gym.ObservationWrapper.__init__(self, env)
        self.bias = _in_dtype(parsed, "bias", space.shape, space.dtype)
        # Same-dtype addition is monotone, so obs >= low implies obs + bias >= low + bias
        # after rounding too: the shifted bounds stay honest.
        self.observation_space = Box(
            low=space.low + self.bias, high=space.high + self.bias, dtype=space.dtype
        )

    def observation(self, observation: np.ndarray) -> np.ndarray:
        """Return ``observation + bias`` in the space dtype, shape ``S``."""
        return np.asarray(observation, dtype=self.bias.dtype) + self.bias


class ObservationNoise(gym.ObservationWrapper, gym.utils.RecordConstructorArgs):
    """Adds zero-mean Gaussian noise with standard deviation ``std`` to every observation.

    The noise comes from the wrapper's own generator, re-created from the seed whenever
    ``reset(seed=...)`` is called, so a seeded run is reproducible and the inner environment's
    random stream is left untouched. Stacked noise wrappers draw independent streams.

    Gaussian noise is unbounded, so the observation space is widened by ``bound_margin_stds``
    standard deviations per dimension and the rare draws beyond it are clipped (at the default
    6, a value is clipped with probability about 2e-9). ``bound_margin_stds=None`` keeps the
    noise exactly Gaussian and makes the noisy dimensions' bounds infinite instead.

    Args:
        env: environment with a floating-point Box observation space of shape ``S``.
        std: scalar or array of shape ``S``, in observation units; finite and >= 0.
        bound_margin_stds: how many standard deviations to widen finite bounds by (>= 0), or
            None for unbounded noisy dimensions.

    Example:
        >>> import gymnasium as gym
        >>> from qadapt.wrappers import ObservationNoise
        >>> env = ObservationNoise(gym.make("Pendulum-v1"), std=0.01)
        >>> first, _ = env.reset(seed=3)
        >>> again, _ = env.reset(seed=3)
        >>> plain, _ = gym.make("Pendulum-v1").reset(seed=3)
        >>> bool((first == again).all()), bool((first != plain).all())
        (True, True)
        >>> bool(abs(first - plain).max() < 0.06)
        True
    """

    def __init__(
        self,
        env: gym.Env,
        std: float | np.ndarray | list,
        bound_margin_stds: float | None = 6.0,
    ):
        space = _float_box(env.observation_space, "observation_space", "ObservationNoise")
        parsed = _real_array(std, "std", space.shape)
        if np.any(parsed < 0):
            raise ValueError(
                f"std={std!r} has negative entries; accepted: standard deviations >= 0, "
                f"a scalar or an array of shape {space.shape}"
            )
        if bound_margin_stds is not None:
            if (
                isinstance(bound_margin_stds, bool)
                or not isinstance(bound_margin_stds, numbers.Real)
                or not np.isfinite(bound_margin_stds)
                or bound_margin_stds < 0
            ):
                raise ValueError(
                    f"bound_margin_stds={bound_margin_stds!r} is invalid; accepted: a finite "
                    "real number >= 0, or None for unbounded noisy dimensions"
                )
            bound_margin_stds = float(bound_margin_stds)
        gym.utils.RecordConstructorArgs.__init__(
            self, std=_as_json(parsed), bound_margin_stds=bound_margin_stds
        )
        gym.ObservationWrapper.__init__(self, env)

        self.std = np.broadcast_to(parsed, space.shape).copy()  # float64, shape S
        self.bound_margin_stds = bound_margin_stds
        noisy = self.std > 0
        if bound_margin_stds is None:
            low = np.where(noisy, -np.inf, space.low)
            high = np.where(noisy, np.inf, space.high)
        else:
            low = space.low - bound_margin_stds * self.std
            high = space.high + bound_margin_stds * self.std
        self.observation_space = Box(
            low=low.astype(space.dtype), high=high.astype(space.dtype), dtype=space.dtype
        )
        self._clip = bound_margin_stds is not None
        # Distinguishes this wrapper's stream from noise wrappers stacked beneath it.
        self._depth = _count_wrappers(env, ObservationNoise)
        self._generator: np.random.Generator | None = None

    def _seeded_generator(self, seed: int | None) -> np.random.Generator:
        sequence = np.random.SeedSequence(seed, spawn_key=(_NOISE_STREAM_KEY, self._depth))
        return np.random.Generator(np.random.PCG64(sequence))

    def reset(
        self, *, seed: int | None = None, options: dict[str, Any] | None = None
    ) -> tuple[np.ndarray, dict[str, Any]]:
        """Reset the inner env; a given ``seed`` (or the first reset) re-creates the generator."""
        observation, info = self.env.reset(seed=seed, options=options)
        if seed is not None or self._generator is None:
            self._generator = self._seeded_generator(seed)
        return self.observation(observation), info

    def observation(self, observation: np.ndarray) -> np.ndarray:
        """Return ``observation + std * N(0, 1)`` in the space dtype, shape ``S``."""
        if self._generator is None:  # stepped before any reset: fall back to fresh entropy
            self._generator = self._seeded_generator(None)
        noise = self._generator.standard_normal(self.std.shape) * self.std
        noisy = np.asarray(observation, dtype=np.float64) + noise
        if self._clip:
            noisy = np.clip(noisy, self.observation_space.low, self.observation_space.high)
        return noisy.astype(self.observation_space.dtype)

    def state_dict(self) -> dict[str, Any]:
        """Return the noise generator's state (None before the first reset)."""
        if self._generator is None:
            return {"generator_state": None}
        return {"generator_state": copy.deepcopy(self._generator.bit_generator.state)}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        """Restore a state from :meth:`state_dict`, so the noise continues where it left off."""
        if set(state) != {"generator_state"}:
            raise ValueError(
                f"state has keys {sorted(state)}; accepted: exactly ['generator_state']"
            )
        generator_state = state["generator_state"]
        if generator_state is None:
            self._generator = None
            return
        if not isinstance(generator_state, Mapping) or generator_state.get("bit_generator") != (
            "PCG64"
        ):
            raise ValueError(
                f"generator_state={generator_state!r} is not a PCG64 state; accepted: the "
                "'generator_state' value returned by ObservationNoise.state_dict()"
            )
        generator = np.random.Generator(np.random.PCG64())
        generator.bit_generator.state = copy.deepcopy(dict(generator_state))
        self._generator = generator


class ActionGain(gym.ActionWrapper, gym.utils.RecordConstructorArgs):
    """Multiplies each action by ``gain`` before the inner env sees it, then clips it into range.

    The agent still acts in the inner action space; the inner env receives
    ``clip(gain * action, low, high)``, like an actuator that is weaker or stronger than rated.

    Args:
        env: environment with a floating-point Box action space of shape ``A``.
        gain: scalar or array of shape ``A``, dimensionless; must be finite.

    Example:
        >>> import gymnasium as gym
        >>> import numpy as np
        >>> from qadapt.wrappers import ActionGain
        >>> env = ActionGain(gym.make("Pendulum-v1"), gain=0.5)
        >>> env.action(np.array([1.0], dtype=np.float32))
        array([0.5], dtype=float32)
        >>> env.action(np.array([-2.0], dtype=np.float32) * 3)
        array([-2.], dtype=float32)
    """

    def __init__(self, env: gym.Env, gain: float | np.ndarray | list):
        space = _float_box(env.action_space, "action_space", "ActionGain")
        parsed = _real_array(gain, "gain", space.shape)
        gym.utils.RecordConstructorArgs.__init__(self, gain=_as_json(parsed))
        gym.ActionWrapper.__init__(self, env)
        self.gain = _in_dtype(parsed, "gain", space.shape, space.dtype)

    def action(self, action: np.ndarray) -> np.ndarray:
        """Return ``clip(gain * action)`` in the inner space dtype, shape ``A``."""
        space = self.env.action_space
        scaled = _check_action_shape(action, space, "ActionGain") * self.gain
        return np.clip(scaled, space.low, space.high)


class ActionOffset(gym.ActionWrapper, gym.utils.RecordConstructorArgs):
    """Adds ``offset`` to each action before the inner env sees it, then clips it into range.

    The agent still acts in the inner action space; the inner env receives
    ``clip(action + offset, low, high)``, like an actuator with a zero-point error.

    Args:
        env: environment with a floating-point Box action space of shape ``A``.
        offset: scalar or array of shape ``A``, in action units; must be finite.

    Example:
        >>> import gymnasium as gym
        >>> import numpy as np
        >>> from qadapt.wrappers import ActionOffset
        >>> env = ActionOffset(gym.make("Pendulum-v1"), offset=0.25)
        >>> env.action(np.array([1.0], dtype=np.float32))
        array([1.25], dtype=float32)
        >>> env.action(np.array([1.9], dtype=np.float32))
        array([2.], dtype=float32)
    """

    def __init__(self, env: gym.Env, offset: float | np.ndarray | list):
        space = _float_box(env.action_space, "action_space", "ActionOffset")
        parsed = _real_array(offset, "offset", space.shape)
        gym.utils.RecordConstructorArgs.__init__(self, offset=_as_json(parsed))
        gym.ActionWrapper.__init__(self, env)
        self.offset = _in_dtype(parsed, "offset", space.shape, space.dtype)

    def action(self, action: np.ndarray) -> np.ndarray:
        """Return ``clip(action + offset)`` in the inner space dtype, shape ``A``."""
        space = self.env.action_space
        shifted = _check_action_shape(action, space, "ActionOffset") + self.offset
        return np.clip(shifted, space.low, space.high)


class ActionDelay(gym.Wrapper, gym.utils.RecordConstructorArgs):
    """The inner env receives the action given ``steps`` steps earlier, like a slow actuator link.

    During the first ``steps`` steps of an episode the inner env receives ``hold``. The queue of
    pending actions is refilled with ``hold`` on every ``reset()``. Actions are passed on
    unchanged otherwise (copied, so the caller may reuse its buffer).

    Args:
        env: environment with a floating-point Box action space of shape ``A``.
        steps: the delay in environment steps, an integer >= 1.
        hold: scalar or array of shape ``A`` inside the action space, or None for zeros clipped
            into the space (zero for a space containing it, else the nearest bound).

    Example:
        >>> import gymnasium as gym
        >>> import numpy as np
        >>> from qadapt.wrappers import ActionDelay
        >>> env = ActionDelay(gym.make("Pendulum-v1"), steps=1)
        >>> plain = gym.make("Pendulum-v1")
        >>> _ = env.reset(seed=0), plain.reset(seed=0)
        >>> late = env.step(np.array([2.0], dtype=np.float32))[0]
        >>> held = plain.step(np.array([0.0], dtype=np.float32))[0]
        >>> bool((late == held).all())
        True
    """

    def __init__(self, env: gym.Env, steps: int, hold: float | np.ndarray | list | None = None):
        space = _float_box(env.action_space, "action_space", "ActionDelay")
        if isinstance(steps, bool) or not isinstance(steps, numbers.Integral) or steps < 1:
            raise ValueError(f"steps={steps!r} is invalid; accepted: an integer >= 1")
        if hold is None:
            recorded_hold = None
            hold_action = np.clip(np.zeros(space.shape, dtype=space.dtype), space.low, space.high)
        else:
            parsed = _real_array(hold, "hold", space.shape)
            recorded_hold = _as_json(parsed)
            hold_action = _in_dtype(parsed, "hold", space.shape, space.dtype)
            if not space.contains(hold_action):
                raise ValueError(
                    f"hold={hold!r} lies outside the action space {space!r}; accepted: an "
                    "action inside the space, or None for zeros clipped into it"
                )
        gym.utils.RecordConstructorArgs.__init__(self, steps=int(steps), hold=recorded_hold)
        gym.Wrapper.__init__(self, env)
        self.steps = int(steps)
        self.hold = hold_action
        self._pending: deque[np.ndarray] = deque()
        self._refill()

    def _refill(self) -> None:
        self._pending = deque(self.hold.copy() for _ in range(self.steps))

    def reset(
        self, *, seed: int | None = None, options: dict[str, Any] | None = None
    ) -> tuple[Any, dict[str, Any]]:
        """Reset the inner env and refill the queue with ``hold``."""
        self._refill()
        return self.env.reset(seed=seed, options=options)

    def step(self, action: np.ndarray) -> tuple[Any, SupportsFloat, bool, bool, dict[str, Any]]:
        """Queue ``action`` (shape ``A``) and step the inner env with the oldest queued one."""
        queued = _check_action_shape(action, self.env.action_space, "ActionDelay").copy()
        self._pending.append(queued)
        return self.env.step(self._pending.popleft())

    def state_dict(self) -> dict[str, Any]:
        """Return the pending actions, oldest first, as an array of shape ``(steps, *A)``."""
        return {"pending_actions": np.stack(list(self._pending))}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        """Restore the queue from :meth:`state_dict`."""
        if set(state) != {"pending_actions"}:
            raise ValueError(
                f"state has keys {sorted(state)}; accepted: exactly ['pending_actions']"
            )
        space = self.env.action_space
        pending = np.asarray(state["pending_actions"], dtype=space.dtype)
        expected = (self.steps, *space.shape)
        if pending.shape != expected:
            raise ValueError(
                f"pending_actions has shape {pending.shape}; accepted: shape {expected} "
                "(steps, *action shape)"
            )
        self._pending = deque(row.copy() for row in pending)


def _count_wrappers(env: gym.Env, kind: type) -> int:
    """How many wrappers of type ``kind`` lie in ``env``'s chain, ``env`` included."""
    count = 0
    while isinstance(env, gym.Wrapper):
        count += isinstance(env, kind)
        env = env.env
    return count


# Innermost first. The agent's action is delayed, then scaled, then shifted, so the inner env
# receives clip(clip(gain * a[t - steps]) + offset); the agent sees obs + bias + noise.
_WRAPPERS_BY_NAME: dict[str, type[gym.Wrapper]] = {
    "obs_bias": ObservationBias,
    "obs_noise": ObservationNoise,
    "action_offset": ActionOffset,
    "action_gain": ActionGain,
    "action_delay": ActionDelay,
}
PERTURBATION_ORDER: tuple[str, ...] = tuple(_WRAPPERS_BY_NAME)
_NAMES_BY_WRAPPER = {cls: name for name, cls in _WRAPPERS_BY_NAME.items()}


def apply_perturbations(env: gym.Env, spec: Mapping[str, Mapping[str, Any]]) -> gym.Env:
    """Wrap ``env`` with the perturbations named in ``spec``, innermost first in a fixed order.

    The order is ``PERTURBATION_ORDER``: obs_bias, obs_noise, action_offset, action_gain,
    action_delay, whatever order ``spec`` lists them in. Each value holds that wrapper's
    keyword arguments, e.g. ``{"obs_bias": {"bias": 0.1}, "action_delay": {"steps": 1}}``.

    Example:
        >>> import gymnasium as gym
        >>> from qadapt.wrappers import apply_perturbations, describe_wrappers
        >>> env = apply_perturbations(
        ...     gym.make("Pendulum-v1"), {"action_delay": {"steps": 1}, "obs_bias": {"bias": 0.1}}
        ... )
        >>> [entry["name"] for entry in describe_wrappers(env)]
        ['action_delay', 'obs_bias']
    """
    if not isinstance(spec, Mapping):
        raise ValueError(
            f"spec={spec!r} is not a mapping; accepted: a mapping from perturbation names "
            f"({', '.join(PERTURBATION_ORDER)}) to keyword-argument mappings"
        )
    unknown = [name for name in spec if name not in _WRAPPERS_BY_NAME]
    if unknown:
        raise ValueError(
            f"unknown perturbation names {unknown!r} in spec; accepted: "
            f"{', '.join(PERTURBATION_ORDER)}"
        )
    for name in PERTURBATION_ORDER:
        if name not in spec:
            continue
        kwargs = spec[name]
        wrapper = _WRAPPERS_BY_NAME[name]
        parameters = [p for p in inspect.signature(wrapper.__init__).parameters if p != "self"]
        accepted = ", ".join(parameters[1:])  # the first is env, which we supply
        if not isinstance(kwargs, Mapping):
            raise ValueError(
                f"spec[{name!r}]={kwargs!r} is not a mapping; accepted: keyword arguments "
                f"of {wrapper.__name__} ({accepted})"
            )
        try:
            inspect.signature(wrapper).bind(env, **kwargs)
        except TypeError as error:
            raise ValueError(
                f"spec[{name!r}]={dict(kwargs)!r} does not fit {wrapper.__name__} ({error}); "
                f"accepted keyword arguments: {accepted}"
            ) from error
        env = wrapper(env, **kwargs)
    return env


def describe_wrappers(env: gym.Env) -> list[dict[str, Any]]:
    """List the qadapt wrappers on ``env``, outermost first, as JSON-serialisable dicts.

    Each entry is ``{"name": short name, "kwargs": recorded constructor arguments}``; feeding
    ``{e["name"]: e["kwargs"] for e in entries}`` to :func:`apply_perturbations` rebuilds the
    chain when it was built in ``PERTURBATION_ORDER``. Other wrappers (TimeLimit, ...) are
    skipped.
    """
    entries = []
    while isinstance(env, gym.Wrapper):
        name = _NAMES_BY_WRAPPER.get(type(env))
        if name is not None:
            entries.append({"name": name, "kwargs": copy.deepcopy(env._saved_kwargs)})
        env = env.env
    return entries
