"""Source indicators: columns per source, exact widening of a base, acting on raw observations."""

from __future__ import annotations

import pytest
import torch

from qadapt.data import ReplayBatch
from qadapt.learner.source_indicator import (
    ActingTag,
    SourceIndicator,
    TaggedSampler,
    widen_observation_input,
)
from qadapt.nets import QNetworkConfig, build_q_network


def test_flag_and_per_source_columns():
    flag = SourceIndicator.for_sources("flag", n_prior=1, n_new=2)
    assert flag.values == ((0.0,), (1.0,), (1.0,)) and flag.acting == (1.0,)
    one_hot = SourceIndicator.for_sources("per_source", n_prior=2, n_new=1)
    assert one_hot.values == ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0))
    assert one_hot.acting == (0.0, 0.0, 1.0)
    assert SourceIndicator.for_sources("none", 1, 1) is None
    assert SourceIndicator.from_json(flag.to_json(), "x") == flag
    with pytest.raises(ValueError, match="indicator"):
        SourceIndicator.for_sources("colour", 1, 1)


@pytest.mark.parametrize("form", ["late_fusion", "concat"])
def test_widened_base_computes_exactly_the_base_whatever_the_new_columns_hold(form):
    config = QNetworkConfig(form=form, torso=(16, 8), head=(8,))
    low, high = -torch.ones(2), torch.ones(2)
    torch.manual_seed(0)
    base = build_q_network(5, low, high, config)
    base.set_normalizer(torch.randn(5), torch.rand(5) + 0.5)
    wide = build_q_network(7, low, high, config)
    wide.load_state_dict(widen_observation_input(base.state_dict(), obs_dim=5, extra=2))
    obs, actions = torch.randn(10, 5), torch.rand(10, 2) * 2 - 1
    for extra in (torch.zeros(10, 2), torch.randn(10, 2) * 5):
        assert torch.allclose(wide(torch.cat([obs, extra], 1), actions), base(obs, actions),
                              atol=1e-6)
    tagged = ActingTag(wide, (1.0, 0.0))
    assert torch.allclose(tagged(obs, actions), base(obs, actions), atol=1e-6)
    # A policy over the tagged network acts on raw observations like one over the base.
    from qadapt.learner.policy import QPolicy
    from qadapt.maximize import CrossEntropyMaximizer

    cem = CrossEntropyMaximizer(low, high, samples=16, elites=4, iterations=2)
    assert torch.equal(tagged.action_half_range, base.action_half_range)
    acted = QPolicy(tagged, cem, seed=3).act(obs.numpy())
    assert acted.shape == (10, 2)
    assert (QPolicy(base, cem, seed=3).act(obs.numpy()) == acted).all()


def test_tagged_batches_carry_their_sources_columns():
    class OneBatch:
        def sample(self):
            obs = torch.arange(8.0).reshape(4, 2)
            flags = torch.zeros(4)
            return ReplayBatch(obs, obs + 1, torch.zeros(4, 1), flags, flags, flags,
                               torch.tensor([0, 1, 1, 0]), torch.arange(4))

        def state_dict(self):
            return {"k": 1}

    sampler = TaggedSampler(OneBatch(), SourceIndicator.for_sources("flag", 1, 1))
    batch = sampler.sample()
    assert batch.observations[:, 2].tolist() == [0.0, 1.0, 1.0, 0.0]
    assert batch.next_observations[:, :2].tolist() == (torch.arange(8.0).reshape(4, 2) + 1
                                                       ).tolist()
    assert sampler.state_dict() == {"k": 1}
