"""Drawing a pick-cell episode (parcels, ghost, start pose) from uniform random numbers.

Holds:
    uniforms_per_episode -- how many uniforms one episode's layout consumes.
    EpisodeLayout -- the arrays that describe N episodes' starting scenes.
    draw_layout -- map uniforms [N, U] in [0, 1) to an EpisodeLayout.

Every episode consumes exactly ``uniforms_per_episode(max_items)`` numbers from its generator in
one ``Generator.random`` call, whatever the perturbations. So one seed gives the same parcels in
the base cell and under every variation, and the single env (one generator) and the batched env
(one generator per sub-env, seeded as ``SyncVectorEnv`` seeds them) draw identical scenes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from demo_envs.pick_cell import settings as geo
from demo_envs.pick_cell.perturbations import CellPerturbation

_PER_ITEM = 7   # x, y, width, height, cue, mass-offset radius, mass-offset angle
_GHOST = 7      # planted-near-start draw, x, y, width, height, cue, near-start angle/radius
_START = 3      # gripper x, y, z


def uniforms_per_episode(max_items: int) -> int:
    """Number of uniforms one episode consumes: 1 for the parcel count, then per part."""
    return 1 + _PER_ITEM * max_items + _GHOST + _START


@dataclass
class EpisodeLayout:
    """Starting scenes of N episodes; item arrays have ``slots = max_items + 1`` columns.

    Shapes: ``start`` [N, 3] (x, y, reported tip height); ``item_xy`` [N, S, 2] true centres;
    ``item_width``, ``item_height``, ``item_cue`` [N, S]; ``item_present``, ``item_real``
    [N, S] bool; ``mass_offset`` [N, S, 2] mass centre minus geometric centre.
    """

    start: np.ndarray
    item_xy: np.ndarray
    item_width: np.ndarray
    item_height: np.ndarray
    item_cue: np.ndarray
    item_present: np.ndarray
    item_real: np.ndarray
    mass_offset: np.ndarray


def _lerp(u: np.ndarray, bounds: tuple[float, float]) -> np.ndarray:
    return bounds[0] + u * (bounds[1] - bounds[0])


def draw_layout(uniforms: np.ndarray, max_items: int, perturb: CellPerturbation) -> EpisodeLayout:
    """Map ``uniforms`` [N, uniforms_per_episode(max_items)] to N episode layouts."""
    n = uniforms.shape[0]
    m = max_items
    count = 1 + np.minimum((uniforms[:, 0] * m).astype(np.int64), m - 1)
    items = uniforms[:, 1 : 1 + _PER_ITEM * m].reshape(n, m, _PER_ITEM)
    ghost = uniforms[:, 1 + _PER_ITEM * m : 1 + _PER_ITEM * m + _GHOST]
    start_u = uniforms[:, -_START:]

    start = np.empty((n, 3))
    start[:, 0:2] = _lerp(start_u[:, 0:2], (-geo.ITEM_HALF_SPREAD, geo.ITEM_HALF_SPREAD))
    start[:, 2] = _lerp(start_u[:, 2], geo.START_HEIGHT_RANGE)

    slots = m + 1
    item_xy = np.zeros((n, slots, 2))
    item_width = np.zeros((n, slots))
    item_height = np.zeros((n, slots))
    item_cue = np.zeros((n, slots))
    mass_offset = np.zeros((n, slots, 2))
    item_present = np.zeros((n, slots), dtype=bool)
    item_real = np.zeros((n, slots), dtype=bool)

    item_xy[:, :m] = _lerp(items[..., 0:2], (-geo.ITEM_HALF_SPREAD, geo.ITEM_HALF_SPREAD))
    item_width[:, :m] = _lerp(items[..., 2], geo.ITEM_WIDTH_RANGE)
    item_height[:, :m] = _lerp(items[..., 3], geo.ITEM_HEIGHT_RANGE)
    item_cue[:, :m] = _lerp(items[..., 4], geo.REAL_CUE_RANGE)
    radius = perturb.offcentre_load * items[..., 5] * item_width[:, :m]
    angle = 2.0 * np.pi * items[..., 6]
    mass_offset[:, :m, 0] = radius * np.cos(angle)
    mass_offset[:, :m, 1] = radius * np.sin(angle)
    item_present[:, :m] = np.arange(m)[None, :] < count[:, None]
    item_real[:, :m] = item_present[:, :m]

    if perturb.ghosts_present:
        near = ghost[:, 0] < perturb.ghost_rate
        # A planted ghost sits just beside the start position; the rest lie anywhere.
        near_angle = 2.0 * np.pi * ghost[:, 6]
        near_radius = _lerp(ghost[:, 1], geo.GHOST_NEAR_START)
        near_xy = start[:, 0:2] + near_radius[:, None] * np.stack(
            [np.cos(near_angle), np.sin(near_angle)], axis=1
        )
        far_xy = _lerp(ghost[:, 1:3], (-geo.ITEM_HALF_SPREAD, geo.ITEM_HALF_SPREAD))
        item_xy[:, m] = np.clip(
            np.where(near[:, None], near_xy, far_xy), -geo.ITEM_HALF_SPREAD, geo.ITEM_HALF_SPREAD
        )
        item_width[:, m] = _lerp(ghost[:, 3], geo.ITEM_WIDTH_RANGE)
        item_height[:, m] = _lerp(ghost[:, 4], geo.ITEM_HEIGHT_RANGE)
        item_cue[:, m] = _lerp(ghost[:, 5], geo.GHOST_CUE_RANGE)
        item_present[:, m] = True

    return EpisodeLayout(
        start=start,
        item_xy=item_xy,
        item_width=item_width,
        item_height=item_height,
        item_cue=item_cue,
        item_present=item_present,
        item_real=item_real,
        mass_offset=mass_offset,
    )
