"""The pick cell's perturbation families: what changed about the robot, its sensors or its task.

Holds:
    Family -- one perturbation family: its name, what it changes, its magnitude range and default.
    FAMILIES -- every family by name.
    CellPerturbation -- the validated, resolved numbers the dynamics read (all families at once).
    resolve_perturbations -- turn a ``{family: magnitude}`` mapping into a ``CellPerturbation``.

Families compose: ``{"finger_offset": 0.06, "drive_lag": 1.0}`` applies both. Each family's
default magnitude is set so that the near-noiseless scripted picker, tuned for the base cell,
loses at least 30 points of success but still succeeds in roughly 10-60% of episodes
(measured by ``scripts/calibrate_variations``; figures in docs/pick_cell.md).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass


@dataclass(frozen=True)
class Family:
    """One perturbation family.

    Example:
        >>> FAMILIES["drive_lag"].check(0.5)
        0.5
    """

    name: str
    summary: str
    low: float
    high: float
    default: float

    def check(self, magnitude: object) -> float:
        """Return ``magnitude`` as a float, or raise ValueError naming the family and range."""
        if isinstance(magnitude, bool) or not isinstance(magnitude, int | float):
            raise ValueError(
                f"perturbations[{self.name!r}]: got {magnitude!r}, expected a number in "
                f"[{self.low}, {self.high}]"
            )
        value = float(magnitude)
        if not (math.isfinite(value) and self.low <= value <= self.high):
            raise ValueError(
                f"perturbations[{self.name!r}]: got {magnitude!r}, expected a number in "
                f"[{self.low}, {self.high}]"
            )
        return value


# Fixed directions keep a family a single number; they differ so that composing the two
# planar shifts does not cancel them.
FINGER_OFFSET_ANGLE_DEG = 30.0
CAMERA_SHIFT_ANGLE_DEG = 120.0

FAMILIES: dict[str, Family] = {
    family.name: family
    for family in (
        Family(
            "finger_offset",
            "the tool is mounted off-centre: the real finger centre sits this far (cell units) "
            f"from the reported gripper position, at {FINGER_OFFSET_ANGLE_DEG:g} degrees",
            0.0, 0.3, 0.07,
        ),
        Family(
            "finger_length",
            "longer (+) or shorter (-) fingers: the real fingertips sit this far below the "
            "reported tip height, so the grasp height window moves",
            -0.1, 0.1, 0.055,
        ),
        Family(
            "camera_shift",
            "the overhead camera's calibration drifted: reported item positions are shifted by "
            f"this distance at {CAMERA_SHIFT_ANGLE_DEG:g} degrees",
            0.0, 0.3, 0.07,
        ),
        Family(
            "camera_scale",
            "the camera's scale is off: reported item positions are the true ones times (1 + m), "
            "so the error grows away from the tote's centre",
            -0.5, 0.5, 0.12,
        ),
        Family(
            "drive_lag",
            "a sluggish drive: this fraction of each motion command is carried out one step late",
            0.0, 1.0, 0.7,
        ),
        Family(
            "ghost_items",
            "reflections the camera reports as parcels but that cannot be grasped; they differ "
            "only by a slightly brighter return; with this probability one sits nearer the "
            "gripper's start than any real parcel, otherwise it lies anywhere in the tote",
            0.0, 1.0, 0.4,
        ),
        Family(
            "offcentre_load",
            "parcels with off-centre contents: the mass centre sits up to m times the parcel's "
            "width from its middle, and a parcel slips when lifted far from its mass centre",
            0.0, 1.0, 0.7,
        ),
    )
}


@dataclass(frozen=True)
class CellPerturbation:
    """Resolved perturbation numbers, read by the layout sampler and the dynamics.

    Example:
        >>> resolve_perturbations({"drive_lag": 0.5}).drive_lag
        0.5
    """

    finger_offset_xy: tuple[float, float] = (0.0, 0.0)
    finger_length: float = 0.0
    camera_shift_xy: tuple[float, float] = (0.0, 0.0)
    camera_scale: float = 0.0
    drive_lag: float = 0.0
    ghost_rate: float = 0.0
    ghosts_present: bool = False
    offcentre_load: float = 0.0


def _polar(magnitude: float, angle_deg: float) -> tuple[float, float]:
    angle = math.radians(angle_deg)
    return (magnitude * math.cos(angle), magnitude * math.sin(angle))


def resolve_perturbations(perturbations: Mapping[str, object] | None) -> CellPerturbation:
    """Validate ``{family name: magnitude}`` and return the numbers the dynamics use.

    Raises:
        ValueError: an unknown family name, or a magnitude outside the family's range.
    """
    if perturbations is None:
        return CellPerturbation()
    if not isinstance(perturbations, Mapping):
        raise ValueError(
            f"perturbations: got {perturbations!r}, expected a mapping of family name to "
            f"magnitude, families: {', '.join(FAMILIES)}"
        )
    values: dict[str, float] = {}
    for name, magnitude in perturbations.items():
        if name not in FAMILIES:
            raise ValueError(
                f"perturbations: unknown family {name!r}; accepted: {', '.join(FAMILIES)}"
            )
        values[name] = FAMILIES[name].check(magnitude)
    return CellPerturbation(
        finger_offset_xy=_polar(values.get("finger_offset", 0.0), FINGER_OFFSET_ANGLE_DEG),
        finger_length=values.get("finger_length", 0.0),
        camera_shift_xy=_polar(values.get("camera_shift", 0.0), CAMERA_SHIFT_ANGLE_DEG),
        camera_scale=values.get("camera_scale", 0.0),
        drive_lag=values.get("drive_lag", 0.0),
        ghost_rate=values.get("ghost_items", 0.0),
        ghosts_present="ghost_items" in values and values["ghost_items"] > 0.0,
        offcentre_load=values.get("offcentre_load", 0.0),
    )
