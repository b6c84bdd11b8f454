"""The fixed-point C core as an engine for the driver.

Every agent is a `pfx_node_t` owned by this object.  On the air (the
default) every broadcast crosses from node to node as the bytes of a belief
frame (pfx_wire_encode / pfx_wire_decode, docs/wire-format.md), and a node
keeps exactly the quantised belief its neighbours decode; a frame the decoder
refuses (check sequence, bad field) is counted and not used.  With air=False
broadcasts are handed over as `pfx_belief_t` structs (the core against the
float twin, without the air's quantisation).  SI floats become Q formats
here, at the boundary, and nowhere else; C status codes become CoreError.
"""

from __future__ import annotations

import math

import numpy as np

from ..engine import Inbound, NodeReport
from ..reference.mixture import Mixture
from ..reference.node import BlockedModel
from ..reference.params import EstimatorParams
from . import CoreError, Status
from .quantise import to_q

LEN_FRAC = 10  # pfx_len_q10_t: metres
AREA_FRAC = 20  # pfx_area_q20_t: square metres
LOG2_FRAC = 16  # pfx_log2_q16_t
RATIO_FRAC = 16  # pfx_ratio_q16_t
FRAC_FRAC = 30  # pfx_frac_q30_t

LN2 = math.log(2.0)
DEFAULT_MAX_RANGE_M = 10_000.0  # above any radio range; the scenario reader rejects absurd ranges first


def _lib():
    from ._pfx import ffi, lib

    return ffi, lib


def check(status: int, what: str) -> None:
    if status != Status.OK:
        raise CoreError(status, what)


def _q(x: float, frac_bits: int) -> int:
    """quantise.to_q for a finite float, without Fractions (hot path).

    x * 2^f is exact in binary floating point, and so are floor and the
    difference, so this rounds exactly as to_q does (nearest, ties up).
    """
    v = x * (1 << frac_bits)
    if not math.isfinite(v) or abs(v) >= 2**31:
        return to_q(x, frac_bits)  # saturation and refusals as the reference does them
    fl = math.floor(v)
    return fl + (1 if v - fl >= 0.5 else 0)


def len_q(x_m: float) -> int:
    return _q(float(x_m), LEN_FRAC)


def area_q(x_m2: float) -> int:
    return _q(float(x_m2), AREA_FRAC)


def c_params(params: EstimatorParams, blocked: BlockedModel, max_range_m: float):
    """EstimatorParams (SI floats) as a pfx_params_t (Q formats)."""
    ffi, lib = _lib()
    p = ffi.new("pfx_params_t *")
    lib.pfx_params_default(p)
    p.max_components = params.max_components
    p.working_cap = params.working_cap
    p.candidate_cap = params.candidate_cap
    p.broad_max_arcs = params.broad_max_arcs
    p.iekf_iterations = params.iekf_iterations
    p.ring_arc_spacing = len_q(params.ring_arc_spacing_m)
    p.arc_tangential_ratio = to_q(params.arc_tangential_ratio, FRAC_FRAC)
    p.broad_window_sigmas = to_q(params.broad_window_sigmas, RATIO_FRAC)
    p.broad_sagitta_ratio = to_q(params.broad_sagitta_ratio, RATIO_FRAC)
    p.merge_gate = to_q(params.merge_gate_sigma2, RATIO_FRAC)
    p.prune_log2_ratio = to_q(params.prune_log_ratio / LN2, LOG2_FRAC)
    p.broadcast_inflation = to_q(params.broadcast_inflation, RATIO_FRAC)
    p.censor_spread = len_q(params.censor_spread_m)
    p.mode_gate = to_q(params.mode_gate_sigma2, RATIO_FRAC)
    p.mode_min_weight = to_q(params.mode_min_weight, FRAC_FRAC)
    p.blocked_weight = to_q(blocked.weight, FRAC_FRAC)
    p.blocked_bias = len_q(blocked.ring_offset_m)
    p.max_range = len_q(max_range_m)
    p.product_gate = to_q(params.product_gate_sigma2, RATIO_FRAC)
    p.directional_spread = 1 if params.directional_spread else 0
    check(lib.pfx_params_check(p), "pfx_params_check")
    return p


def belief_to_mixture(belief) -> Mixture | None:
    """A pfx_belief_t as a float64 Mixture (natural-log weights, SI units); None when empty."""
    n = int(belief.count)
    if n == 0:
        return None
    comps = [belief.comp[k] for k in range(n)]
    logw = np.array([c.log2w for c in comps], float) * (LN2 / 2**LOG2_FRAC)
    mean = np.array([[c.x, c.y] for c in comps], float) / 2**LEN_FRAC
    cov = np.array([[[c.pxx, c.pxy], [c.pxy, c.pyy]] for c in comps], float) / 2**AREA_FRAC
    return Mixture(logw, mean, cov)


def mixture_to_belief(m: Mixture | None):
    """A float64 Mixture as a pfx_belief_t (for tests and tools)."""
    ffi, lib = _lib()
    b = ffi.new("pfx_belief_t *")
    if m is None:
        return b
    if len(m) > lib.PFX_MAX_COMPONENTS:
        raise ValueError(f"{len(m)} components; the core holds at most {lib.PFX_MAX_COMPONENTS}")
    b.count = len(m)
    for k in range(len(m)):
        c = b.comp[k]
        c.log2w = to_q(float(m.logw[k]) / LN2, LOG2_FRAC)
        c.x, c.y = len_q(m.mean[k, 0]), len_q(m.mean[k, 1])
        c.pxx = area_q(m.cov[k, 0, 0])
        c.pxy = area_q(m.cov[k, 0, 1])
        c.pyy = area_q(m.cov[k, 1, 1])
    return b


# Range/sigma conversions remembered between iterations of one epoch (cleared when full).
LINK_CACHE_MAX = 4096

class FixedEngine:
    name = "fixed"

    def __init__(
        self,
        params: EstimatorParams,
        blocked: BlockedModel = BlockedModel(),
        max_range_m: float = DEFAULT_MAX_RANGE_M,
        air: bool = True,
    ):
        self.ffi, self.lib = _lib()
        if params.max_neighbours != self.lib.PFX_MAX_NEIGHBOURS:
            raise ValueError(
                f"max_neighbours={params.max_neighbours}: the core's inbox holds PFX_MAX_NEIGHBOURS="
                f"{self.lib.PFX_MAX_NEIGHBOURS} (a compile-time bound)"
            )
        self.params = params
        self.c_params = c_params(params, blocked, max_range_m)
        self.nodes: dict[str, object] = {}
        self.anchor_msgs: dict[str, object] = {}
        self.inbox = self.ffi.new("pfx_inbox_t *")
        self.workspace = self.ffi.new("pfx_workspace_t *")
        self.component_bytes = self.ffi.sizeof("pfx_component_t")
        self.not_kept = 0  # broadcasts a full inbox did not keep
        self.air = air
        self.frames_rejected = 0  # frames the decoder refused
        self.rejected_by_status: dict[str, int] = {}
        self._frame = self.ffi.new("uint8_t[]", self.lib.PFX_WIRE_MAX_BYTES)
        self._frame_len = self.ffi.new("size_t *")
        self._decoded = self.ffi.new("pfx_belief_t *")
        self._meta = self.ffi.new("pfx_wire_meta_t *")
        self._ids: dict[str, int] = {}
        self._sequence: dict[str, int] = {}
        self._link_q: dict[tuple[float, float], tuple[int, int]] = {}

    def start(self, bounds_m, anchors, agent_ids):
        ffi, lib = self.ffi, self.lib
        bounds = ffi.new("pfx_len_q10_t[4]", [len_q(b) for b in bounds_m])
        self._bounds = bounds  # kept for reset()
        # Sender ids on the air: anchors then agents, in scenario order (u16).
        self._ids = {n: i for i, n in enumerate([*anchors, *agent_ids])}
        self._sequence = {n: 0 for n in self._ids}
        self.nodes = {}
        for a in agent_ids:
            node = ffi.new("pfx_node_t *")
            check(lib.pfx_node_init(node, self.c_params, bounds), f"pfx_node_init({a})")
            self.nodes[a] = node
        self.anchor_msgs = {}
        for a, xy in anchors.items():
            msg = ffi.new("pfx_belief_t *")
            check(lib.pfx_belief_point(msg, len_q(xy[0]), len_q(xy[1])), f"pfx_belief_point({a})")
            self.anchor_msgs[a] = self._encode(a, msg, lib.PFX_WIRE_FLAG_ANCHOR) if self.air else msg

    def reset(self, agent_id: str) -> None:
        """Back to the flat prior over the site: the node re-initialised, as start() left it."""
        check(self.lib.pfx_node_init(self.nodes[agent_id], self.c_params, self._bounds), f"pfx_node_init({agent_id})")

    def _encode(self, sender: str, belief, flags: int = 0) -> bytes:
        seq = self._sequence[sender]
        self._sequence[sender] = (seq + 1) & 0xFF
        meta = self.ffi.new("pfx_wire_meta_t *", {"sender": self._ids[sender], "sequence": seq, "flags": flags})
        status = self.lib.pfx_wire_encode(belief, meta, self._frame, self.lib.PFX_WIRE_MAX_BYTES, self._frame_len)
        check(status, f"pfx_wire_encode({sender})")
        return bytes(self.ffi.buffer(self._frame, self._frame_len[0]))

    def broadcast(self, node_id):
        if node_id in self.anchor_msgs:
            return self.anchor_msgs[node_id]
        out = self.ffi.new("pfx_belief_t *")
        check(self.lib.pfx_node_broadcast(self.nodes[node_id], out), f"pfx_node_broadcast({node_id})")
        if not out.count:
            return None
        return self._encode(node_id, out) if self.air else out

    def message_bytes(self, message) -> int:
        if self.air:
            return len(message)
        # Off the air: the used part of the in-memory struct.
        return 4 + self.component_bytes * int(message.count)

    def _receive(self, frame: bytes):
        """The belief in a frame, or None when the decoder refuses it (counted)."""
        status = self.lib.pfx_wire_decode(frame, len(frame), self._decoded, self._meta)
        if status != Status.OK:
            self.frames_rejected += 1
            name = Status(status).name
            self.rejected_by_status[name] = self.rejected_by_status.get(name, 0) + 1
            return None
        return self._decoded

    def update(self, agent_id, inbox: list[Inbound]):
        lib = self.lib
        lib.pfx_inbox_clear(self.inbox)
        cache = self._link_q
        for m in inbox:
            key = (m.range_m, m.sigma_m)
            q = cache.get(key)
            if q is None:  # links repeat every iteration: convert each once
                if len(cache) >= LINK_CACHE_MAX:  # a long log never repeats a range: keep memory flat
                    cache.clear()
                q = cache[key] = (len_q(m.range_m), len_q(m.sigma_m))
            belief = self._receive(m.message) if self.air else m.message
            if belief is None:
                continue
            status = lib.pfx_inbox_add(self.inbox, belief, q[0], q[1], 1 if m.is_anchor else 0)
            if status == Status.ERR_FULL:
                self.not_kept += 1  # the inbox keeps the most informative PFX_MAX_NEIGHBOURS
                continue
            check(status, f"pfx_inbox_add({agent_id} <- {m.sender})")
        node = self.nodes[agent_id]
        check(lib.pfx_node_update(node, self.inbox, self.workspace), f"pfx_node_update({agent_id})")
        if self.air and node.belief.count:
            # Keep what the neighbours will decode: the air hides no precision.
            check(lib.pfx_wire_quantise(self.ffi.addressof(node, "belief")), f"pfx_wire_quantise({agent_id})")

    def report(self, agent_id) -> NodeReport:
        est = self.ffi.new("pfx_estimate_t *")
        check(self.lib.pfx_node_estimate(self.nodes[agent_id], est), f"pfx_node_estimate({agent_id})")
        mean = np.array([est.x, est.y], float) / 2**LEN_FRAC
        cov = np.array([[est.pxx, est.pxy], [est.pxy, est.pyy]], float) / 2**AREA_FRAC
        return NodeReport(mean, cov, int(est.mode_count), int(est.components), est.mode_weight / 2**FRAC_FRAC)

    def belief(self, agent_id):
        return belief_to_mixture(self.nodes[agent_id].belief)

    def predict(self, agent_id, dt_s, process_var_m2_per_s):
        dt_ms = max(0, int(round(dt_s * 1000.0)))
        check(
            self.lib.pfx_node_predict(self.nodes[agent_id], dt_ms, area_q(process_var_m2_per_s)),
            f"pfx_node_predict({agent_id})",
        )
