"""The centralised estimate (`--engine central`): maximum likelihood over all agents at once.

How it fits the engine protocol: it runs the float twin inside, message for
message, so the driver's schedule and censoring are the twin's.  What it adds
is the report: after every iteration, at the first report call, it solves the
joint problem of the epoch,

    minimise  sum over links (r_ij - ||x_i - x_j||)^2 / sigma_ij^2

over every agent position together (anchors fixed), with
scipy.optimize.least_squares started from the twin's estimates of that
iteration.  With the robust likelihood on (a blocked share > 0) the loss is
soft_l1 with f_scale 2 (normalised residuals beyond about 2 sigmas count
linearly); otherwise plain least squares.

Links come from the inboxes: every broadcast carries its sender's id and is
delivered with the range, so a censored twin broadcast still travels as an
empty token and the solve sees every link the channel delivered.

Covariance: the Gauss-Newton (J^T J)^-1 at the solution (J of the normalised
residuals, without the robust loss's weights).  An agent the ranges cannot fix
(it touches the null space of J^T J, as harness.bounds decides) keeps the
twin's estimate and covariance.

Bytes on the air are the twin's broadcasts; shipping the ranges to a solver
is not counted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares
from scipy.sparse import csr_matrix

from ..engine import Inbound, NodeReport
from ..reference import FloatEngine
from ..reference.node import BlockedModel
from ..reference.params import EstimatorParams

ROBUST_F_SCALE = 2.0  # soft_l1 knee, in range standard deviations
NULL_REL_TOL = 1e-9  # eigenvalues of J^T J at or below this share of the largest are null (as harness.bounds)
NULL_ROW_TOL = 1e-6


@dataclass(frozen=True)
class CentralMessage:
    """What crosses the driver: the sender, and the twin's broadcast (None when censored)."""

    sender: str
    twin: object | None


@dataclass
class Solution:
    mean: np.ndarray  # (N, 2)
    cov: np.ndarray  # (N, 2, 2)
    solved: np.ndarray  # (N,) bool: the joint solve placed this agent
    cost: float
    nfev: int


def solve_positions(
    x0: np.ndarray,
    anchor_xy: np.ndarray,
    anchor_links: np.ndarray,
    agent_links: np.ndarray,
    robust: bool = False,
) -> Solution:
    """Joint maximum-likelihood positions of N agents.

    x0: (N, 2) start.  anchor_links rows (agent, anchor, range_m, sigma_m);
    agent_links rows (agent_i, agent_j, range_m, sigma_m).
    Agents with no link keep x0 and are not solved.
    """
    n = x0.shape[0]
    al = np.asarray(anchor_links, float).reshape(-1, 4)
    gl = np.asarray(agent_links, float).reshape(-1, 4)
    ai, ak = al[:, 0].astype(int), al[:, 1].astype(int)
    gi, gj = gl[:, 0].astype(int), gl[:, 1].astype(int)
    ra, sa = al[:, 2], al[:, 3]
    rg, sg = gl[:, 2], gl[:, 3]
    na, ng = len(ai), len(gi)

    def unit(x):
        xy = x.reshape(n, 2)
        da = xy[ai] - anchor_xy[ak]
        dg = xy[gi] - xy[gj]
        la = np.maximum(np.hypot(da[:, 0], da[:, 1]), 1e-12)
        lg = np.maximum(np.hypot(dg[:, 0], dg[:, 1]), 1e-12)
        return da, dg, la, lg

    def fun(x):
        _, _, la, lg = unit(x)
        return np.concatenate([(ra - la) / sa, (rg - lg) / sg])

    rows_a = np.arange(na)
    rows_g = na + np.arange(ng)
    # Sparse Jacobian: each residual touches one or two agents (2 or 4 entries).
    j_rows = np.concatenate([rows_a, rows_a, rows_g, rows_g, rows_g, rows_g])
    j_cols = np.concatenate([2 * ai, 2 * ai + 1, 2 * gi, 2 * gi + 1, 2 * gj, 2 * gj + 1])

    def jac(x):
        da, dg, la, lg = unit(x)
        ua = -da / (la * sa)[:, None]
        ug = -dg / (lg * sg)[:, None]
        vals = np.concatenate([ua[:, 0], ua[:, 1], ug[:, 0], ug[:, 1], -ug[:, 0], -ug[:, 1]])
        return csr_matrix((vals, (j_rows, j_cols)), shape=(na + ng, 2 * n))

    linked = np.zeros(n, bool)
    linked[ai] = linked[gi] = linked[gj] = True
    if na + ng == 0:
        return Solution(x0.copy(), np.full((n, 2, 2), np.nan), linked, 0.0, 0)
    loss = "soft_l1" if robust else "linear"
    res = least_squares(
        fun, x0.ravel(), jac=jac, method="trf", tr_solver="lsmr", loss=loss, xtol=1e-10, ftol=1e-10, f_scale=ROBUST_F_SCALE if robust else 1.0
    )
    J = jac(res.x)
    cov, fixed = gauss_newton_covariance((J.T @ J).toarray())
    mean = res.x.reshape(n, 2)
    return Solution(mean, cov, fixed & linked, float(res.cost), int(res.nfev))


def gauss_newton_covariance(JtJ: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-agent 2x2 blocks of (J^T J)^-1 (pseudo-inverse) and which agents are fixed by the data."""
    n = JtJ.shape[0] // 2
    w, V = np.linalg.eigh(0.5 * (JtJ + JtJ.T))
    scale = float(np.max(np.abs(w))) if w.size else 0.0
    if scale == 0.0:
        return np.full((n, 2, 2), np.nan), np.zeros(n, bool)
    null = w <= NULL_REL_TOL * scale
    Vr = V[:, ~null]
    inv = (Vr / w[~null]) @ Vr.T
    idx = np.arange(n)
    cov = np.stack(
        [inv[2 * idx, 2 * idx], inv[2 * idx, 2 * idx + 1], inv[2 * idx + 1, 2 * idx], inv[2 * idx + 1, 2 * idx + 1]], axis=1
    ).reshape(n, 2, 2)
    fixed = np.ones(n, bool)
    if null.any():
        rows = np.sqrt(np.sum(V[:, null].reshape(n, 2, -1) ** 2, axis=(1, 2)))
        fixed = rows <= NULL_ROW_TOL
    return cov, fixed


class CentralEngine:
    name = "central"

    def __init__(self, params: EstimatorParams, blocked: BlockedModel = BlockedModel()):
        self.twin = FloatEngine(params, blocked)
        self.robust = blocked.weight > 0.0
        self.agent_ids: list[str] = []
        self.anchor_xy: dict[str, np.ndarray] = {}
        self.links: dict[tuple[str, str], tuple[float, float]] = {}
        self.solution: Solution | None = None
        self.solves = 0

    def start(self, bounds_m, anchors, agent_ids):
        self.twin.start(bounds_m, anchors, agent_ids)
        self.agent_ids = list(agent_ids)
        self.index = {a: i for i, a in enumerate(self.agent_ids)}
        self.anchor_xy = {a: np.asarray(xy, float) for a, xy in anchors.items()}
        self.anchor_index = {a: k for k, a in enumerate(self.anchor_xy)}
        self.links = {}
        self.solution = None

    def broadcast(self, node_id):
        if node_id in self.anchor_xy:
            self.links = {}  # the driver asks the anchors first thing in every epoch
            self.solution = None
        return CentralMessage(node_id, self.twin.broadcast(node_id))

    def message_bytes(self, message: CentralMessage) -> int:
        return 0 if message.twin is None else self.twin.message_bytes(message.twin)

    def update(self, agent_id, inbox: list[Inbound]):
        for m in inbox:
            key = (agent_id, m.sender) if agent_id <= m.sender else (m.sender, agent_id)
            self.links[key] = (m.range_m, m.sigma_m)
        twin_inbox = [
            Inbound(m.sender, m.message.twin, m.range_m, m.sigma_m, m.is_anchor) for m in inbox if m.message.twin is not None
        ]
        self.twin.update(agent_id, twin_inbox)
        self.solution = None

    def _solve(self) -> Solution:
        x0 = np.array([self.twin.report(a).mean for a in self.agent_ids]).reshape(-1, 2)
        anchor_rows, agent_rows = [], []
        for (a, b), (r, s) in self.links.items():
            if a in self.index and b in self.index:
                agent_rows.append((self.index[a], self.index[b], r, s))
            elif a in self.index:
                anchor_rows.append((self.index[a], self.anchor_index[b], r, s))
            elif b in self.index:
                anchor_rows.append((self.index[b], self.anchor_index[a], r, s))
        anchor_xy = np.array(list(self.anchor_xy.values())).reshape(-1, 2)
        self.solves += 1
        return solve_positions(x0, anchor_xy, np.array(anchor_rows), np.array(agent_rows), self.robust)

    def report(self, agent_id) -> NodeReport:
        twin = self.twin.report(agent_id)
        if self.solution is None:
            self.solution = self._solve()
        i = self.index[agent_id]
        if not self.solution.solved[i]:
            return twin
        return NodeReport(self.solution.mean[i].copy(), self.solution.cov[i].copy(), 1, twin.components, 1.0)

    def belief(self, agent_id):
        """The twin's belief (the joint solve has no per-agent mixture)."""
        return self.twin.belief(agent_id)

    def predict(self, agent_id, dt_s, process_var_m2_per_s):
        self.links = {}  # called between epochs: the next solve uses the next epoch's links only
        self.solution = None
        self.twin.predict(agent_id, dt_s, process_var_m2_per_s)

    def reset(self, agent_id):
        """The twin's agent back at the prior (the joint solve keeps no per-agent state)."""
        self.twin.reset(agent_id)
        self.solution = None
