"""The pick cell's batched dynamics: one numpy program steps N episodes at once.

Holds:
    CellState -- every episode's physical state, as arrays with a leading batch axis.
    advance -- apply actions [N, 4] to a CellState in place; return reward and flags.

The single env and the batched env both run this code (the single env with N = 1), so their
dynamics are the same by construction; tests compare them step by step all the same.

One step, in order: the motion command (scaled by the step sizes) passes through the drive
(a ``drive_lag`` share arrives one step late); the gripper moves and is clipped to the tote and
to the floor; then the grip command acts (closing tries a grasp, opening drops what is held);
a held parcel follows the fingers and slips if lifted too far from its mass centre; a parcel
whose base reaches the lift height ends the episode with reward 1.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from demo_envs.pick_cell import settings as geo
from demo_envs.pick_cell.layout import EpisodeLayout
from demo_envs.pick_cell.settings import CellSettings


@dataclass
class CellState:
    """N episodes' state. ``gripper`` [N, 3] is the *reported* position (x, y, tip height);
    the real fingers sit at ``gripper + (finger offset, -finger length)``. Item arrays have
    ``slots`` columns; ``held`` is the held slot or -1; ``grasp_offset`` [N, 2] is the held
    parcel's centre minus the finger centre; ``grasp_tip`` the real tip height at the grasp."""

    gripper: np.ndarray
    closed: np.ndarray
    held: np.ndarray
    pending_move: np.ndarray
    steps: np.ndarray
    item_xy: np.ndarray
    item_base: np.ndarray
    item_width: np.ndarray
    item_height: np.ndarray
    item_cue: np.ndarray
    item_present: np.ndarray
    item_real: np.ndarray
    mass_offset: np.ndarray
    grasp_offset: np.ndarray
    grasp_tip: np.ndarray

    @classmethod
    def empty(cls, n: int, slots: int) -> CellState:
        """Zeroed state for ``n`` episodes; fill rows with ``place`` before stepping."""
        return cls(
            gripper=np.zeros((n, 3)),
            closed=np.zeros(n, dtype=bool),
            held=np.full(n, -1, dtype=np.int64),
            pending_move=np.zeros((n, 3)),
            steps=np.zeros(n, dtype=np.int64),
            item_xy=np.zeros((n, slots, 2)),
            item_base=np.zeros((n, slots)),
            item_width=np.zeros((n, slots)),
            item_height=np.zeros((n, slots)),
            item_cue=np.zeros((n, slots)),
            item_present=np.zeros((n, slots), dtype=bool),
            item_real=np.zeros((n, slots), dtype=bool),
            mass_offset=np.zeros((n, slots, 2)),
            grasp_offset=np.zeros((n, 2)),
            grasp_tip=np.zeros(n),
        )

    def place(self, rows: np.ndarray | slice, layout: EpisodeLayout) -> None:
        """Start new episodes in ``rows`` from ``layout`` (one layout row per state row)."""
        self.gripper[rows] = layout.start
        self.closed[rows] = False
        self.held[rows] = -1
        self.pending_move[rows] = 0.0
        self.steps[rows] = 0
        self.item_xy[rows] = layout.item_xy
        self.item_base[rows] = 0.0
        self.item_width[rows] = layout.item_width
        self.item_height[rows] = layout.item_height
        self.item_cue[rows] = layout.item_cue
        self.item_present[rows] = layout.item_present
        self.item_real[rows] = layout.item_real
        self.mass_offset[rows] = layout.mass_offset
        self.grasp_offset[rows] = 0.0
        self.grasp_tip[rows] = 0.0

    def select(self, rows: np.ndarray | slice) -> CellState:
        """A copy of the state of ``rows`` only (used for rendering one episode)."""
        return CellState(**{f.name: getattr(self, f.name)[rows].copy() for f in fields(self)})


def advance(
    state: CellState, actions: np.ndarray, cell: CellSettings
) -> tuple[np.ndarray, np.ndarray]:
    """Step every episode in ``state`` by ``actions`` [N, 4] in [-1, 1] (modified in place).

    Returns:
        reward [N] float64 (1.0 on success, else 0.0) and success [N] bool; an episode
        terminates exactly when it succeeds.
    """
    p = cell.resolved
    n = actions.shape[0]
    rows = np.arange(n)
    act = np.clip(actions.astype(np.float64, copy=False), -1.0, 1.0)

    command = act[:, :3] * np.array([geo.PLANAR_STEP, geo.PLANAR_STEP, geo.VERTICAL_STEP])
    if p.drive_lag > 0.0:
        move = (1.0 - p.drive_lag) * command + p.drive_lag * state.pending_move
        state.pending_move[:] = command
    else:
        move = command
    state.gripper += move
    np.clip(state.gripper[:, :2], -geo.TOTE_HALF_WIDTH, geo.TOTE_HALF_WIDTH,
            out=state.gripper[:, :2])
    # The real fingertips may not go below the floor.
    np.clip(state.gripper[:, 2], max(0.0, p.finger_length), geo.GRIPPER_TOP,
            out=state.gripper[:, 2])

    finger_xy = state.gripper[:, :2] + np.asarray(p.finger_offset_xy)
    tip = state.gripper[:, 2] - p.finger_length

    want_closed = act[:, 3] > 0.0
    opening = state.closed & ~want_closed
    closing = ~state.closed & want_closed
    holding = state.held >= 0

    # Opening drops whatever is held back onto the floor.
    drop = opening & holding
    if drop.any():
        state.item_base[rows[drop], state.held[drop]] = 0.0
        state.held[drop] = -1

    if closing.any():
        dist = np.linalg.norm(state.item_xy - finger_xy[:, None, :], axis=2)
        tip_fraction = tip[:, None] / np.maximum(state.item_height, 1e-9)
        graspable = (
            state.item_real
            & (dist <= geo.GRASP_SPAN * state.item_width)
            & (tip_fraction >= geo.GRASP_WINDOW[0])
            & (tip_fraction <= geo.GRASP_WINDOW[1])
            & closing[:, None]
        )
        got = graspable.any(axis=1)
        if got.any():
            choice = np.argmin(np.where(graspable, dist, np.inf), axis=1)
            r, c = rows[got], choice[got]
            state.held[r] = c
            state.grasp_offset[r] = state.item_xy[r, c] - finger_xy[r]
            state.grasp_tip[r] = tip[r]
    state.closed[:] = want_closed

    holding = state.held >= 0
    success = np.zeros(n, dtype=bool)
    if holding.any():
        r = rows[holding]
        c = state.held[holding]
        state.item_xy[r, c] = finger_xy[r] + state.grasp_offset[r]
        base = np.maximum(tip[r] - state.grasp_tip[r], 0.0)
        state.item_base[r, c] = base
        # Held far from its mass centre, a parcel slips as soon as it leaves the floor.
        lever = np.linalg.norm(state.grasp_offset[r] + state.mass_offset[r, c], axis=1)
        slips = (base > geo.SLIP_CHECK_HEIGHT) & (
            lever > geo.HOLD_TOLERANCE * state.item_width[r, c]
        )
        if slips.any():
            state.item_base[r[slips], c[slips]] = 0.0
            state.held[r[slips]] = -1
        lifted = ~slips & (base >= geo.LIFT_HEIGHT)
        success[r[lifted]] = True

    state.steps += 1
    return success.astype(np.float64), success
