"""The replay mixture sampler's state (numpy generator states with 128-bit ints, nested
dicts, the share schedule) survives a training checkpoint: the resumed sampler draws the
same batches as the uninterrupted one."""

from __future__ import annotations

import torch

from qadapt.checkpoint import load_checkpoint, save_checkpoint
from qadapt.data.format.dataset import open_dataset
from qadapt.data.sampling.mixture import MixtureSampler
from qadapt.data.writing.synthetic import write_synthetic_dataset

from .conftest import make_metadata, make_weights


def test_sampler_resumes_from_a_checkpoint(tmp_path):
    prior = write_synthetic_dataset(tmp_path / "prior", transitions=300, obs_dim=5, act_dim=2,
                                    episode_length=50, seed=1)
    fresh = write_synthetic_dataset(tmp_path / "fresh", transitions=120, obs_dim=5, act_dim=2,
                                    episode_length=40, seed=2)

    def sampler():
        return MixtureSampler([open_dataset(prior), open_dataset(fresh)], [0.7, 0.3],
                              batch_size=16, seed=4, block_batches=4)

    straight = sampler()
    expected = [straight.sample().observations.clone() for _ in range(11)]

    first = sampler()
    for _ in range(6):  # stops inside a block of 4
        first.sample()
    save_checkpoint(tmp_path / "ckpt", make_weights(), make_metadata(),
                    training_state={"sampler": first.state_dict()})
    state = load_checkpoint(tmp_path / "ckpt", load_training_state=True).training_state
    assert state == {"sampler": first.state_dict()}

    resumed = sampler()
    resumed.load_state_dict(state["sampler"])
    for want in expected[6:]:
        assert torch.equal(resumed.sample().observations, want)
