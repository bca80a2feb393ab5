"""What the pick cell's controller sees: the observation vector, column by column.

Holds:
    GRIPPER_COLUMNS, SLOT_COLUMNS -- column names, in order, of the gripper block and of one slot.
    observation_size -- length of the observation for a number of slots.
    observation_bounds -- per-column (low, high) arrays of the observation Box.
    observe -- build observations [N, D] float32 from a CellState.

Layout: the gripper block, then ``slots`` item blocks sorted by the reported horizontal distance
from the gripper, nearest first; empty slots are all zeros and come last. Columns marked
"reveal" are zero unless the cell was built with ``reveal=True``: they show what a real sensor
could see of a perturbation (a camera sees where the fingers really are; a ghost's return differs).
"""

from __future__ import annotations

import numpy as np

from demo_envs.pick_cell import settings as geo
from demo_envs.pick_cell.dynamics import CellState
from demo_envs.pick_cell.settings import CellSettings

# (name, low, high, description)
GRIPPER_COLUMNS: tuple[tuple[str, float, float, str], ...] = (
    ("gripper_x", -1.0, 1.0, "reported gripper x"),
    ("gripper_y", -1.0, 1.0, "reported gripper y"),
    ("gripper_z", 0.0, geo.GRIPPER_TOP, "reported fingertip height above the floor"),
    ("opening", 0.0, 1.0, "1 when the fingers are open, 0 when closed"),
    ("holding", 0.0, 1.0, "1 when the fingers hold a parcel"),
    ("finger_offset_x", -0.5, 0.5, "reveal: real finger centre minus reported, x"),
    ("finger_offset_y", -0.5, 0.5, "reveal: real finger centre minus reported, y"),
    ("finger_length", -0.2, 0.2, "reveal: how far the real tips sit below the reported height"),
    ("pending_x", -1.0, 1.0, "reveal: planar x motion still to arrive, in steps"),
    ("pending_y", -1.0, 1.0, "reveal: planar y motion still to arrive, in steps"),
    ("pending_z", -1.0, 1.0, "reveal: vertical motion still to arrive, in steps"),
)
SLOT_COLUMNS: tuple[tuple[str, float, float, str], ...] = (
    ("rel_x", -3.0, 3.0, "reported parcel centre minus reported gripper, x"),
    ("rel_y", -3.0, 3.0, "reported parcel centre minus reported gripper, y"),
    ("width", 0.0, 0.5, "parcel width"),
    ("height", 0.0, 0.5, "parcel height"),
    ("above_top", -1.5, 1.0, "reported fingertip height minus the parcel's top"),
    ("present", 0.0, 1.0, "1 when the slot holds a detected parcel"),
    ("return", 0.0, 1.0, "camera return intensity (ghosts are slightly brighter)"),
    ("mass_dx", -0.5, 0.5, "reveal: mass centre minus middle, x"),
    ("mass_dy", -0.5, 0.5, "reveal: mass centre minus middle, y"),
    ("ghost", 0.0, 1.0, "reveal: 1 when the detection is a reflection"),
)
_G = len(GRIPPER_COLUMNS)
_S = len(SLOT_COLUMNS)


def observation_size(slots: int) -> int:
    """Observation length: the gripper block plus ``slots`` item blocks."""
    return _G + _S * slots


def observation_bounds(slots: int) -> tuple[np.ndarray, np.ndarray]:
    """(low, high) float32 arrays of length ``observation_size(slots)``."""
    columns = GRIPPER_COLUMNS + SLOT_COLUMNS * slots
    low = np.array([c[1] for c in columns], dtype=np.float32)
    high = np.array([c[2] for c in columns], dtype=np.float32)
    return low, high


def observe(
    state: CellState, cell: CellSettings, noise: np.ndarray | None = None
) -> np.ndarray:
    """Observations [N, observation_size(slots)] float32 of every episode in ``state``.

    ``noise`` [N, slots, 2], if given, is added to the reported parcel positions.
    """
    p = cell.resolved
    n, slots = state.item_present.shape
    out = np.zeros((n, _G + _S * slots), dtype=np.float32)
    out[:, 0:3] = state.gripper
    out[:, 3] = ~state.closed
    out[:, 4] = state.held >= 0
    if cell.reveal:
        out[:, 5:7] = p.finger_offset_xy
        out[:, 7] = p.finger_length
        out[:, 8:10] = state.pending_move[:, :2] / geo.PLANAR_STEP
        out[:, 10] = state.pending_move[:, 2] / geo.VERTICAL_STEP

    seen_xy = state.item_xy * (1.0 + p.camera_scale) + np.asarray(p.camera_shift_xy)
    if noise is not None:
        seen_xy = seen_xy + noise
    rel = seen_xy - state.gripper[:, None, :2]
    dist = np.where(state.item_present, np.hypot(rel[..., 0], rel[..., 1]), np.inf)
    order = np.argsort(dist, axis=1, kind="stable")

    slot = np.zeros((n, slots, _S))
    slot[..., 0:2] = rel
    slot[..., 2] = state.item_width
    slot[..., 3] = state.item_height
    slot[..., 4] = state.gripper[:, 2:3] - (state.item_base + state.item_height)
    slot[..., 5] = 1.0
    slot[..., 6] = state.item_cue
    if cell.reveal:
        slot[..., 7:9] = state.mass_offset
        slot[..., 9] = ~state.item_real
    slot *= state.item_present[..., None]
    slot = np.take_along_axis(slot, order[..., None], axis=1)
    out[:, _G:] = slot.reshape(n, slots * _S)
    low, high = _bounds_cache(slots)
    np.clip(out, low, high, out=out)
    return out


_BOUNDS: dict[int, tuple[np.ndarray, np.ndarray]] = {}


def _bounds_cache(slots: int) -> tuple[np.ndarray, np.ndarray]:
    if slots not in _BOUNDS:
        _BOUNDS[slots] = observation_bounds(slots)
    return _BOUNDS[slots]
