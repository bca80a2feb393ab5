"""Test-wide settings: one torch thread, so parallel runs on a small machine do not thrash."""

import torch

torch.set_num_threads(1)
