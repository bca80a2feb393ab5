"""Argument checks shared by every layer: one definition of "a positive integer" and friends.

Holds:
    positive_int -- an integer >= 1 (``bool`` refused), returned as ``int``.
    non_negative_int -- an integer >= 0.
    positive_float -- a finite real number > 0, returned as ``float``.

Each raises ``error`` (``ValueError`` by default; ``qadapt.errors.BadInput`` for user input)
with the parameter's name, the value given and what is accepted, as torch's optimisers do.
"""

from __future__ import annotations

import math
import numbers


def positive_int(name: str, value: object, error: type[Exception] = ValueError) -> int:
    """``value`` as an int if it is an integer >= 1, else ``error``.

    Example:
        >>> positive_int("steps", 5)
        5
        >>> positive_int("steps", True)
        Traceback (most recent call last):
        ...
        ValueError: steps: got True, expected a positive integer
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise error(f"{name}: got {value!r}, expected a positive integer")
    return int(value)


def non_negative_int(name: str, value: object, error: type[Exception] = ValueError) -> int:
    """``value`` as an int if it is an integer >= 0, else ``error``."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 0:
        raise error(f"{name}: got {value!r}, expected a non-negative integer")
    return int(value)


def positive_float(name: str, value: object, error: type[Exception] = ValueError) -> float:
    """``value`` as a float if it is a finite real number > 0, else ``error``."""
    if (isinstance(value, bool) or not isinstance(value, numbers.Real)
            or not math.isfinite(value) or value <= 0):
        raise error(f"{name}: got {value!r}, expected a finite number > 0")
    return float(value)
