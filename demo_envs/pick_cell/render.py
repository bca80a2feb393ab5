"""A small top-down picture of one pick-cell episode, drawn with numpy alone.

Holds:
    FRAME_SIZE -- frames are FRAME_SIZE x FRAME_SIZE RGB.
    draw_frame -- an RGB uint8 picture [H, W, 3] of row 0 of a CellState.

Parcels are brown squares (darker when taller), ghosts pale blue, a held parcel is outlined
green; the white cross is where the gripper is reported to be, the red dot where the real
fingers are; the bar on the right shows the reported fingertip height.
"""

from __future__ import annotations

import numpy as np

from demo_envs.pick_cell import settings as geo
from demo_envs.pick_cell.dynamics import CellState
from demo_envs.pick_cell.settings import CellSettings

FRAME_SIZE = 128
_FLOOR = np.array([70, 74, 80], dtype=np.uint8)
_WALL = np.array([30, 32, 36], dtype=np.uint8)


def _to_pixel(xy: np.ndarray, side: int) -> np.ndarray:
    scale = (side - 1) / (2.0 * geo.TOTE_HALF_WIDTH)
    col = (xy[..., 0] + geo.TOTE_HALF_WIDTH) * scale
    row = (geo.TOTE_HALF_WIDTH - xy[..., 1]) * scale
    return np.stack([row, col], axis=-1)


def _fill_square(img: np.ndarray, centre: np.ndarray, half: float, colour: np.ndarray) -> None:
    r0, c0 = np.floor(centre - half).astype(int)
    r1, c1 = np.ceil(centre + half).astype(int)
    side = img.shape[0]
    img[max(r0, 0) : min(r1, side), max(c0, 0) : min(c1, side - 1)] = colour


def draw_frame(state: CellState, cell: CellSettings) -> np.ndarray:
    """RGB uint8 [FRAME_SIZE, FRAME_SIZE, 3] top-down view of episode 0 of ``state``."""
    side = FRAME_SIZE
    img = np.empty((side, side, 3), dtype=np.uint8)
    img[:] = _FLOOR
    img[:, -6:] = _WALL
    px_per_unit = (side - 1) / (2.0 * geo.TOTE_HALF_WIDTH)

    for s in np.flatnonzero(state.item_present[0]):
        centre = _to_pixel(state.item_xy[0, s], side)
        half = 0.5 * state.item_width[0, s] * px_per_unit
        if state.item_real[0, s]:
            shade = 1.0 - 1.5 * state.item_height[0, s]
            colour = (np.array([200, 140, 80]) * shade).astype(np.uint8)
        else:
            colour = np.array([150, 190, 230], dtype=np.uint8)
        if state.held[0] == s:
            _fill_square(img, centre, half + 1.5, np.array([60, 220, 90], dtype=np.uint8))
        _fill_square(img, centre, half, colour)

    reported = _to_pixel(state.gripper[0, :2], side).round().astype(int)
    r, c = np.clip(reported, 2, side - 9)
    img[r, c - 2 : c + 3] = 255
    img[r - 2 : r + 3, c] = 255
    real = state.gripper[0, :2] + np.asarray(cell.resolved.finger_offset_xy)
    rr, cc = np.clip(_to_pixel(real, side).round().astype(int), 1, side - 8)
    img[rr - 1 : rr + 2, cc - 1 : cc + 2] = np.array([230, 50, 50], dtype=np.uint8)

    level = int(round((1.0 - state.gripper[0, 2] / geo.GRIPPER_TOP) * (side - 1)))
    img[level:, -4:-2] = np.array([240, 200, 60], dtype=np.uint8)
    return img
