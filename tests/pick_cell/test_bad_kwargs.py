"""Invalid pick-cell arguments raise a ValueError naming the parameter, value and accepted range."""

from __future__ import annotations

import gymnasium as gym
import pytest

import demo_envs
from demo_envs.pick_cell import PickCellEnv


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"max_items": 0}, ["max_items", "0", "[1, 8]"]),
        ({"max_items": -3}, ["max_items", "-3"]),
        ({"horizon": 2}, ["horizon", "2", "[5, 200]"]),
        ({"horizon": 20.5}, ["horizon", "20.5"]),
        ({"sensor_noise": -0.1}, ["sensor_noise", "-0.1"]),
        ({"sensor_noise": float("nan")}, ["sensor_noise", "nan"]),
        ({"reveal": "yes"}, ["reveal", "'yes'"]),
        ({"perturbations": {"wobble": 0.1}}, ["wobble", "finger_offset", "drive_lag"]),
        ({"perturbations": {"drive_lag": 1.5}}, ["drive_lag", "1.5", "[0.0, 1.0]"]),
        ({"perturbations": {"finger_offset": -0.1}}, ["finger_offset", "-0.1"]),
        ({"perturbations": {"ghost_items": "many"}}, ["ghost_items", "'many'"]),
        ({"perturbations": [("drive_lag", 0.5)]}, ["perturbations", "mapping"]),
        ({"render_mode": "text"}, ["render_mode", "'text'"]),
    ],
)
@pytest.mark.parametrize("batched", [False, True], ids=["single", "batched"])
def test_bad_kwargs_raise_value_error_naming_the_parameter(kwargs, words, batched):
    with pytest.raises(ValueError) as err:
        if batched:
            gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=2, **kwargs)
        else:
            PickCellEnv(**kwargs)
    for word in words:
        assert word in str(err.value)


def test_bad_num_envs():
    with pytest.raises(ValueError, match="num_envs: got 0"):
        gym.make_vec(demo_envs.PICK_CELL_ID, num_envs=0)
