"""Test problems for the maximisers, batched over states; invented for the tests.

Holds:
    QuadraticProblem -- per-state shifted concave quadratic; maximum 0 at the shift.
    TwoBumpProblem -- per-state mixture of a global and a lower local Gaussian bump.
    random_box -- an asymmetric box of a given dimension.
"""

from __future__ import annotations

from dataclasses import dataclass

import torch


def random_box(dim: int, seed: int) -> tuple[torch.Tensor, torch.Tensor]:
    """low, high float32 [dim], asymmetric about 0, widths in [1, 4]."""
    g = torch.Generator().manual_seed(seed)
    low = -torch.rand(dim, generator=g) * 2 - 0.5
    high = low + 1 + torch.rand(dim, generator=g) * 3
    return low, high


def _inside(low: torch.Tensor, high: torch.Tensor, count: int, margin: float, g) -> torch.Tensor:
    """count points [count, A] uniform in the box shrunk by margin * width on each side."""
    width = high - low
    return low + width * (margin + (1 - 2 * margin) * torch.rand(count, low.numel(), generator=g))


@dataclass
class QuadraticProblem:
    """f_b(a) = -sum_i w_i (a_i - shift_b,i)^2; shifts inside the box, so max f_b = 0.

    shifts: [B, A]; weights: [A] > 0. ``score`` takes [B, K, A] and returns [B, K] in the
    dtype of the candidates (float64 candidates give a float64 reference for scipy).
    """

    shifts: torch.Tensor
    weights: torch.Tensor

    @classmethod
    def random(cls, low, high, count: int, seed: int) -> QuadraticProblem:
        g = torch.Generator().manual_seed(seed)
        weights = 0.5 + 1.5 * torch.rand(low.numel(), generator=g)
        return cls(shifts=_inside(low, high, count, 0.1, g), weights=weights)

    def score(self, candidates: torch.Tensor) -> torch.Tensor:
        shifts = self.shifts.to(candidates.dtype).unsqueeze(1)
        return -(self.weights.to(candidates.dtype) * (candidates - shifts) ** 2).sum(-1)

    def subset(self, index: int) -> QuadraticProblem:
        return QuadraticProblem(self.shifts[index : index + 1], self.weights)

    def best_values(self) -> torch.Tensor:
        return torch.zeros(self.shifts.shape[0])


@dataclass
class TwoBumpProblem:
    """f_b(a) = exp(-|a - g_b|^2 / (2 s_g^2)) + h_l exp(-|a - l_b|^2 / (2 s_l^2)).

    A narrower global bump (height 1 at g_b) and a broader, lower local bump (height h_l < 1
    at l_b) placed at least ``separation`` apart, so a search can settle on the wrong one.
    """

    global_centres: torch.Tensor  # [B, A]
    local_centres: torch.Tensor  # [B, A]
    global_width: float = 0.3
    local_width: float = 0.5
    local_height: float = 0.7

    @classmethod
    def random(cls, dim: int, count: int, seed: int, separation: float = 1.0) -> TwoBumpProblem:
        """Centres in the box [-1, 1]^dim (kept 0.1 inside), pairs drawn until far enough."""
        g = torch.Generator().manual_seed(seed)
        low, high = -torch.ones(dim), torch.ones(dim)
        pairs = []
        while len(pairs) < count:  # test set-up only, not a hot path
            a, b = _inside(low, high, 2, 0.05, g)
            if float((a - b).norm()) >= separation:
                pairs.append((a, b))
        return cls(torch.stack([p[0] for p in pairs]), torch.stack([p[1] for p in pairs]))

    def score(self, candidates: torch.Tensor) -> torch.Tensor:
        dt = candidates.dtype
        d_g = ((candidates - self.global_centres.to(dt).unsqueeze(1)) ** 2).sum(-1)
        d_l = ((candidates - self.local_centres.to(dt).unsqueeze(1)) ** 2).sum(-1)
        return torch.exp(-d_g / (2 * self.global_width**2)) + self.local_height * torch.exp(
            -d_l / (2 * self.local_width**2)
        )

    def subset(self, index: int) -> TwoBumpProblem:
        return TwoBumpProblem(
            self.global_centres[index : index + 1],
            self.local_centres[index : index + 1],
            self.global_width,
            self.local_width,
            self.local_height,
        )
