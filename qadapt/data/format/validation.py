"""Checks on array contents: dtypes, finiteness, action bounds, matching row counts.

Holds:
    as_float32 -- a floating array cast to float32; BadInput for any other dtype.
    as_bool -- a boolean array; BadInput for any other dtype.
    as_int64 -- an integer array as int64; BadInput for any other dtype.
    first_non_finite -- where the first NaN or infinity of an array is, if any.
    non_finite_problem -- the first NaN or infinity of an array, described (or None).
    check_finite -- BadInput naming the field, row and column of the first NaN or infinity.
    action_bound_problem -- the first action outside its declared space, described.
    check_actions -- BadInput unless every action lies in the declared action space.
    check_row_counts -- BadInput unless all per-step arrays have the same number of rows.
"""

from __future__ import annotations

import numpy as np

from qadapt.errors import BadInput
from qadapt.spaces import BoxDescription, DiscreteDescription, SpaceDescription


def as_float32(array: np.ndarray, *, field: str, where: str) -> np.ndarray:
    """``array`` cast to float32; only real floating dtypes are accepted.

    Example:
        >>> as_float32(np.zeros(2, np.float64), field="rewards", where="x").dtype
        dtype('float32')
    """
    array = np.asarray(array)
    if array.dtype.kind != "f":
        raise BadInput(
            f"{where}: field {field!r} has dtype {array.dtype}, expected a floating dtype "
            "(stored as float32)"
        )
    with np.errstate(over="ignore"):  # values beyond float32 become inf; check_finite says so
        return array.astype(np.float32, copy=False)


def as_bool(array: np.ndarray, *, field: str, where: str) -> np.ndarray:
    """``array`` if it is boolean; BadInput otherwise (0/1 integers are not guessed at)."""
    array = np.asarray(array)
    if array.dtype != np.bool_:
        raise BadInput(f"{where}: field {field!r} has dtype {array.dtype}, expected bool")
    return array


def as_int64(array: np.ndarray, *, field: str, where: str) -> np.ndarray:
    """``array`` as int64 if it has an integer dtype; BadInput otherwise."""
    array = np.asarray(array)
    if array.dtype.kind not in "iu":
        raise BadInput(f"{where}: field {field!r} has dtype {array.dtype}, expected integers")
    return array.astype(np.int64, copy=False)


def first_non_finite(array: np.ndarray) -> tuple[int, int | None] | None:
    """``(row, column)`` of the first NaN/infinity (column None for 1-D), or None if none."""
    bad = ~np.isfinite(array)
    if not bad.any():
        return None
    if array.ndim == 1:
        return int(np.argmax(bad)), None
    row = int(np.argmax(bad.any(axis=1)))
    return row, int(np.argmax(bad[row]))


def non_finite_problem(array: np.ndarray, *, first_row: int = 0) -> str | None:
    """``"has NaN at row r[, column c]"`` for the first NaN/infinity of ``array``, or None."""
    found = first_non_finite(array)
    if found is None:
        return None
    row, column = found
    value = array[row] if column is None else array[row, column]
    kind = "NaN" if np.isnan(value) else "infinity"
    at = f"row {row + first_row}" + ("" if column is None else f", column {column}")
    return f"has {kind} at {at}"


def check_finite(array: np.ndarray, *, field: str, where: str, first_row: int = 0) -> None:
    """BadInput naming ``field`` and the row of the first NaN or infinity in ``array``.

    Example:
        >>> check_finite(np.array([1.0, np.nan]), field="rewards", where="data.npz")
        Traceback (most recent call last):
        ...
        qadapt.errors.BadInput: data.npz: field 'rewards' has NaN at row 1
    """
    problem = non_finite_problem(array, first_row=first_row)
    if problem:
        raise BadInput(f"{where}: field {field!r} {problem}")


def action_bound_problem(
    actions: np.ndarray, space: SpaceDescription, *, first_row: int = 0
) -> str | None:
    """Describe the first action ``[n, act_dim]`` outside ``space``, or return None."""
    if isinstance(space, DiscreteDescription):
        column = actions[:, 0]
        bad = (
            (column != np.round(column))
            | (column < space.start)
            | (column >= space.start + space.n)
        )
        if bad.any():
            row = int(np.argmax(bad))
            return (
                f"action {float(column[row])!r} at row {row + first_row} is not an integer in "
                f"[{space.start}, {space.start + space.n - 1}] (the declared Discrete space)"
            )
        return None
    assert isinstance(space, BoxDescription)
    low = np.asarray(space.low, dtype=np.float32)
    high = np.asarray(space.high, dtype=np.float32)
    bad = (actions < low) | (actions > high)
    if not bad.any():
        return None
    row = int(np.argmax(bad.any(axis=1)))
    column = int(np.argmax(bad[row]))
    return (
        f"action {float(actions[row, column])!r} at row {row + first_row}, column {column} is "
        f"outside the declared bounds [{float(low[column])}, {float(high[column])}]"
    )


def check_actions(
    actions: np.ndarray, space: SpaceDescription, *, where: str, first_row: int = 0
) -> None:
    """BadInput unless every row of ``actions`` ``[n, act_dim]`` lies in ``space``."""
    problem = action_bound_problem(actions, space, first_row=first_row)
    if problem:
        raise BadInput(f"{where}: field 'actions': {problem}")


def check_row_counts(arrays: dict[str, np.ndarray], *, where: str) -> int:
    """The common number of rows of ``arrays``; BadInput naming both fields if they differ."""
    rows = None
    first = None
    for name, array in arrays.items():
        count = int(np.shape(array)[0]) if np.ndim(array) else -1
        if rows is None:
            rows, first = count, name
        elif count != rows:
            raise BadInput(
                f"{where}: shape mismatch: field {name!r} has {count} rows but {first!r} has "
                f"{rows} (shapes {np.shape(array)} and {np.shape(arrays[first])})"
            )
    return 0 if rows is None else rows
