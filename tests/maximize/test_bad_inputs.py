"""Bad arguments raise ValueError naming the parameter (and showing the value given)."""

from __future__ import annotations

import math

import gymnasium as gym
import numpy as np
import pytest
import torch

from qadapt.maximize import (
    MAXIMIZERS,
    CrossEntropyMaximizer,
    ExhaustiveMaximizer,
    build_maximizer,
)

BOX = {"low": [-1.0, 0.0], "high": [1.0, 2.0]}


@pytest.mark.parametrize(
    ("changes", "word"),
    [
        ({"low": [[-1.0, 0.0]]}, "low"),
        ({"low": []}, "low"),
        ({"low": ["a", "b"]}, "low"),
        ({"low": [-math.inf, 0.0]}, "low"),
        ({"high": [1.0, math.nan]}, "high"),
        ({"high": [1.0, 2.0, 3.0]}, "high"),
        ({"high": [1.0, 0.0]}, "high"),  # low == high in dimension 1
        ({"samples": 0}, "samples"),
        ({"samples": 8.0}, "samples"),
        ({"samples": True}, "samples"),
        ({"elites": 0}, "elites"),
        ({"samples": 4, "elites": 5}, "elites"),
        ({"iterations": 0}, "iterations"),
        ({"iterations": None}, "iterations"),
        ({"initial_std": 0.0}, "initial_std"),
        ({"initial_std": math.inf}, "initial_std"),
        ({"warm_std": -0.1}, "warm_std"),
        ({"min_std": 0.0}, "min_std"),
        ({"min_std": 0.3}, "min_std"),  # above warm_std 0.2
        ({"smoothing": 1.0}, "smoothing"),
        ({"smoothing": -0.5}, "smoothing"),
        ({"smoothing": "0.1"}, "smoothing"),
    ],
)
def test_cem_constructor_rejects(changes, word):
    with pytest.raises(ValueError, match=word) as caught:
        CrossEntropyMaximizer(**{**BOX, **changes})
    # The message shows what was given as well as what is accepted.
    assert "got" in str(caught.value) and "expected" in str(caught.value)


@pytest.mark.parametrize(
    ("initial", "word"),
    [
        (torch.zeros(3, 2), r"initial: got shape \[3, 2\], expected .*\[4, 2\]"),
        (torch.zeros(4, 3), r"initial: got shape \[4, 3\]"),
        (torch.zeros(4), r"initial: got shape \[4\]"),
        (torch.zeros(4, 2, dtype=torch.int64), "initial: got dtype"),
        (torch.full((4, 2), math.nan), "initial: got non-finite"),
        (np.zeros((4, 2)), "initial: got ndarray"),
    ],
)
@pytest.mark.parametrize("maximizer", ["cem", "exhaustive"])
def test_maximize_rejects_bad_initial(initial, word, maximizer):
    if maximizer == "cem":
        chosen = CrossEntropyMaximizer(**BOX)
    else:
        chosen = ExhaustiveMaximizer(torch.tensor([[0.0, 1.0], [0.5, 0.5]]))
    with pytest.raises(ValueError, match=word):
        chosen.maximize(lambda c: c.sum(-1), 4, initial=initial)


@pytest.mark.parametrize("batch_size", [0, -3, 2.0, True, None])
def test_maximize_rejects_bad_batch_size(batch_size):
    for chosen in (CrossEntropyMaximizer(**BOX), ExhaustiveMaximizer.for_discrete(3)):
        with pytest.raises(ValueError, match="batch_size"):
            chosen.maximize(lambda c: c.sum(-1), batch_size)


@pytest.mark.parametrize(
    ("score", "word"),
    [
        (lambda c: c.sum(-1)[:, :1], r"score: returned shape \[4, 1\], expected \[B, K\]"),
        (lambda c: c, r"score: returned shape \[4, \d+, 2\]"),
        (lambda c: c.sum(-1).long(), "score: returned dtype torch.int64"),
        (lambda c: c.sum(-1) * math.nan, "score: returned NaN"),
        (lambda c: c.sum(-1).numpy(), "score: returned ndarray"),
    ],
)
def test_maximize_rejects_bad_score_output(score, word):
    for chosen in (CrossEntropyMaximizer(**BOX), ExhaustiveMaximizer.for_discrete(2)):
        with pytest.raises(ValueError, match=word):
            chosen.maximize(score, 4)


@pytest.mark.parametrize(
    ("candidates", "word"),
    [
        (torch.zeros(0, 2), r"candidates: got shape \[0, 2\]"),
        (torch.zeros(3, 0), r"candidates: got shape \[3, 0\]"),
        (torch.zeros(3), r"candidates: got shape \[3\]"),
        (torch.tensor([[0.0, math.inf]]), "candidates: got non-finite"),
        ([["x", "y"]], "candidates: got list"),
    ],
)
def test_exhaustive_constructor_rejects(candidates, word):
    with pytest.raises(ValueError, match=word):
        ExhaustiveMaximizer(candidates)


@pytest.mark.parametrize("n", [0, -1, 2.5, True])
def test_for_discrete_rejects_bad_n(n):
    with pytest.raises(ValueError, match="n: got"):
        ExhaustiveMaximizer.for_discrete(n)


def test_exhaustive_rejects_bad_chunk_budget():
    with pytest.raises(ValueError, match="floats_per_chunk: got 0"):
        ExhaustiveMaximizer.for_discrete(3, floats_per_chunk=0)


def test_unknown_kind_lists_the_accepted_kinds():
    with pytest.raises(ValueError, match="kind: got 'random'") as caught:
        build_maximizer("random", gym.spaces.Box(-1.0, 1.0, (2,)))
    for kind in MAXIMIZERS:
        assert repr(kind) in str(caught.value)


@pytest.mark.parametrize(
    ("kind", "space", "settings", "word"),
    [
        ("cem", gym.spaces.Discrete(3), {}, "action_space: got Discrete"),
        ("cem", gym.spaces.Box(-1.0, 1.0, (2, 2)), {}, "action_space: got a Box of shape"),
        ("cem", gym.spaces.Box(-np.inf, np.inf, (2,)), {}, "action_space: .* unbounded"),
        ("cem", gym.spaces.Box(-1.0, 1.0, (2,)), {"low": [0, 0]}, "settings: got unknown"),
        ("cem", gym.spaces.Box(-1.0, 1.0, (2,)), {"sample": 8}, r"settings: .*'sample'"),
        ("cem", gym.spaces.Box(-1.0, 1.0, (2,)), {"elites": 100}, "elites: got 100"),
        ("cem", "Box(-1, 1, (2,))", {}, "action_space: got str"),
        ("exhaustive", gym.spaces.Box(-1.0, 1.0, (2,)), {}, "candidates: got None"),
        (
            "exhaustive",
            gym.spaces.Box(-1.0, 1.0, (2,)),
            {"candidates": [[0.0, 2.0]]},
            "candidates: got actions outside the Box",
        ),
        (
            "exhaustive",
            gym.spaces.Box(-1.0, 1.0, (2,)),
            {"candidates": [[0.0, 0.0, 0.0]]},
            "candidates: got dimension 3",
        ),
        ("exhaustive", gym.spaces.Discrete(3), {"candidates": [[1.0]]}, "candidates: got a"),
        ("exhaustive", gym.spaces.Discrete(3), {"samples": 4}, r"settings: .*'samples'"),
        ("exhaustive", gym.spaces.MultiBinary(3), {}, "action_space: got MultiBinary"),
    ],
)
def test_build_maximizer_rejects(kind, space, settings, word):
    with pytest.raises(ValueError, match=word):
        build_maximizer(kind, space, **settings)


@pytest.mark.parametrize(
    ("state", "word"),
    [
        ({"samples": 4}, "state: missing keys"),
        ("not a dict", "state: got str"),
    ],
)
def test_load_state_dict_rejects_incomplete_or_foreign_state(state, word):
    chosen = CrossEntropyMaximizer(**BOX)
    with pytest.raises(ValueError, match=word):
        chosen.load_state_dict(state)


def test_load_state_dict_validates_values_and_leaves_settings_unchanged_on_error():
    chosen = CrossEntropyMaximizer(**BOX)
    state = chosen.state_dict()
    with pytest.raises(ValueError, match="elites: got 99"):
        chosen.load_state_dict({**state, "elites": 99})
    assert chosen.elites == 6
    exhaustive = ExhaustiveMaximizer.for_discrete(3)
    with pytest.raises(ValueError, match="state: missing keys .*'floats_per_chunk'"):
        exhaustive.load_state_dict({"candidates": torch.eye(3)})
