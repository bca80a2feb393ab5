"""Every registered init strategy keeps the promises of the InitStrategy contract.

Parametrised over ``INIT_STRATEGIES``, so a new strategy is held to them automatically:
finite Q right after initialise; targets equal to the online critics; exactly the parts it
claims to keep from the base (and no others); the normaliser from where it says; frozen
parts unchanged by learner updates while trained parts move; an exact resume.
"""

from __future__ import annotations

import copy
from pathlib import Path

import pytest
import torch

from qadapt.learner import FittedQLearner, LearnerConfig
from qadapt.learner.assembly import observation_statistics, transition_arrays
from qadapt.learner.init import INIT_STRATEGIES, PARTS, network_part
from qadapt.maximize import CrossEntropyMaximizer

from .init_fixtures import BASE_MEAN, BASE_STD, OBS_DIM, base_weights, problem_dataset, start
from .test_resume import _batches, _problem

NAMES = list(INIT_STRATEGIES)
CONFIGS = Path(__file__).resolve().parents[2] / "configs" / "init"


@pytest.fixture(scope="module")
def dataset(tmp_path_factory):
    return problem_dataset(tmp_path_factory.mktemp("init") / "prior")


@pytest.fixture(scope="module")
def weights():
    return base_weights()


def _learner(critics, outcome, dataset, strategy, target_update="copy"):
    config = LearnerConfig(batch_size=32, refresh_every=3, learning_rate=1e-2,
                           target_update=target_update, tau=0.2,
                           anchor_weight=0.1 if strategy.gives_anchor else 0.0)
    cem = CrossEntropyMaximizer([-1, -1], [1, 1], samples=16, elites=4, iterations=2)
    return FittedQLearner(critics, cem, config, [transition_arrays(dataset)], seed=5,
                          anchor=outcome.anchor)


def _batch_list(count: int, seed: int = 1):
    # The dataset's observations, actions and flags are _problem()'s; only rewards differ,
    # and the learner reads rewards from the batch, so these batches fit its rows.
    return list(_batches(_problem(), count, seed=seed))


def test_every_strategy_states_its_claims_and_has_a_config_file():
    for name, cls in INIT_STRATEGIES.items():
        assert cls.name == name
        assert isinstance(cls.uses_base_statistics, bool)
        assert cls.base_parts <= {"torso", "head"} and cls.frozen_parts <= set(PARTS)
        # configs/init/NAME.yaml is what ``init=NAME`` loads.
        assert (CONFIGS / f"{name}.yaml").read_text().count(f"name: {name}") == 1


@pytest.mark.parametrize("name", NAMES)
def test_finite_q_and_targets_equal_online_right_after_init(name, dataset, weights):
    _, critics, _ = start(name, dataset, weights)
    batch = _batch_list(1)[0]
    for online, target in zip(critics.online, critics.target, strict=True):
        for net in (online, target):
            assert torch.isfinite(net(batch.observations, batch.actions)).all()
        for (key, a), (_, b) in zip(online.state_dict().items(), target.state_dict().items(),
                                    strict=True):
            assert torch.equal(a, b), key


@pytest.mark.parametrize("name", NAMES)
def test_exactly_the_claimed_parts_come_from_the_base(name, dataset, weights):
    strategy, critics, outcome = start(name, dataset, weights)
    for j, net in enumerate(critics.online):
        for key, param in net.named_parameters():
            base = weights[f"critics.online.{j}.{key}"]
            if network_part(key) in strategy.base_parts:
                assert torch.equal(param, base), (j, key)
            else:
                # Every base tensor carries its own noise: no fresh or trained one matches.
                assert not torch.equal(param, base), (j, key)
    if strategy.gives_anchor:
        assert len(outcome.anchor) == len(critics.online)
        for j, anchor in enumerate(outcome.anchor):
            assert set(anchor) == {k for k, _ in critics.online[j].named_parameters()}
            for key, tensor in anchor.items():
                assert torch.equal(tensor, weights[f"critics.online.{j}.{key}"]), (j, key)
    else:
        assert outcome.anchor is None


@pytest.mark.parametrize("name", NAMES)
def test_normaliser_comes_from_where_the_strategy_says(name, dataset, weights):
    strategy, critics, _ = start(name, dataset, weights)
    if strategy.uses_base_statistics:
        mean, std = torch.full((OBS_DIM,), BASE_MEAN), torch.full((OBS_DIM,), BASE_STD)
    else:
        mean, std = observation_statistics([transition_arrays(dataset)])
    for net in [*critics.online, *critics.target]:
        assert torch.equal(net.obs_mean, mean) and torch.equal(net.obs_std, std)


@pytest.mark.parametrize("target_update", ["copy", "polyak"])
@pytest.mark.parametrize("name", NAMES)
def test_frozen_parts_hold_and_trained_parts_move(name, target_update, dataset, weights):
    strategy, critics, outcome = start(name, dataset, weights)
    learner = _learner(critics, outcome, dataset, strategy, target_update)
    optimised = {id(p) for group in learner.optimizer.param_groups for p in group["params"]}
    before = copy.deepcopy(critics.state_dict())
    for batch in _batch_list(4):
        learner.update(batch)
    for j, (online, target) in enumerate(zip(critics.online, critics.target, strict=True)):
        targets = dict(target.named_parameters())
        for key, param in online.named_parameters():
            frozen = network_part(key) in strategy.frozen_parts
            unchanged = torch.equal(param, before[f"online.{j}.{key}"])
            assert unchanged == frozen, (j, key, "frozen" if frozen else "trained")
            assert param.requires_grad != frozen and (id(param) in optimised) != frozen
            if frozen:
                assert torch.equal(targets[key], param), (j, key)


@pytest.mark.parametrize("name", NAMES)
def test_resumed_learner_matches_uninterrupted_bit_for_bit(name, dataset, weights):
    batches = _batch_list(8, seed=2)
    strategy, critics, outcome = start(name, dataset, weights)
    straight = _learner(critics, outcome, dataset, strategy)
    for batch in batches:
        straight.update(batch)

    strategy, critics, outcome = start(name, dataset, weights)
    first = _learner(critics, outcome, dataset, strategy)
    for batch in batches[:5]:
        first.update(batch)
    saved = copy.deepcopy(first.state_dict())
    # A resumed run rebuilds its critics with the same strategy, then loads the state.
    strategy, critics, outcome = start(name, dataset, weights)
    resumed = _learner(critics, outcome, dataset, strategy)
    resumed.load_state_dict(saved)
    for batch in batches[5:]:
        resumed.update(batch)
    for (key, a), (_, b) in zip(straight.critics.state_dict().items(),
                                resumed.critics.state_dict().items(), strict=True):
        assert torch.equal(a, b), key
    for key, param in resumed.critics.online[0].named_parameters():
        assert param.requires_grad == (network_part(key) not in strategy.frozen_parts)
