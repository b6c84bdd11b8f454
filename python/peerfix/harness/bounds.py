"""Limits: the Cramer-Rao position error bound (PEB) of a ranging network.

Range-only Fisher information, following Patwari et al., "Locating the
nodes", IEEE Signal Processing Magazine 22(4), 2005, and, for cooperating
agents, the Fisher information over all agents of Shen, Wymeersch, Win,
"Fundamental limits of wideband localization, Part II: cooperative
networks", IEEE Trans. IT 56(10), 2010.

A range r = |x_i - x_j| + n with n ~ N(0, sigma^2) carries the information
(1/sigma^2) u u^T along the unit vector u between the two nodes.  Anchors are
known, so an anchor range only feeds the agent's own 2x2 block; an agent-agent
range couples the two agents (+C on both diagonal blocks, -C off diagonal).

The bound is a statement about the Gaussian measurement model: blocked-path
bias is not in it, so it is the floor for line-of-sight ranging.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike

if TYPE_CHECKING:  # the harness only reads scenarios; no import at run time
    from peerfix.scenario.model import Scenario

# Eigenvalues of J at or below this share of the largest one count as null.
# True null eigenvalues come out of eigh at about 1e-16 of the largest; a
# genuine but weak direction at 1e-9 would already mean a bound 3e4 times the
# best-determined one, far beyond anything a site would accept.
DEFAULT_EIG_REL_TOL = 1e-9
# An agent touches the null space when its two rows of the orthonormal
# null-space basis have a norm above this (exactly zero in exact arithmetic).
DEFAULT_NULL_ROW_TOL = 1e-6


def _links(links: ArrayLike, n_first: int, n_second: int, what: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Check a link list (index, index, sigma_m) and split it into columns."""
    arr = np.asarray(links, dtype=float)
    if arr.size == 0:
        empty = np.zeros(0, dtype=np.intp)
        return empty, empty, np.zeros(0)
    if arr.ndim != 2 or arr.shape[1] != 3:
        raise ValueError(f"{what} must be rows of (index, index, sigma_m); got shape {arr.shape}")
    idx = arr[:, :2]
    if not np.all(np.isfinite(idx)) or np.any(idx != np.round(idx)):
        raise ValueError(f"{what}: node indices must be whole numbers")
    a = idx[:, 0].astype(np.intp)
    b = idx[:, 1].astype(np.intp)
    if np.any((a < 0) | (a >= n_first)) or np.any((b < 0) | (b >= n_second)):
        raise ValueError(f"{what}: node index out of range")
    sigma = arr[:, 2]
    if not np.all(np.isfinite(sigma) & (sigma > 0)):
        raise ValueError(f"{what}: sigma_m must be finite and > 0")
    return a, b, sigma


def _unit_and_weight(diff: np.ndarray, sigma: np.ndarray, what: str) -> np.ndarray:
    """(L, 2, 2) information blocks (1/sigma^2) u u^T for the vectors `diff`."""
    dist = np.hypot(diff[:, 0], diff[:, 1])
    if np.any(dist == 0.0):
        # |x_i - x_j| has no gradient when the two nodes coincide.
        raise ValueError(f"{what}: two ranging nodes at the same position; the range direction is undefined")
    u = diff / dist[:, None]
    return (u[:, :, None] * u[:, None, :]) / (sigma**2)[:, None, None]


def fisher_information(
    agent_xy: ArrayLike,
    anchor_xy: ArrayLike,
    anchor_links: ArrayLike,
    agent_links: ArrayLike,
) -> np.ndarray:
    """Fisher information (2N, 2N) of the agent positions from range measurements.

    agent_xy:     (N, 2) agent positions (the point the bound is taken at).
    anchor_xy:    (A, 2) anchor positions (known).
    anchor_links: rows (agent_index, anchor_index, sigma_m).
    agent_links:  rows (agent_index_i, agent_index_j, sigma_m), i != j.

    Agent i occupies rows/columns 2i (x) and 2i+1 (y).  Every row is one
    measurement: a pair that ranged twice gets twice the information.
    """
    agents = np.asarray(agent_xy, dtype=float).reshape(-1, 2)
    anchors = np.asarray(anchor_xy, dtype=float).reshape(-1, 2)
    n = agents.shape[0]
    J = np.zeros((n, 2, n, 2))

    ag, an, sig = _links(anchor_links, n, anchors.shape[0], "anchor_links")
    if ag.size:
        blocks = _unit_and_weight(agents[ag] - anchors[an], sig, "anchor_links")
        # J[i, :, i, :] += block; add.at so that repeated agents accumulate.
        np.add.at(J, (ag, slice(None), ag, slice(None)), blocks)

    i, j, sig = _links(agent_links, n, n, "agent_links")
    if i.size:
        if np.any(i == j):
            raise ValueError("agent_links: an agent cannot range to itself")
        C = _unit_and_weight(agents[i] - agents[j], sig, "agent_links")
        np.add.at(J, (i, slice(None), i, slice(None)), C)
        np.add.at(J, (j, slice(None), j, slice(None)), C)
        np.add.at(J, (i, slice(None), j, slice(None)), -C)
        np.add.at(J, (j, slice(None), i, slice(None)), -C)

    return J.reshape(2 * n, 2 * n)


def position_error_bound(
    J: ArrayLike,
    *,
    eig_rel_tol: float = DEFAULT_EIG_REL_TOL,
    null_row_tol: float = DEFAULT_NULL_ROW_TOL,
) -> np.ndarray:
    """Per-agent PEB (N,) in metres: sqrt(trace of agent i's 2x2 block of J^-1).

    J may be singular (an agent with fewer than two independent ranges, a
    cluster of agents tied to fewer anchors than a rigid fix needs).  Why the
    split below is right: for a singular Fisher matrix, an unbiased estimator
    of the scalar e^T theta with finite variance exists only if e lies in the
    range of J, and then its bound is e^T J^+ e (Stoica and Marzetta,
    "Parameter estimation problems with singular information matrices",
    IEEE Trans. SP 49(1), 2001).  range(J) is the orthogonal complement of
    null(J), so the coordinate selector e_k lies in range(J) exactly when row
    k of an orthonormal null-space basis is zero.  Hence:

    - agent i's two rows of the null basis are non-zero -> some direction of
      its position is not identifiable -> PEB = +inf;
    - otherwise PEB_i^2 = [J^+]_{2i,2i} + [J^+]_{2i+1,2i+1}, which is what an
      ordinary inverse gives when J is regular.

    Both come from one symmetric eigen-decomposition; eigenvalues at or below
    eig_rel_tol times the largest count as null.
    """
    J = np.asarray(J, dtype=float)
    if J.ndim != 2 or J.shape[0] != J.shape[1] or J.shape[0] % 2:
        raise ValueError(f"J must be a square (2N, 2N) matrix; got shape {J.shape}")
    if not np.all(np.isfinite(J)):
        raise ValueError("J must be finite")
    n = J.shape[0] // 2
    if n == 0:
        return np.zeros(0)

    w, V = np.linalg.eigh(0.5 * (J + J.T))
    scale = float(np.max(np.abs(w)))
    if scale == 0.0:
        return np.full(n, np.inf)  # no information at all
    tol = eig_rel_tol * scale
    if w[0] < -tol:
        raise ValueError("J is not positive semi-definite; not a Fisher information matrix")
    null = w <= tol

    # Diagonal of the pseudo-inverse: sum_k V[r, k]^2 / w_k over non-null k.
    V_r = V[:, ~null]
    diag = (V_r**2) @ (1.0 / w[~null])
    peb = np.sqrt(diag.reshape(n, 2).sum(axis=1))

    if np.any(null):
        V_0 = V[:, null].reshape(n, 2, -1)
        row_norm = np.sqrt(np.sum(V_0**2, axis=(1, 2)))
        peb[row_norm > null_row_tol] = np.inf
    return peb


def _epoch(scenario: Scenario, t_s: float | None) -> float:
    """The epoch to bound: t_s, or the only epoch the scenario has."""
    if t_s is not None:
        return float(t_s)
    epochs = scenario.ranges.epochs()
    if len(epochs) == 0:
        epochs = np.unique(scenario.truth.t_s)  # no ranges: the truth's epoch
    if len(epochs) != 1:
        raise ValueError(f"scenario has {len(epochs)} epochs; pass t_s to choose one")
    return float(epochs[0])


def network_bounds(scenario: Scenario, t_s: float | None = None) -> dict[str, Any]:
    """Cooperative and anchors-only PEB of every agent at one epoch.

    Uses the true positions at epoch t_s (default: the scenario's only epoch)
    and the range rows measured at that epoch: every anchor-agent and
    agent-agent row is one measurement with sigma = Site.ranging.sigma_m +
    sigma_per_m * true distance.  Anchor-anchor rows say nothing about
    agents and are skipped.  The anchors-only bound drops the agent-agent
    rows.

    Returns a dict:
      t_s, agent_ids (list, the scenario's order),
      peb_m (N,), peb_anchors_only_m (N,)  -- +inf where not identifiable,
      n_anchor_links, n_agent_links (rows used).
    Raises ValueError when the scenario has no truth, a node lacks a true
    position at that epoch, or a row names an unknown node.
    """
    if scenario.truth is None:
        raise ValueError("network_bounds needs true positions; this scenario has no truth")
    t = _epoch(scenario, t_s)

    truth = scenario.truth.at(t)
    missing = [a for a in scenario.agent_ids if a not in truth]
    if missing:
        raise ValueError(f"no true position at t_s={t} for agent(s) {', '.join(missing[:5])}")
    agent_xy = np.array([truth[a] for a in scenario.agent_ids], dtype=float).reshape(-1, 2)
    anchor_xy = np.asarray(scenario.anchor_xy_m, dtype=float).reshape(-1, 2)
    agent_index = {a: k for k, a in enumerate(scenario.agent_ids)}
    anchor_index = {a: k for k, a in enumerate(scenario.anchor_ids)}
    ranging = scenario.site.ranging

    anchor_rows: list[tuple[int, int]] = []
    agent_rows: list[tuple[int, int]] = []
    table = scenario.ranges
    for r in np.flatnonzero(np.asarray(table.t_s) == t):
        a, b = table.node_a[r], table.node_b[r]
        for node in (a, b):
            if node not in agent_index and node not in anchor_index:
                raise ValueError(f"range row {r} at t_s={t} names unknown node '{node}'")
        if a in agent_index and b in agent_index:
            agent_rows.append((agent_index[a], agent_index[b]))
        elif a in agent_index:
            anchor_rows.append((agent_index[a], anchor_index[b]))
        elif b in agent_index:
            anchor_rows.append((agent_index[b], anchor_index[a]))

    def with_sigma(rows: list[tuple[int, int]], far: np.ndarray) -> np.ndarray:
        if not rows:
            return np.zeros((0, 3))
        idx = np.array(rows, dtype=np.intp)
        dist = np.hypot(*(agent_xy[idx[:, 0]] - far[idx[:, 1]]).T)
        sigma = ranging.sigma_m + ranging.sigma_per_m * dist
        return np.column_stack([idx.astype(float), sigma])

    anchor_links = with_sigma(anchor_rows, anchor_xy)
    agent_links = with_sigma(agent_rows, agent_xy)

    J_anchor = fisher_information(agent_xy, anchor_xy, anchor_links, [])
    J_coop = J_anchor + fisher_information(agent_xy, anchor_xy, [], agent_links)
    return {
        "t_s": t,
        "agent_ids": list(scenario.agent_ids),
        "peb_m": position_error_bound(J_coop),
        "peb_anchors_only_m": position_error_bound(J_anchor),
        "n_anchor_links": len(anchor_rows),
        "n_agent_links": len(agent_rows),
    }
