"""Demo environments for qadapt; importing this package registers them with gymnasium.

Holds:
    PICK_CELL_ID -- "demo_envs/PickCell-v0", built by ``gymnasium.make`` and ``gymnasium.make_vec``.
"""

import gymnasium

PICK_CELL_ID = "demo_envs/PickCell-v0"

if PICK_CELL_ID not in gymnasium.registry:
    gymnasium.register(
        id=PICK_CELL_ID,
        entry_point="demo_envs.pick_cell.env:PickCellEnv",
        vector_entry_point="demo_envs.pick_cell.vector_env:PickCellVectorEnv",
    )

__all__ = ["PICK_CELL_ID"]
