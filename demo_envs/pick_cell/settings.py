"""The pick cell's geometry constants and its validated constructor settings.

Holds:
    Geometry constants -- tote size, step sizes, grasp window, lift height (cell units).
    CellSettings -- validated keyword arguments shared by the single and the batched env.

Units: the tote floor is the square [-1, 1] x [-1, 1]; heights are measured up from the floor.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

from demo_envs.pick_cell.perturbations import CellPerturbation, resolve_perturbations

TOTE_HALF_WIDTH = 1.0          # gripper x, y stay inside [-1, 1]
ITEM_HALF_SPREAD = 0.85        # parcel centres lie inside [-0.85, 0.85]
GRIPPER_TOP = 0.8              # highest reported tip height
PLANAR_STEP = 0.3              # largest planar move per step (action +-1)
VERTICAL_STEP = 0.15           # largest vertical move per step
ITEM_WIDTH_RANGE = (0.1, 0.3)
ITEM_HEIGHT_RANGE = (0.1, 0.3)
START_HEIGHT_RANGE = (0.45, 0.6)
# Fingertips must close within this band of the parcel's height (fractions of the height,
# measured from the floor): too high misses the parcel, too low jams on the tote floor lip.
GRASP_WINDOW = (0.4, 0.9)
GRASP_SPAN = 0.5               # fingers close around a parcel whose middle is within 0.5 widths
HOLD_TOLERANCE = 0.3           # lifted more than 0.3 widths from its mass centre, a parcel slips
SLIP_CHECK_HEIGHT = 0.02       # slipping is decided once the parcel leaves the floor
LIFT_HEIGHT = 0.2              # success: a held parcel's base this high above the floor
GHOST_NEAR_START = (0.05, 0.15)  # distance band of a ghost planted near the start position
REAL_CUE_RANGE = (0.35, 0.55)  # camera return intensity of real parcels
GHOST_CUE_RANGE = (0.58, 0.72)  # ... and of ghosts: brighter, only slightly


def _int_in(name: str, value: object, low: int, high: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise ValueError(f"{name}: got {value!r}, expected an integer in [{low}, {high}]")
    return int(value)


def _float_in(name: str, value: object, low: float, high: float) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError(f"{name}: got {value!r}, expected a number in [{low}, {high}]")
    if not (math.isfinite(float(value)) and low <= float(value) <= high):
        raise ValueError(f"{name}: got {value!r}, expected a number in [{low}, {high}]")
    return float(value)


@dataclass(frozen=True)
class CellSettings:
    """Validated settings of one pick cell (single or batched).

    Args:
        max_items: most real parcels per episode (1..8); each episode draws 1..max_items.
            The observation always has max_items + 1 slots (one spare for a ghost).
        horizon: steps before the episode is truncated (5..200).
        perturbations: ``{family name: magnitude}``, see ``perturbations.FAMILIES``.
        reveal: if True, the observation's reveal columns show what a real sensor could
            see of the perturbations (real finger centre and length, pending motion, mass
            centres, ghost flags); otherwise those columns are zero.
        sensor_noise: standard deviation of per-step Gaussian noise on reported parcel
            positions (0..0.2 cell units).

    Example:
        >>> CellSettings(max_items=3).slots
        4
    """

    max_items: int = 4
    horizon: int = 20
    perturbations: Mapping[str, float] | None = None
    reveal: bool = False
    sensor_noise: float = 0.0
    resolved: CellPerturbation = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        _int_in("max_items", self.max_items, 1, 8)
        _int_in("horizon", self.horizon, 5, 200)
        if not isinstance(self.reveal, bool):
            raise ValueError(f"reveal: got {self.reveal!r}, expected True or False")
        _float_in("sensor_noise", self.sensor_noise, 0.0, 0.2)
        object.__setattr__(self, "resolved", resolve_perturbations(self.perturbations))

    @property
    def slots(self) -> int:
        """Item slots in the observation: every real parcel plus one for a ghost."""
        return self.max_items + 1
