"""One estimator iteration on the emulated tag, bit for bit against the host.

The node, inbox and workspace are built with the host (cffi) API and copied
byte for byte into the emulator's RAM (the layouts agree: test_build.py
checks the target's sizeof/offsetof table against cffi's).  After each call
the node's bytes must be identical on both sides.
"""

from __future__ import annotations

import math

import pytest

from .support import needs_cross, target_build, target_emulator

pytestmark = needs_cross

SITE_M = 20.0
TAG_M = (7.0, 12.0)  # the true position the ranges are measured from
ANCHORS_M = [(0.0, 0.0), (20.0, 0.0), (0.0, 20.0), (20.0, 20.0)]
SIGMA_M = 0.1


def q(v: float, frac: int) -> int:
    return math.floor(v * (1 << frac) + 0.5)


def host_inputs():
    """A node over a 20 m square site and an inbox of four anchors and one
    two-mode neighbour belief, with exact ranges to TAG_M."""
    from peerfix.core._pfx import ffi, lib

    params = ffi.new("pfx_params_t *")
    lib.pfx_params_default(params)
    bounds = ffi.new("pfx_len_q10_t[4]", [0, 0, q(SITE_M, 10), q(SITE_M, 10)])
    node = ffi.new("pfx_node_t *")
    assert lib.pfx_node_init(node, params, bounds) == 0
    inbox = ffi.new("pfx_inbox_t *")
    for ax, ay in ANCHORS_M:
        belief = ffi.new("pfx_belief_t *")
        assert lib.pfx_belief_point(belief, q(ax, 10), q(ay, 10)) == 0
        r = math.hypot(TAG_M[0] - ax, TAG_M[1] - ay)
        assert lib.pfx_inbox_add(inbox, belief, q(r, 10), q(SIGMA_M, 10), 1) == 0
    neighbour = ffi.new("pfx_belief_t *")
    neighbour.count = 2
    for comp, (w, x, y, var) in zip(neighbour.comp, [(0.7, 12.0, 9.0, 0.3), (0.3, 4.0, 16.0, 2.0)]):
        comp.log2w, comp.x, comp.y = q(math.log2(w), 16), q(x, 10), q(y, 10)
        comp.pxx, comp.pxy, comp.pyy = q(var, 20), 0, q(var, 20)
    r = math.hypot(TAG_M[0] - 12.0, TAG_M[1] - 9.0)
    assert lib.pfx_inbox_add(inbox, neighbour, q(r, 10), q(SIGMA_M, 10), 0) == 0
    return node, inbox


@pytest.fixture(scope="module")
def static_stack():
    from peerfix.budget.stack import analyse

    out = {}
    for name in ("cortex-m4-O2", "cortex-m0plus-O2"):
        r = target_build(name)
        out[name] = analyse(r.elf, r.su_files, r.ci_files, r.public_functions)
    return out


def test_node_iteration_bit_exact(config_name, static_stack):
    from peerfix.core._pfx import ffi, lib

    node, inbox = host_inputs()
    em = target_emulator(config_name)
    em.reset_scratch()
    p_node = em.alloc_bytes(bytes(ffi.buffer(node)))
    p_inbox = em.alloc_bytes(bytes(ffi.buffer(inbox)))
    p_ws = em.alloc(ffi.sizeof("pfx_workspace_t"))
    p_out = em.alloc(ffi.sizeof("pfx_belief_t"))
    p_est = em.alloc(ffi.sizeof("pfx_estimate_t"))
    ws = ffi.new("pfx_workspace_t *")
    node_size = ffi.sizeof("pfx_node_t")
    report = static_stack[config_name]

    def same_node() -> None:
        assert em.read(p_node, node_size) == bytes(ffi.buffer(node))

    def run(name: str, host_status: int, *args: int, argtypes: tuple[str, ...]):
        res = em.call(name, *args, argtypes=argtypes, restype="i32")
        assert res.value == host_status, name
        assert res.stack_bytes <= report.entries[name].total, (name, res.stack_bytes)
        return res

    # 1. the first update: first ring from an anchor, then the rest
    update = run("pfx_node_update", lib.pfx_node_update(node, inbox, ws), p_node, p_inbox, p_ws,
                 argtypes=("ptr", "ptr", "ptr"))  # fmt: skip
    assert update.value == 0 and node.belief.count >= 1
    same_node()
    # the belief lands near the tag
    assert math.hypot(node.belief.comp[0].x / 1024 - TAG_M[0], node.belief.comp[0].y / 1024 - TAG_M[1]) < 0.5
    assert update.instructions > 10_000 and update.cycles > update.instructions
    assert update.stack_bytes > 100

    # 2. what it would broadcast, and its point estimate
    out, est = ffi.new("pfx_belief_t *"), ffi.new("pfx_estimate_t *")
    run("pfx_node_broadcast", lib.pfx_node_broadcast(node, out), p_node, p_out, argtypes=("ptr", "ptr"))
    assert em.read(p_out, ffi.sizeof("pfx_belief_t")) == bytes(ffi.buffer(out))
    run("pfx_node_estimate", lib.pfx_node_estimate(node, est), p_node, p_est, argtypes=("ptr", "ptr"))
    assert em.read(p_est, ffi.sizeof("pfx_estimate_t")) == bytes(ffi.buffer(est))

    # 3. tracking: predict 1.5 s ahead, then update again from that prior
    q_per_s = q(0.02, 20)
    run("pfx_node_predict", lib.pfx_node_predict(node, 1500, q_per_s), p_node, 1500, q_per_s,
        argtypes=("ptr", "u32", "i32"))  # fmt: skip
    same_node()
    run("pfx_node_update", lib.pfx_node_update(node, inbox, ws), p_node, p_inbox, p_ws,
        argtypes=("ptr", "ptr", "ptr"))  # fmt: skip
    same_node()


def test_update_costs_more_on_m0plus():
    """Same input, same result; the M0+ (no 32x32->64 multiply, no divide)
    executes several times the M4's instructions."""
    from peerfix.core._pfx import ffi

    counts = {}
    for name in ("cortex-m4-O2", "cortex-m0plus-O2"):
        node, inbox = host_inputs()
        em = target_emulator(name)
        em.reset_scratch()
        args = (em.alloc_bytes(bytes(ffi.buffer(node))), em.alloc_bytes(bytes(ffi.buffer(inbox))),
                em.alloc(ffi.sizeof("pfx_workspace_t")))  # fmt: skip
        res = em.call("pfx_node_update", *args, argtypes=("ptr",) * 3, restype="i32")
        counts[name] = res
        assert res.value == 0
    m4, m0 = counts["cortex-m4-O2"], counts["cortex-m0plus-O2"]
    assert m0.instructions > 2 * m4.instructions
    assert "__aeabi_lmul" in m0.per_function or "__muldi3" in m0.per_function
