"""Q-function networks.

Holds:
    QNetworkConfig -- widths and form of a Q-network (validated).
    LateFusionQ -- state torso evaluated once per state, a small head per candidate action.
    ConcatQ -- the straightforward reference: one MLP over [observation, action].
    build_q_network -- make either form from a config and the spaces' sizes.
    CriticPair -- two Q-networks (clipped double-Q) with their target copies.
"""

from qadapt.nets.critics import CriticPair
from qadapt.nets.q_network import ConcatQ, LateFusionQ, QNetworkConfig, build_q_network

__all__ = ["ConcatQ", "CriticPair", "LateFusionQ", "QNetworkConfig", "build_q_network"]
