"""Q(s, a) networks with a shared interface: encode states once, score many candidate actions.

Holds:
    QNetworkConfig -- form, torso and head widths, output kind (validated at the door).
    QNetwork -- the interface: ``encode(obs)``, ``score(code, actions)``, ``forward(obs, action)``.
    LateFusionQ -- the torso sees only the state; the head's first layer splits into a state
        part (computed once per state) and an action part (computed per candidate).
    ConcatQ -- one MLP over the concatenated, normalised observation and action.
    PerActionQ -- for a Discrete action space: one MLP over the state with one output per
        choice (the form of Mnih et al. 2015's deep Q-network); an action picks its output.
    build_q_network -- pick the form named in the config.

Both forms normalise observations with statistics stored as buffers (saved with the weights)
and map actions from their Box bounds to [-1, 1]. Outputs are logits when ``output`` is
"sigmoid" (Q = sigmoid(logit), for 0/1 rewards) and values when it is "linear".
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import torch
from torch import nn

FORMS = ("late_fusion", "concat", "per_action")
OUTPUTS = ("sigmoid", "linear")


def _positive_widths(name: str, widths: tuple[int, ...]) -> tuple[int, ...]:
    widths = tuple(widths)
    if not widths or any(isinstance(w, bool) or not isinstance(w, int) or w < 1 for w in widths):
        raise ValueError(f"{name}: got {widths!r}, expected a non-empty list of positive integers")
    return widths


@dataclass(frozen=True)
class QNetworkConfig:
    """Shape of a Q-network.

    Args:
        form: "late_fusion" (default), "concat" or "per_action" (Discrete action spaces only:
            one output per choice; ``head`` is unused).
        torso: hidden widths of the state torso (late fusion) or of the whole MLP (concat).
        head: hidden widths of the late-fusion head; the first is the fusion layer.
        output: "sigmoid" (Q in (0, 1), trained with cross-entropy) or "linear".
        initial_value: the Q the untrained network starts near (sigmoid: in (0, 1)).
        layer_norm: LayerNorm after each torso layer.

    Example:
        >>> QNetworkConfig(torso=(64,), head=(32,)).form
        'late_fusion'
    """

    form: str = "late_fusion"
    torso: tuple[int, ...] = (256, 256)
    head: tuple[int, ...] = (64,)
    output: str = "sigmoid"
    initial_value: float = 0.1
    layer_norm: bool = False

    def __post_init__(self) -> None:
        if self.form not in FORMS:
            raise ValueError(f"form: got {self.form!r}, expected one of {', '.join(FORMS)}")
        if self.output not in OUTPUTS:
            raise ValueError(f"output: got {self.output!r}, expected one of {', '.join(OUTPUTS)}")
        object.__setattr__(self, "torso", _positive_widths("torso", self.torso))
        object.__setattr__(self, "head", _positive_widths("head", self.head))
        if not math.isfinite(self.initial_value) or (
            self.output == "sigmoid" and not 0.0 < self.initial_value < 1.0
        ):
            raise ValueError(
                f"initial_value: got {self.initial_value!r}, expected a number in (0, 1) "
                "for a sigmoid output"
            )

    def to_dict(self) -> dict:
        return {
            "form": self.form,
            "torso": list(self.torso),
            "head": list(self.head),
            "output": self.output,
            "initial_value": self.initial_value,
            "layer_norm": self.layer_norm,
        }

    @classmethod
    def from_dict(cls, data: dict) -> QNetworkConfig:
        return cls(
            form=data["form"],
            torso=tuple(data["torso"]),
            head=tuple(data["head"]),
            output=data["output"],
            initial_value=float(data["initial_value"]),
            layer_norm=bool(data["layer_norm"]),
        )


def _mlp(sizes: list[int], layer_norm: bool) -> nn.Sequential:
    layers: list[nn.Module] = []
    for a, b in zip(sizes[:-1], sizes[1:], strict=True):
        layers.append(nn.Linear(a, b))
        if layer_norm:
            layers.append(nn.LayerNorm(b))
        layers.append(nn.ReLU())
    return nn.Sequential(*layers)


class QNetwork(nn.Module):
    """Common parts: normalisation buffers, output bias, the encode/score interface."""

    def __init__(
        self,
        obs_dim: int,
        action_low: torch.Tensor,
        action_high: torch.Tensor,
        config: QNetworkConfig,
    ) -> None:
        super().__init__()
        if obs_dim < 1:
            raise ValueError(f"obs_dim: got {obs_dim}, expected a positive integer")
        action_low = torch.as_tensor(action_low, dtype=torch.float32).reshape(-1)
        action_high = torch.as_tensor(action_high, dtype=torch.float32).reshape(-1)
        if action_low.shape != action_high.shape or not torch.all(action_high > action_low):
            raise ValueError(
                f"action bounds: got low {action_low.tolist()} and high "
                f"{action_high.tolist()}, expected finite low < high per dimension"
            )
        self.config = config
        self.obs_dim = obs_dim
        self.action_dim = int(action_low.numel())
        self.register_buffer("obs_mean", torch.zeros(obs_dim))
        self.register_buffer("obs_std", torch.ones(obs_dim))
        self.register_buffer("action_centre", (action_high + action_low) / 2)
        self.register_buffer("action_half_range", (action_high - action_low) / 2)

    def set_normalizer(self, mean: torch.Tensor, std: torch.Tensor, min_std: float = 1e-3) -> None:
        """Observation statistics (e.g. from the training data).

        A column that was (nearly) constant in the data keeps scale 1: dividing by a tiny
        std would turn the first non-constant value met later (a revealed perturbation, a
        new sensor reading) into a huge input and wreck a warm start.
        """
        std = torch.as_tensor(std, dtype=torch.float32)
        self.obs_mean.copy_(torch.as_tensor(mean, dtype=torch.float32))
        self.obs_std.copy_(torch.where(std < min_std, torch.ones_like(std), std))

    def _norm_obs(self, obs: torch.Tensor) -> torch.Tensor:
        return (obs - self.obs_mean) / self.obs_std

    def _norm_actions(self, actions: torch.Tensor) -> torch.Tensor:
        return (actions - self.action_centre) / self.action_half_range

    def _init_output(self, last: nn.Linear) -> None:
        # Start near initial_value: with sparse 0/1 rewards a low start keeps early targets
        # honest (a start near 0.5 inflates bootstrapped values).
        nn.init.uniform_(last.weight, -1e-3, 1e-3)
        if self.config.output == "sigmoid":
            p = self.config.initial_value
            nn.init.constant_(last.bias, math.log(p / (1 - p)))
        else:
            nn.init.constant_(last.bias, self.config.initial_value)

    def value(self, raw: torch.Tensor) -> torch.Tensor:
        """Map raw outputs (logits for a sigmoid output) to Q-values."""
        return torch.sigmoid(raw) if self.config.output == "sigmoid" else raw

    def encode(self, obs: torch.Tensor) -> torch.Tensor:  # pragma: no cover - abstract
        raise NotImplementedError

    def score(self, code: torch.Tensor, actions: torch.Tensor) -> torch.Tensor:
        raise NotImplementedError  # pragma: no cover - abstract

    def forward(self, obs: torch.Tensor, actions: torch.Tensor) -> torch.Tensor:
        """Raw outputs [B] for observations [B, D] and actions [B, A]."""
        return self.score(self.encode(obs), actions[:, None, :])[:, 0]


class LateFusionQ(QNetwork):
    """Q(s, a) = head(relu(W_s torso(s) + W_a a + b)): the state part is computed once per
    state, so scoring K candidates costs K small head evaluations.

    Example:
        >>> net = LateFusionQ(5, torch.full((2,), -1.0), torch.ones(2),
        ...                   QNetworkConfig(torso=(16,), head=(8,)))
        >>> code = net.encode(torch.zeros(3, 5))
        >>> net.score(code, torch.zeros(3, 10, 2)).shape
        torch.Size([3, 10])
    """

    def __init__(self, obs_dim, action_low, action_high, config: QNetworkConfig) -> None:
        super().__init__(obs_dim, action_low, action_high, config)
        self.torso = _mlp([obs_dim, *config.torso], config.layer_norm)
        fused = config.head[0]
        self.head_state = nn.Linear(config.torso[-1], fused)
        self.head_action = nn.Linear(self.action_dim, fused, bias=False)
        self.head_rest = _mlp(list(config.head), False)
        self.head_out = nn.Linear(config.head[-1], 1)
        self._init_output(self.head_out)

    def encode(self, obs: torch.Tensor) -> torch.Tensor:
        """State codes [B, head[0]]: the state's share of the fusion layer."""
        return self.head_state(self.torso(self._norm_obs(obs)))

    def score(self, code: torch.Tensor, actions: torch.Tensor) -> torch.Tensor:
        """Raw outputs [B, K] for codes [B, H] and candidate actions [B, K, A]."""
        fused = torch.relu(code[:, None, :] + self.head_action(self._norm_actions(actions)))
        return self.head_out(self.head_rest(fused)).squeeze(-1)


class ConcatQ(QNetwork):
    """The reference form: an MLP over [normalised obs, normalised action]; every candidate
    pays for the whole network.

    Example:
        >>> net = ConcatQ(5, torch.full((2,), -1.0), torch.ones(2), QNetworkConfig(
        ...     form="concat", torso=(16,)))
        >>> net(torch.zeros(3, 5), torch.zeros(3, 2)).shape
        torch.Size([3])
    """

    def __init__(self, obs_dim, action_low, action_high, config: QNetworkConfig) -> None:
        super().__init__(obs_dim, action_low, action_high, config)
        self.torso = _mlp([obs_dim + self.action_dim, *config.torso], config.layer_norm)
        self.head_out = nn.Linear(config.torso[-1], 1)
        self._init_output(self.head_out)

    def encode(self, obs: torch.Tensor) -> torch.Tensor:
        return self._norm_obs(obs)

    def score(self, code: torch.Tensor, actions: torch.Tensor) -> torch.Tensor:
        k = actions.shape[1]
        joint = torch.cat([code[:, None, :].expand(-1, k, -1), self._norm_actions(actions)], -1)
        return self.head_out(self.torso(joint)).squeeze(-1)


class PerActionQ(QNetwork):
    """Q(s, ·) for every choice at once: an MLP over the state ending in one output per
    choice. Actions are the stored one-column form of a Discrete space (integers from
    ``action_low`` to ``action_high``); an action selects its output, so scoring K candidates
    costs one network evaluation per state.

    Example:
        >>> net = PerActionQ(4, torch.zeros(1), torch.ones(1), QNetworkConfig(
        ...     form="per_action", torso=(16,)))
        >>> net.score(net.encode(torch.zeros(3, 4)), torch.tensor([[[0.0], [1.0]]] * 3)).shape
        torch.Size([3, 2])
    """

    def __init__(self, obs_dim, action_low, action_high, config: QNetworkConfig) -> None:
        super().__init__(obs_dim, action_low, action_high, config)
        if self.action_dim != 1:
            raise ValueError(f"form: got 'per_action' for {self.action_dim} action "
                             "dimensions, expected the one column of a Discrete space")
        self.choices = int(round(float(2 * self.action_half_range[0]))) + 1
        self.torso = _mlp([obs_dim, *config.torso], config.layer_norm)
        self.head_out = nn.Linear(config.torso[-1], self.choices)
        self._init_output(self.head_out)

    def encode(self, obs: torch.Tensor) -> torch.Tensor:
        """Raw outputs [B, choices], one per choice."""
        return self.head_out(self.torso(self._norm_obs(obs)))

    def score(self, code: torch.Tensor, actions: torch.Tensor) -> torch.Tensor:
        first = self.action_centre[0] - self.action_half_range[0]
        index = torch.round(actions[..., 0] - first).long().clamp(0, self.choices - 1)
        return torch.gather(code, 1, index)


def build_q_network(
    obs_dim: int, action_low, action_high, config: QNetworkConfig
) -> QNetwork:
    """A Q-network of ``config.form`` for ``obs_dim`` observations and action bounds."""
    forms = {"late_fusion": LateFusionQ, "concat": ConcatQ, "per_action": PerActionQ}
    return forms[config.form](obs_dim, action_low, action_high, config)
