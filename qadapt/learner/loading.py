"""Loading a trained Q-network from a checkpoint, and acting with it.

Holds:
    load_q_network -- the acting network of a checkpoint, checked against expected spaces.
    checkpoint_maximizer -- the maximiser a checkpoint records (kind and CEM settings).
    checkpoint_policy -- a QPolicy over a checkpoint's network, for evaluation or collection.
"""

from __future__ import annotations

from pathlib import Path

import torch

from qadapt.checkpoint import load_checkpoint
from qadapt.errors import BadInput
from qadapt.layout import resolve_checkpoint
from qadapt.learner.policy import QPolicy
from qadapt.learner.source_indicator import ActingTag, SourceIndicator
from qadapt.maximize import maximizer_for_space
from qadapt.nets import QNetworkConfig, build_q_network
from qadapt.spaces import action_bounds


def load_q_network(path: str | Path, observation_space=None, action_space=None,
                   what: str = "environment"):
    """(network, loaded checkpoint): the checkpoint's acting network in eval mode; one
    trained with a source indicator appends its acting columns to raw observations."""
    loaded = load_checkpoint(path, expect_observation_space=observation_space,
                             expect_action_space=action_space, what=what)
    meta = loaded.metadata
    acting = {k[len("acting."):]: v for k, v in loaded.weights.items() if k.startswith("acting.")}
    if not acting:
        raise BadInput(f"{path}: holds no acting network weights")
    low, high = (torch.as_tensor(b) for b in action_bounds(meta.action_space))
    indicator = SourceIndicator.from_json(meta.network.get("source_indicator"), str(path))
    width = 0 if indicator is None else indicator.width
    network = build_q_network(int(meta.observation_space.shape[0]) + width, low, high,
                              QNetworkConfig.from_dict(meta.network["q_network"]))
    try:
        network.load_state_dict(acting)
    except RuntimeError as err:
        # torch's first line only says "Error(s) in loading state_dict"; the next names keys.
        detail = " ".join(line.strip() for line in str(err).splitlines()[:2])
        raise BadInput(f"{path}: weights do not fit the recorded network: "
                       f"{detail[:300]}") from err
    if indicator is not None:  # acts on raw observations, feeding the new data's columns
        network = ActingTag(network, indicator.acting)
    network.requires_grad_(False).eval()
    return network, loaded


def checkpoint_maximizer(metadata, action_space, where: str, settings: dict | None = None):
    """The maximiser a checkpoint was trained with: its recorded kind and CEM settings ("auto"
    and the CEM's own defaults for records that lack them), unless ``settings`` are given."""
    recorded = dict(metadata.network.get("maximizer") or {})
    kind = recorded.pop("kind", "auto")
    if settings is None:
        settings = {k: v for k, v in recorded.items() if v is not None}
    try:
        return maximizer_for_space(kind, action_space, settings)
    except ValueError as err:
        raise BadInput(f"{where}: {err}") from err


def checkpoint_policy(path, env, seed: int, gaussian_std: float = 0.0, epsilon: float = 0.0,
                      maximizer_settings: dict | None = None) -> QPolicy:
    """A QPolicy over the checkpoint at ``path``, refusing one trained for other spaces."""
    path = resolve_checkpoint(path, key="policy.checkpoint")
    network, loaded = load_q_network(path, env.single_observation_space,
                                     env.single_action_space)
    maximizer = checkpoint_maximizer(loaded.metadata, env.single_action_space, str(path),
                                     maximizer_settings)
    return QPolicy(network, maximizer, seed=seed, gaussian_std=gaussian_std, epsilon=epsilon,
                   provenance={"checkpoint": str(path), "checkpoint_sha256": loaded.identity})
