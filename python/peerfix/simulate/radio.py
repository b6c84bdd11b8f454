"""Who ranges with whom: a disc radio model with optional packet loss.

Every pair of nodes whose true distance is at most the radio range ranges
once per epoch, except anchor-anchor pairs (their distance is known).
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree


def candidate_pairs(xy_m: np.ndarray, n_anchors: int, radio_range_m: float) -> np.ndarray:
    """(P, 2) node indices (i < j) of the pairs in radio range, sorted by (i, j).

    Nodes are indexed anchors first, then agents, so an anchor-agent pair
    has the anchor as its first node.  Anchor-anchor pairs are left out.
    """
    pairs = cKDTree(xy_m).query_pairs(radio_range_m, output_type="ndarray")
    pairs = np.sort(pairs.reshape(-1, 2), axis=1)
    pairs = pairs[pairs[:, 1] >= n_anchors]  # the larger index is an agent
    order = np.lexsort((pairs[:, 1], pairs[:, 0]))
    return pairs[order]


def survives_loss(uniform_draws: np.ndarray, packet_loss: float) -> np.ndarray:
    """(P,) bool: the exchange got through (a lost one leaves no row)."""
    return uniform_draws >= packet_loss
