"""Fitted Q-iteration with clipped double-Q: one gradient step at a time.

Holds:
    TrainingDiverged -- raised when the loss turns non-finite or Q leaves its bound.
    FittedQLearner -- owns the critics' optimiser, targets, target updates, EMA and RNG.

One ``update(batch)``: (refresh mode) refresh the cached targets when due and look the batch's
targets up, or (per-batch mode) compute them for the batch; the TD loss of both online critics,
plus the optional conservative and anchor penalties; one clipped Adam step; then the target
critics follow (copy or Polyak) and the acting EMA is updated.
"""

from __future__ import annotations

import copy
import time
from collections.abc import Mapping, Sequence
from typing import Protocol

import torch
from torch import nn

from qadapt.errors import TrainingFailed
from qadapt.learner.config import LearnerConfig
from qadapt.learner.losses import anchor_penalty, conservative_penalty, td_loss
from qadapt.learner.targets import TargetCache, TransitionArrays, bootstrap_values, td_targets
from qadapt.maximize import ActionMaximizer
from qadapt.nets import CriticPair


class TrainingDiverged(TrainingFailed):
    """Training stopped: a non-finite loss or a Q-value beyond the configured limit."""

    def __init__(self, step: int, reason: str) -> None:
        super().__init__(f"training diverged at gradient step {step}: {reason}")
        self.step = step
        self.reason = reason


class Batch(Protocol):
    observations: torch.Tensor
    actions: torch.Tensor
    rewards: torch.Tensor
    next_observations: torch.Tensor
    terminated: torch.Tensor
    source_index: torch.Tensor
    row_index: torch.Tensor


class FittedQLearner:
    """Trains a CriticPair on batches from one or more sources.

    Args:
        critics: online and target critics (their normalisers already set).
        maximizer: finds a* for targets (and for the conservative penalty).
        config: LearnerConfig.
        sources: every source's arrays (refresh mode reads all of them at each refresh).
        seed: seed of the learner's own random stream (maximiser and penalty samples).
        anchor: parameter name -> tensor for the anchor penalty, one mapping for every
            critic or a sequence of one mapping per online critic.

    Example: see tests/learner/test_fqi.py.
    """

    def __init__(
        self,
        critics: CriticPair,
        maximizer: ActionMaximizer,
        config: LearnerConfig,
        sources: Sequence[TransitionArrays],
        seed: int,
        anchor: Mapping[str, torch.Tensor] | Sequence[Mapping[str, torch.Tensor]] | None = None,
    ) -> None:
        if config.loss == "cross_entropy" and critics.online[0].config.output != "sigmoid":
            raise ValueError("loss: got 'cross_entropy', which needs a sigmoid network output")
        if config.anchor_weight > 0 and not anchor:
            raise ValueError("anchor_weight: got a positive weight but no anchor weights")
        self.critics = critics
        self.maximizer = maximizer
        self.config = config
        self.sources = list(sources)
        if isinstance(anchor, Mapping):
            anchor = [anchor] * len(critics.online)
        anchor = list(anchor or [])
        if anchor and len(anchor) != len(critics.online):
            raise ValueError(f"anchor: got {len(anchor)} mappings, expected one per online "
                             f"critic ({len(critics.online)})")
        self.anchors = [{k: v.detach().clone() for k, v in a.items()} for a in anchor]
        self.generator = torch.Generator().manual_seed(int(seed))
        params = [p for net in critics.online for p in net.parameters() if p.requires_grad]
        self.optimizer = torch.optim.Adam(params, lr=config.learning_rate)
        self._params = params
        self.step = 0
        net = critics.online[0]
        self._action_low = net.action_centre - net.action_half_range
        self._action_span = 2 * net.action_half_range
        self._choices = getattr(maximizer, "candidates", None)
        self.cache = None
        if config.target_mode == "refresh":
            self.cache = TargetCache(
                [len(s) for s in self.sources], net.action_dim,
                with_state_actions=config.conservative_weight > 0
                and config.conservative_at_maximum
                and config.conservative_maximum == "cached",
            )
        self.ema: nn.Module | None = None
        if config.ema_decay > 0:
            self.ema = copy.deepcopy(net).requires_grad_(False)
        self._clamp = (0.0, 1.0) if config.loss == "cross_entropy" else None
        self.last_refresh_seconds = 0.0

    # -- targets -------------------------------------------------------------------------
    def _refresh_due(self) -> bool:
        return self.cache is not None and self.step % self.config.refresh_every == 0

    def refresh_targets(self) -> None:
        """Copy targets if configured so, then recompute every cached target."""
        if self.config.target_update == "copy" and self.config.copy_every == 0:
            self.critics.hard_update()
        start = time.perf_counter()
        self.cache.refresh(
            self.critics, self.maximizer, self.sources, self.config.gamma, self.generator,
            self.config.refresh_chunk, self._clamp, self.config.refresh_blend,
            (self.config.reward_scale, self.config.reward_shift),
        )
        self.last_refresh_seconds = time.perf_counter() - start

    def _batch_targets(self, batch: Batch) -> tuple[torch.Tensor, torch.Tensor | None]:
        """Targets [B] for the batch, and the state actions the penalty needs (or None)."""
        cfg = self.config
        state_actions = None
        if self.cache is not None:
            targets, state_actions = self.cache.lookup(batch.source_index, batch.row_index)
        else:
            values, _ = bootstrap_values(
                self.critics, self.maximizer, batch.next_observations, self.generator
            )
            targets = td_targets(batch.rewards, batch.terminated, values, cfg.gamma,
                                 (cfg.reward_scale, cfg.reward_shift))
            if self._clamp is not None:
                targets = targets.clamp(*self._clamp)
        wants_online = cfg.conservative_maximum == "online" or self.cache is None
        if cfg.conservative_weight > 0 and cfg.conservative_at_maximum and wants_online:
            first = self.critics.online[0]
            with torch.no_grad():
                code = first.encode(batch.observations)
                state_actions = self.maximizer.maximize(
                    lambda c: first.score(code, c), code.shape[0], generator=self.generator
                ).actions
        return targets, state_actions

    def _random_actions(self, states: int, count: int, width: int) -> torch.Tensor:
        """[states, count, width] uniform actions for the regulariser: over the maximiser's
        finite set when it has one (a Discrete space's choices), else over the Box."""
        if self._choices is not None:
            pick = torch.randint(len(self._choices), (states, count), generator=self.generator)
            return self._choices[pick]
        return self._action_low + self._action_span * torch.rand(
            states, count, width, generator=self.generator)

    # -- one step ------------------------------------------------------------------------
    def update(self, batch: Batch) -> dict[str, torch.Tensor]:
        """One gradient step; returns detached metric tensors (no host sync needed)."""
        cfg = self.config
        if self._refresh_due():
            self.refresh_targets()
        targets, state_actions = self._batch_targets(batch)

        loss = torch.zeros(())
        raw_first = None
        penalty = torch.zeros(())
        for j, net in enumerate(self.critics.online):
            code = net.encode(batch.observations)
            if cfg.conservative_weight > 0:
                b = code.shape[0]
                uniform = self._random_actions(b, cfg.conservative_samples, net.action_dim)
                parts = [batch.actions[:, None], uniform]
                if state_actions is not None:
                    parts.insert(1, state_actions[:, None])
                candidates = torch.cat(parts, dim=1)
                raw_all = net.score(code, candidates)
                raw = raw_all[:, 0]
                values_all = raw_all if cfg.conservative_on == "raw" else net.value(raw_all)
                penalty = penalty + conservative_penalty(
                    values_all[:, 1:], values_all[:, 0], cfg.conservative_temperature
                )
            else:
                raw = net.score(code, batch.actions[:, None])[:, 0]
            loss = loss + td_loss(raw, targets, cfg.loss, cfg.huber_delta)
            if j == 0:
                raw_first = raw
            if cfg.anchor_weight > 0:
                loss = loss + cfg.anchor_weight * anchor_penalty(net, self.anchors[j])
        total = loss + cfg.conservative_weight * penalty

        if not torch.isfinite(total):
            raise TrainingDiverged(self.step, f"the loss is {total.item()}")
        self.optimizer.zero_grad(set_to_none=True)
        total.backward()
        if cfg.grad_clip > 0:
            grad_norm = torch.nn.utils.clip_grad_norm_(self._params, cfg.grad_clip)
        else:
            grad_norm = torch.linalg.vector_norm(
                torch.stack([p.grad.norm() for p in self._params if p.grad is not None])
            )
        self.optimizer.step()
        self.step += 1
        self._follow_targets()
        if self.ema is not None:
            with torch.no_grad():
                torch._foreach_lerp_(
                    list(self.ema.parameters()), list(self.critics.online[0].parameters()),
                    1.0 - cfg.ema_decay,
                )

        q = self.critics.online[0].value(raw_first.detach())
        q_max = q.abs().max()
        if q_max > cfg.q_limit:
            raise TrainingDiverged(self.step, f"|Q| reached {q_max.item():.4g} > {cfg.q_limit}")
        return {
            "td_loss": loss.detach() / 2,
            "conservative_penalty": penalty.detach() / 2,
            "q_mean": q.mean(),
            "q_max": q.max(),
            "target_mean": targets.mean(),
            "grad_norm": grad_norm.detach(),
        }

    def _follow_targets(self) -> None:
        cfg = self.config
        if cfg.target_update == "polyak":
            self.critics.soft_update(cfg.tau)
        elif cfg.copy_every > 0 and self.step % cfg.copy_every == 0:
            self.critics.hard_update()

    # -- acting and resuming -------------------------------------------------------------
    def acting_network(self) -> nn.Module:
        """The network the policy should act with: the EMA if enabled, else critic 0."""
        return self.ema if self.ema is not None else self.critics.online[0]

    def state_dict(self) -> dict:
        return {
            "step": self.step,
            "critics": self.critics.state_dict(),
            "optimizer": self.optimizer.state_dict(),
            "generator": self.generator.get_state(),
            "cache": None if self.cache is None else self.cache.state_dict(),
            "ema": None if self.ema is None else self.ema.state_dict(),
        }

    def load_state_dict(self, state: dict) -> None:
        self.step = int(state["step"])
        self.critics.load_state_dict(state["critics"])
        self.optimizer.load_state_dict(state["optimizer"])
        self.generator.set_state(state["generator"])
        if self.cache is not None:
            self.cache.load_state_dict(state["cache"])
        if self.ema is not None:
            self.ema.load_state_dict(state["ema"])
