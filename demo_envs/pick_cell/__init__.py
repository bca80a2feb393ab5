"""The pick cell: a top-down gantry with a two-finger gripper picks parcels out of a tote.

Holds:
    PickCellEnv -- the single gymnasium environment.
    PickCellVectorEnv -- the batched environment (``gymnasium.make_vec``'s vector entry point).
    ScriptedPicker -- a hand-written controller with tunable exploration noise.
    FAMILIES -- the perturbation families, by name.
"""

from demo_envs.pick_cell.controller import ScriptedPicker
from demo_envs.pick_cell.env import PickCellEnv
from demo_envs.pick_cell.perturbations import FAMILIES
from demo_envs.pick_cell.vector_env import PickCellVectorEnv

__all__ = ["FAMILIES", "PickCellEnv", "PickCellVectorEnv", "ScriptedPicker"]
