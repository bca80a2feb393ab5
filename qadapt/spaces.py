"""Observation and action spaces as a manifest records them, and checks against live spaces.

Holds:
    BoxDescription -- a 1-D gymnasium Box: shape, dtype, per-dimension bounds.
    DiscreteDescription -- a gymnasium Discrete: n choices starting at ``start``.
    action_bounds -- the bounds of stored actions (a Box's, or a Discrete's choices as a column).
    env_actions -- stored-form actions as an env takes them (a Discrete's as integers).
    describe_space -- the description of a gymnasium space (Box with 1-D shape, or Discrete).
    parse_space -- a description from its JSON form, validated.
    space_difference -- the first way two space descriptions differ (one bound tolerance).
    check_spaces -- BadInput unless a dataset's spaces match given gymnasium spaces.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import gymnasium
import numpy as np

from qadapt.checks import positive_int
from qadapt.errors import BadInput

_FLOAT_DTYPES = ("float16", "float32", "float64")


def _bound_to_json(value: float) -> float | str:
    # JSON has no infinity; strict parsers reject the non-standard `Infinity` token.
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    return float(value)


def _bound_from_json(value: object, where: str) -> float:
    if value == "inf":
        return math.inf
    if value == "-inf":
        return -math.inf
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise BadInput(f"{where}: got {value!r}, expected a number, 'inf' or '-inf'")
    number = float(value)
    if math.isnan(number) or math.isinf(number):
        raise BadInput(f"{where}: got {value!r}, expected a finite number, 'inf' or '-inf'")
    return number


@dataclass(frozen=True)
class BoxDescription:
    """A 1-D Box space: ``shape == (width,)``, bounds per dimension (may be infinite).

    Example:
        >>> box = describe_space(gymnasium.spaces.Box(-1.0, 1.0, (2,)))
        >>> box.width, box.to_json()["high"]
        (2, [1.0, 1.0])
    """

    shape: tuple[int]
    dtype: str
    low: tuple[float, ...]
    high: tuple[float, ...]

    @property
    def width(self) -> int:
        """Columns this space takes in a dataset array."""
        return self.shape[0]

    def label(self) -> str:
        """Short human-readable form, e.g. ``Box shape (4,) float32``."""
        return f"Box shape {self.shape} {self.dtype}"

    def to_json(self) -> dict[str, Any]:
        return {
            "type": "box",
            "shape": list(self.shape),
            "dtype": self.dtype,
            "low": [_bound_to_json(v) for v in self.low],
            "high": [_bound_to_json(v) for v in self.high],
        }

    def to_space(self) -> gymnasium.spaces.Box:
        """The gymnasium Box this describes."""
        return gymnasium.spaces.Box(
            low=np.array(self.low, dtype=np.float64).astype(self.dtype),
            high=np.array(self.high, dtype=np.float64).astype(self.dtype),
            shape=self.shape,
            dtype=np.dtype(self.dtype),
        )


@dataclass(frozen=True)
class DiscreteDescription:
    """A Discrete space: integers ``start .. start + n - 1``, stored as one float32 column.

    Example:
        >>> d = describe_space(gymnasium.spaces.Discrete(3))
        >>> d.width, d.to_json()
        (1, {'type': 'discrete', 'n': 3, 'start': 0})
    """

    n: int
    start: int

    @property
    def width(self) -> int:
        return 1

    def label(self) -> str:
        return f"Discrete n={self.n} start={self.start}"

    def to_json(self) -> dict[str, Any]:
        return {"type": "discrete", "n": self.n, "start": self.start}

    def to_space(self) -> gymnasium.spaces.Discrete:
        return gymnasium.spaces.Discrete(self.n, start=self.start)


SpaceDescription = BoxDescription | DiscreteDescription


def describe_space(space: gymnasium.Space, *, role: str = "space") -> SpaceDescription:
    """Describe a gymnasium space; only 1-D Box and Discrete spaces are supported.

    ``role`` ("observation space", "action space") names the space in the error message.
    """
    if isinstance(space, gymnasium.spaces.Box):
        if len(space.shape) != 1:
            raise BadInput(
                f"{role}: Box of shape {space.shape} is not supported; datasets hold flat "
                "vectors (a Box of shape (d,))"
            )
        if space.dtype is None or space.dtype.name not in _FLOAT_DTYPES:
            raise BadInput(f"{role}: Box of dtype {space.dtype} is not supported; use a float")
        return BoxDescription(
            shape=(int(space.shape[0]),),
            dtype=space.dtype.name,
            low=tuple(float(v) for v in np.asarray(space.low, dtype=np.float64)),
            high=tuple(float(v) for v in np.asarray(space.high, dtype=np.float64)),
        )
    if isinstance(space, gymnasium.spaces.Discrete):
        return DiscreteDescription(n=int(space.n), start=int(space.start))
    raise BadInput(
        f"{role}: {type(space).__name__} spaces are not supported; use a 1-D Box or Discrete"
    )


def parse_space(value: object, *, where: str) -> SpaceDescription:
    """Parse and validate a space description from a manifest (the form ``to_json`` gives)."""
    if not isinstance(value, dict):
        raise BadInput(f"{where}: got {type(value).__name__}, expected an object")
    kind = value.get("type")
    if kind == "discrete":
        if set(value) != {"type", "n", "start"}:
            raise BadInput(f"{where}: a discrete space has exactly the keys type, n, start")
        start = value["start"]
        if isinstance(start, bool) or not isinstance(start, int):
            raise BadInput(f"{where}.start: got {start!r}, expected an integer")
        return DiscreteDescription(n=positive_int(f"{where}.n", value["n"], BadInput), start=start)
    if kind != "box":
        raise BadInput(f"{where}.type: got {kind!r}, expected 'box' or 'discrete'")
    if set(value) != {"type", "shape", "dtype", "low", "high"}:
        raise BadInput(f"{where}: a box space has exactly the keys type, shape, dtype, low, high")
    shape = value["shape"]
    if not isinstance(shape, list) or len(shape) != 1:
        raise BadInput(f"{where}.shape: got {shape!r}, expected a one-element list [d]")
    width = positive_int(f"{where}.shape[0]", shape[0], BadInput)
    dtype = value["dtype"]
    if dtype not in _FLOAT_DTYPES:
        raise BadInput(f"{where}.dtype: got {dtype!r}, expected one of {list(_FLOAT_DTYPES)}")
    bounds = {}
    for key in ("low", "high"):
        items = value[key]
        if not isinstance(items, list) or len(items) != width:
            raise BadInput(f"{where}.{key}: expected a list of {width} bounds")
        bounds[key] = tuple(_bound_from_json(v, f"{where}.{key}[{i}]") for i, v in enumerate(items))
    for i, (low, high) in enumerate(zip(bounds["low"], bounds["high"], strict=True)):
        if low > high:
            raise BadInput(f"{where}: dimension {i} has low {low} above high {high}")
    return BoxDescription(shape=(width,), dtype=dtype, low=bounds["low"], high=bounds["high"])


def action_bounds(space: gymnasium.Space) -> tuple[np.ndarray, np.ndarray]:
    """(low, high), float32 [A], of the actions as datasets store them: a Box's bounds, or for
    a Discrete space the one column ``start .. start + n - 1`` (a width of at least 1, so that a
    network can map it to [-1, 1] even for a single choice).

    Example:
        >>> [b.tolist() for b in action_bounds(gymnasium.spaces.Discrete(3, start=1))]
        [[1.0], [3.0]]
    """
    if isinstance(space, gymnasium.spaces.Discrete):
        start = float(space.start)
        return (np.array([start], dtype=np.float32),
                np.array([start + max(int(space.n) - 1, 1)], dtype=np.float32))
    return np.asarray(space.low, dtype=np.float32), np.asarray(space.high, dtype=np.float32)


def env_actions(space: gymnasium.Space, actions: np.ndarray) -> np.ndarray:
    """Actions [N, A] in stored form as a (vector) env with action space ``space`` takes them:
    a Discrete space's column rounded to int64 [N]; a Box's unchanged.

    Example:
        >>> env_actions(gymnasium.spaces.Discrete(2), np.array([[1.0], [0.0]], np.float32))
        array([1, 0])
    """
    if isinstance(space, gymnasium.spaces.Discrete):
        return np.rint(np.asarray(actions).reshape(len(actions), -1)[:, 0]).astype(np.int64)
    return actions


def _shape_text(description: SpaceDescription) -> str:
    if isinstance(description, BoxDescription):
        return f"Box of shape {description.shape}"
    return f"Discrete of n={description.n} (stored as shape (1,))"


# Box bounds agree to a relative 1e-6: float32 keeps about 7 significant digits, so a float32
# and a float64 copy of the same bounds compare equal (common practice).
BOUND_TOLERANCE = 1e-6


def space_difference(a: SpaceDescription, b: SpaceDescription) -> tuple[str, int | None] | None:
    """The first way two space descriptions differ, or None when they match.

    Returns ("kind", None) for Box against Discrete, ("choices", None) for Discrete spaces with
    other ``n`` or ``start``, ("shape", None), or ("bounds", i) for the first dimension whose
    bounds differ by more than ``BOUND_TOLERANCE`` (relative). Dtypes are not compared: replay
    data and networks work in float32 whatever the space says. The one comparison behind
    ``check_spaces`` and the checkpoint's space check.

    Example:
        >>> box = describe_space(gymnasium.spaces.Box(-1.0, 1.0, (2,), dtype=np.float64))
        >>> same = describe_space(gymnasium.spaces.Box(-1.0, 1.0, (2,), dtype=np.float32))
        >>> space_difference(box, same) is None
        True
        >>> space_difference(box, describe_space(gymnasium.spaces.Box(-1.0, 2.0, (2,))))
        ('bounds', 0)
    """
    if type(a) is not type(b):
        return ("kind", None)
    if isinstance(a, DiscreteDescription):
        return None if (a.n, a.start) == (b.n, b.start) else ("choices", None)
    if a.shape != b.shape:
        return ("shape", None)
    for i in range(a.width):
        pairs = zip((a.low[i], a.high[i]), (b.low[i], b.high[i]), strict=True)
        if not all(math.isclose(x, y, rel_tol=BOUND_TOLERANCE) for x, y in pairs):
            return ("bounds", i)
    return None


def _mismatch(
    described: SpaceDescription, expected: SpaceDescription, *, role: str, source: str, what: str
) -> str | None:
    difference = space_difference(described, expected)
    if difference is None:
        return None
    kind, i = difference
    if kind in ("kind", "shape"):
        return (
            f"{source}: {role} mismatch: the dataset has a {_shape_text(described)} "
            f"but the {what} has a {_shape_text(expected)}"
        )
    if kind == "choices":
        return (
            f"{source}: {role} mismatch: the dataset has {described.label()} "
            f"but the {what} has {expected.label()}"
        )
    return (
        f"{source}: {role} mismatch at dimension {i}: bounds "
        f"{[described.low[i], described.high[i]]} in the dataset (shape {described.shape}) but "
        f"{[expected.low[i], expected.high[i]]} in the {what} (shape {expected.shape})"
    )


def check_spaces(
    dataset: Any,
    observation_space: gymnasium.Space,
    action_space: gymnasium.Space,
    what: str = "env",
) -> None:
    """Raise BadInput unless ``dataset``'s recorded spaces match the given gymnasium spaces.

    Compares kind (Box/Discrete), shape and per-dimension bounds with ``space_difference``
    (dtypes are not compared: dataset arrays are float32 whatever the space's dtype).
    ``what`` names the other side in the message ("env", "checkpoint", ...). ``dataset`` is
    anything with ``observation_space`` and ``action_space`` descriptions and a ``path`` (a
    ReplayDataset).

    Example:
        >>> class Recorded:  # stands in for a ReplayDataset
        ...     path = "ds"
        ...     observation_space = describe_space(gymnasium.spaces.Box(-1, 1, (3,)))
        ...     action_space = describe_space(gymnasium.spaces.Discrete(2))
        >>> box4 = gymnasium.spaces.Box(-1, 1, (4,))
        >>> try:
        ...     check_spaces(Recorded(), box4, gymnasium.spaces.Discrete(2))
        ... except BadInput as err:
        ...     print(str(err).split(" but ")[1])
        the env has a Box of shape (4,)
    """
    source = str(getattr(dataset, "path", "dataset"))
    for role, described, live in (
        ("observation space", dataset.observation_space, observation_space),
        ("action space", dataset.action_space, action_space),
    ):
        expected = describe_space(live, role=f"{what} {role}")
        problem = _mismatch(described, expected, role=role, source=source, what=what)
        if problem:
            raise BadInput(problem)
