"""A fixed policy's value from logged transitions alone: fitted Q evaluation, and two cheaper
signals of a checkpoint's quality read from its own critic.

Holds:
    ValueFitSettings -- how long and how hard fitted Q evaluation fits its critic.
    greedy_actions -- a network's greedy actions at many observations, chunk by chunk.
    fit_policy_value -- fitted Q evaluation of a policy given as its actions at every next
        observation: a fresh critic regressed on ``r + gamma * Q(s', pi(s'))``.
    start_values -- a critic's Q at episodes' first observations and the policy's actions.
    own_critic_signals -- a critic's held-out TD error under its own greedy policy, and its
        own Q at start states.

Fitted Q evaluation (Le, Voloshin and Yue, 2019, "Batch Policy Learning under Constraints",
ICML) is fitted Q-iteration with the max replaced by the evaluated policy's action: the
policy's action at every next observation is computed once, and the targets are recomputed
from a frozen copy of the critic every ``steps_per_fit`` gradient steps, as the learner's
refresh mode does. Paine et al. (2020, "Hyperparameter Selection for Offline Reinforcement
Learning") found it the most reliable of the offline signals they compared for ranking
policies, which is why ``qadapt score`` reports it first.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import torch
from torch import nn

from qadapt.checks import positive_float, positive_int
from qadapt.learner.targets import TransitionArrays, td_targets
from qadapt.maximize import ActionMaximizer


@dataclass(frozen=True)
class ValueFitSettings:
    """Fitted Q evaluation's budget: ``fits`` target refreshes of ``steps_per_fit`` Adam steps
    each on batches of ``batch_size`` (the horizon it can see grows by one step per fit, so
    ``fits`` should exceed a few times 1 / (1 - gamma)); the last quarter of the fits take a
    tenth of the step (decaying the step near convergence is common practice: constant Adam
    steps make a near-exact fit jump, tests/learner/test_fixed_points.py); ``seed`` seeds the
    critic's initialisation and the batches. The defaults were measured (docs/scoring.md).

    Example:
        >>> ValueFitSettings(fits=10).steps
        1000
    """

    fits: int = 40
    steps_per_fit: int = 100
    batch_size: int = 256
    learning_rate: float = 1e-3
    seed: int = 0

    def __post_init__(self) -> None:
        for name in ("fits", "steps_per_fit", "batch_size"):
            positive_int(name, getattr(self, name))
        positive_float("learning_rate", self.learning_rate)

    @property
    def steps(self) -> int:
        return self.fits * self.steps_per_fit


def _tensor(array: np.ndarray) -> torch.Tensor:
    return torch.from_numpy(np.array(array, dtype=np.float32))  # a copy: maps are read-only


@torch.no_grad()
def greedy_actions(network: nn.Module, maximizer: ActionMaximizer, observations: np.ndarray,
                   seed: int = 0, chunk: int = 4096) -> torch.Tensor:
    """Actions [N, A] that ``maximizer`` finds best under ``network`` at ``observations``
    [N, D], in chunks (the same draws for the same seed and chunking)."""
    generator = torch.Generator().manual_seed(int(seed))
    out = []
    for start in range(0, observations.shape[0], chunk):
        obs = _tensor(observations[start:start + chunk])
        code = network.encode(obs)
        out.append(maximizer.maximize(lambda c, code=code: network.score(code, c),
                                      obs.shape[0], generator=generator).actions)
    return torch.cat(out) if out else torch.zeros(0, 0)


@torch.no_grad()
def _q(network: nn.Module, observations: torch.Tensor, actions: torch.Tensor,
       chunk: int = 8192) -> torch.Tensor:
    parts = [network.value(network(observations[i:i + chunk], actions[i:i + chunk]))
             for i in range(0, observations.shape[0], chunk)]
    return torch.cat(parts) if parts else torch.zeros(0)


def fit_policy_value(
    arrays: TransitionArrays,
    next_actions: torch.Tensor,
    make_network: Callable[[], nn.Module],
    gamma: float,
    settings: ValueFitSettings,
    reward_map: tuple[float, float] = (1.0, 0.0),
) -> nn.Module:
    """A critic of the policy whose action at each transition's next observation is
    ``next_actions`` [T, A]: fitted Q evaluation on ``arrays`` (targets
    ``scale * r + shift + gamma * (1 - terminated) * Q_frozen(s', next_action)``, squared
    loss). ``make_network()`` gives the fresh critic (linear output, normaliser set). Returns
    it in eval mode; its Q is in the mapped reward units."""
    if not 0.0 <= gamma <= 1.0:
        raise ValueError(f"gamma: got {gamma!r}, expected a number in [0, 1]")
    torch.manual_seed(settings.seed)
    critic = make_network()
    frozen = copy.deepcopy(critic).requires_grad_(False)
    obs, act = _tensor(arrays.observations), _tensor(arrays.actions)
    rewards, terminated = _tensor(arrays.rewards), _tensor(arrays.terminated)
    next_obs = _tensor(arrays.next_observations)
    optimizer = torch.optim.Adam(critic.parameters(), lr=settings.learning_rate)
    generator = torch.Generator().manual_seed(int(settings.seed))
    size = obs.shape[0]
    for fit in range(settings.fits):
        if fit == settings.fits - settings.fits // 4:  # the last quarter at a tenth the step
            for group in optimizer.param_groups:
                group["lr"] = settings.learning_rate / 10
        frozen.load_state_dict(critic.state_dict())
        targets = td_targets(rewards, terminated, _q(frozen, next_obs, next_actions), gamma,
                             reward_map)
        for _ in range(settings.steps_per_fit):
            rows = (torch.arange(size) if settings.batch_size >= size else  # the whole set
                    torch.randint(size, (settings.batch_size,), generator=generator))
            loss = torch.mean((critic.value(critic(obs[rows], act[rows])) - targets[rows]) ** 2)
            optimizer.zero_grad(set_to_none=True)
            loss.backward()
            optimizer.step()
    return critic.requires_grad_(False).eval()


def start_values(critic: nn.Module, start_observations: np.ndarray,
                 start_actions: torch.Tensor) -> np.ndarray:
    """Q [E] of ``critic`` at each episode's first observation and the policy's action."""
    return _q(critic, _tensor(start_observations), start_actions).numpy().astype(np.float64)


def own_critic_signals(
    network: nn.Module,
    arrays: TransitionArrays,
    next_actions: torch.Tensor,
    start_observations: np.ndarray,
    start_actions: torch.Tensor,
    gamma: float,
    reward_map: tuple[float, float] = (1.0, 0.0),
) -> tuple[float, np.ndarray]:
    """(root-mean-square TD error over ``arrays``, own Q [E] at the start states) of the
    checkpoint's own ``network`` under its own greedy policy, in its learnt units."""
    obs, act = _tensor(arrays.observations), _tensor(arrays.actions)
    q = _q(network, obs, act)
    following = _q(network, _tensor(arrays.next_observations), next_actions)
    targets = td_targets(_tensor(arrays.rewards), _tensor(arrays.terminated), following,
                         gamma, reward_map)
    rmse = float(torch.sqrt(torch.mean((q - targets) ** 2)))
    return rmse, start_values(network, start_observations, start_actions)
