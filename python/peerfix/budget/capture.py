"""Real inputs of the core's entry points, recorded on the host, replayed on the target.

Recording: :class:`CaptureEngine` is the fixed engine with its cffi ``lib``
behind a recording proxy.  Every call of an entry point in
:data:`ENTRY_POINTS` made while a scenario runs is stored as a
:class:`CapturedCall`: the exact bytes of every struct or buffer the
function is given (before the call), its scalar arguments, and what the
host left behind (the bytes of every output buffer after the call, and the
status).  A scratch argument (the update's workspace, "contents meaningless
between calls") is recorded by size only: the target gets it zeroed, so a
result that depended on stale scratch would show up as a mismatch.

Sampling bounds the run time: identical inputs are kept once; each
configuration bucket (the update: inbox count, K and whether it starts
from a tracking prior; adding to the inbox: its count after the call; the
node calls: K; the frame calls: components in the belief) keeps a seeded
reservoir sample of what it saw, and :func:`select` takes calls
round-robin over the buckets (the two headline buckets, 12 heard
broadcasts at K = 4 from the uniform and from a tracking prior, first).  The
same seed gives the same calls, and a smaller selection is a subset of a
larger one.

Scenario runs (:data:`RUNS`): open field at K = 1..8 and more seeds at
K = 4, cold store and mine drift at three K each; the open-field runs at
K = 4, the cold-store and the mine-drift runs get a second epoch (the same
ranges one second later), so the engine predicts and then updates from a
tracking prior (the headline configuration is sampled from both priors).  More
predictions come from the host library on captured nodes at a few time
steps (single-epoch runs never predict).

Replay: :func:`replay` copies a call's bytes into the emulator's RAM, calls
the same entry point and compares every output byte, every input buffer
(unchanged) and the status with the host's.
"""

from __future__ import annotations

import dataclasses
import gc
import hashlib
import random
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from peerfix.core._pfx import ffi, lib
from peerfix.core.engine_fixed import FixedEngine, area_q
from peerfix.reference.params import ROBUST_ITERATIONS

# Entry points of a tag's firmware loop, in report order.
ENTRY_POINTS = (
    "pfx_node_update",
    "pfx_inbox_add",
    "pfx_node_predict",
    "pfx_node_broadcast",
    "pfx_node_estimate",
    "pfx_wire_encode",
    "pfx_wire_decode",
    "pfx_wire_quantise",
)

# Argument kinds per entry point: "in" (read only: must be unchanged after
# the call), "inout", "out" (read back and compared), "scratch" (size only),
# "u32" / "i32" (scalars).  "out:size_t" is a size_t out-parameter, 4 bytes
# on the target whatever the host's width.
ARG_KINDS: dict[str, tuple[str, ...]] = {
    "pfx_node_update": ("inout", "in", "scratch"),
    "pfx_inbox_add": ("inout", "in", "i32", "i32", "u32"),
    "pfx_node_predict": ("inout", "u32", "i32"),
    "pfx_node_broadcast": ("in", "out"),
    "pfx_node_estimate": ("in", "out"),
    "pfx_wire_encode": ("in", "in", "out", "u32", "out:size_t"),
    "pfx_wire_decode": ("in", "u32", "out", "out"),
    "pfx_wire_quantise": ("inout",),
}
# Byte buffers (uint8_t *) are sized by a scalar argument: {buffer index: size index}.
BYTE_SIZE_ARG: dict[str, dict[int, int]] = {
    "pfx_wire_encode": {2: 3},  # buf[cap]
    "pfx_wire_decode": {0: 1},  # buf[len]
}

# The headline configuration: 12 heard broadcasts, K = 4 (the figure), from either prior.
# An update's bucket also says where it starts: tracking 0 is the uniform prior (power-up, or a
# static network whose every belief propagation iteration starts over from it: acquisition),
# tracking 1 a tracking prior (last epoch's belief, predicted: a tag's steady state).
HEADLINE = (("neighbours", 12), ("K", 4))
HEADLINE_BUCKETS = ((*HEADLINE, ("tracking", 0)), (*HEADLINE, ("tracking", 1)))
PREDICT_DT_MS = (100, 1000, 5000)  # time steps of the extra predictions
PREDICT_Q_M2_PER_S = 1.0  # process noise of the runner's default random walk
POOL_PER_BUCKET = 1000  # distinct calls kept per (entry point, bucket)
POOL_SMALLER = {"pfx_inbox_add": 200}  # 17 buckets of 7 kB records: enough for 1000 calls, bounded memory


def _bucket_update(args) -> tuple[tuple[str, int], ...]:
    node = args[0]
    return (("neighbours", int(args[1].count)), ("K", int(node.params.max_components)),
            ("tracking", int(node.prior.count > 0)))


def is_headline(call: "CapturedCall") -> bool:
    """An update in the headline configuration, from either prior."""
    return call.entry == "pfx_node_update" and call.bucket[: len(HEADLINE)] == HEADLINE


def from_tracking_prior(call: "CapturedCall") -> bool:
    """An update that starts from a tracking prior (its bucket's tracking flag)."""
    return call.config.get("tracking") == 1


def _bucket_node(args) -> tuple[tuple[str, int], ...]:
    return (("K", int(args[0].params.max_components)),)


def _bucket_belief(index: int) -> Callable:
    return lambda args: (("components", int(args[index].count)),)


# Configuration of a call, read from its arguments after the host call.
BUCKETS: dict[str, Callable] = {
    "pfx_node_update": _bucket_update,
    "pfx_inbox_add": lambda args: (("heard", int(args[0].count)),),  # inbox count after the call
    "pfx_node_predict": _bucket_node,
    "pfx_node_broadcast": _bucket_node,
    "pfx_node_estimate": _bucket_node,
    "pfx_wire_encode": _bucket_belief(0),
    "pfx_wire_decode": _bucket_belief(2),
    "pfx_wire_quantise": _bucket_belief(0),
}


@dataclass(frozen=True)
class Arg:
    kind: str  # see ARG_KINDS
    data: bytes = b""  # pointer kinds: the bytes before the call
    value: int = 0  # scalars
    size: int = 0  # scratch: bytes to allocate

    @property
    def is_pointer(self) -> bool:
        return self.kind not in ("u32", "i32")

    @property
    def is_output(self) -> bool:
        return self.kind in ("inout", "out")


@dataclass(frozen=True)
class CapturedCall:
    entry: str
    bucket: tuple[tuple[str, int], ...]  # e.g. (("neighbours", 12), ("K", 4))
    args: tuple[Arg, ...]
    status: int  # the host's return value
    outputs: tuple[bytes, ...]  # the host's bytes after the call of each inout/out argument, in order
    source: str  # the run it came from

    @property
    def config(self) -> dict[str, int]:
        return dict(self.bucket)

    def corrupted(self, output: int = 0, offset: int = 0) -> "CapturedCall":
        """This call with one byte of one expected output flipped (a check that can fail)."""
        data = bytearray(self.outputs[output])
        data[offset] ^= 0xFF
        outs = list(self.outputs)
        outs[output] = bytes(data)
        return dataclasses.replace(self, outputs=tuple(outs), source=self.source + " (corrupted)")


@dataclass(frozen=True)
class Run:
    """One scenario run of the fixed engine on the air."""

    preset: str
    seed: int
    K: int
    epochs: int = 1  # > 1: the same ranges again every second (static tags, tracking prior)
    iterations: int = 4
    robust: bool = False  # the robust preset (peerfix.reference.params.robust_preset) ...
    blocked_probability: float | None = None  # ... on a site with this blocked-path share (bias mean 1 m)
    overrides: tuple[tuple[str, object], ...] = ()  # estimator settings set by hand (`peerfix budget --param`)

    @property
    def name(self) -> str:
        name = f"{self.preset} seed {self.seed} K={self.K}" + (f" {self.epochs} epochs" if self.epochs > 1 else "")
        if self.blocked_probability is not None:
            name += f" {self.blocked_probability:.0%} blocked"
        name += f" robust preset {self.iterations} iterations" if self.robust else ""
        return name + "".join(f" {k}={v}" for k, v in self.overrides)


RUNS: tuple[Run, ...] = (
    *(Run("open-field", 0, k, epochs=2 if k == 4 else 1) for k in range(1, 9)),
    Run("open-field", 1, 4, epochs=2),
    Run("open-field", 2, 4, epochs=2),
    *(Run("cold-store", 0, k, epochs=2) for k in (2, 4, 8)),
    *(Run("mine-drift", 0, k, epochs=2) for k in (1, 4, 8)),
)

def with_overrides(runs: tuple[Run, ...], overrides: tuple[tuple[str, object], ...]) -> tuple[Run, ...]:
    """The runs with hand-set estimator settings (`--param`) in place of their own."""
    return tuple(dataclasses.replace(r, overrides=tuple(overrides)) for r in runs)


# `peerfix budget --robust`: what the robust preset costs on the tag, on the
# networks it is measured on (open field, 20 % of ranges blocked) and on the
# cold store (racks block most paths), at the iterations it is measured with.
ROBUST_RUNS: tuple[Run, ...] = (
    *(Run("open-field", s, 4, iterations=ROBUST_ITERATIONS, robust=True, blocked_probability=0.2) for s in (0, 1)),
    Run("cold-store", 0, 4, epochs=2, iterations=ROBUST_ITERATIONS, robust=True),
)


class Recorder:
    """Per (entry point, bucket) reservoir samples of distinct calls (seeded)."""

    def __init__(self, pool_per_bucket: int = POOL_PER_BUCKET, seed: int = 0):
        self.pool_per_bucket = pool_per_bucket
        self.rng = random.Random(seed)
        self.pools: dict[str, dict[tuple, list[CapturedCall]]] = {e: {} for e in ENTRY_POINTS}
        self.distinct: dict[tuple[str, tuple], int] = {}
        self.calls_seen: dict[str, int] = {e: 0 for e in ENTRY_POINTS}
        self._digests: set[bytes] = set()
        self.source = ""

    def offer(self, call: CapturedCall) -> None:
        self.calls_seen[call.entry] += 1
        h = hashlib.blake2b(call.entry.encode(), digest_size=16)
        for a in call.args:
            h.update(a.kind.encode())
            h.update(a.data if a.kind != "scratch" else b"")
            h.update(a.value.to_bytes(8, "little", signed=True))
        digest = h.digest()
        if digest in self._digests:
            return
        self._digests.add(digest)
        key = (call.entry, call.bucket)
        n = self.distinct.get(key, 0) + 1
        self.distinct[key] = n
        pool = self.pools[call.entry].setdefault(call.bucket, [])
        cap = min(self.pool_per_bucket, POOL_SMALLER.get(call.entry, self.pool_per_bucket))
        if len(pool) < cap:
            pool.append(call)
        else:
            j = self.rng.randrange(n)  # reservoir sampling: every distinct call kept with equal chance
            if j < cap:
                pool[j] = call

    def wrap(self, name: str, real: Callable) -> Callable:
        kinds = ARG_KINDS[name]
        sized = BYTE_SIZE_ARG.get(name, {})
        ctypes = ffi.typeof(real).args
        bucket_of = BUCKETS[name]

        def recorded(*args):
            pre: list[Arg] = []
            for i, (kind, ct, a) in enumerate(zip(kinds, ctypes, args, strict=True)):
                if kind in ("u32", "i32"):
                    pre.append(Arg(kind, value=int(a)))
                elif kind == "scratch":
                    pre.append(Arg(kind, size=ffi.sizeof(ct.item)))
                elif kind == "out:size_t":
                    pre.append(Arg("out", data=_size_t_bytes(a)))
                else:
                    pre.append(Arg(kind, data=_read(a, _pointer_size(ct, args, sized.get(i)))))
            status = real(*args)
            outputs = []
            for i, (kind, a) in enumerate(zip(kinds, args, strict=True)):
                if kind == "out:size_t":
                    outputs.append(_size_t_bytes(a))
                elif kind in ("inout", "out"):
                    outputs.append(_read(a, len(pre[i].data)))
            self.offer(CapturedCall(name, bucket_of(args), tuple(pre), int(status), tuple(outputs), self.source))
            return status

        return recorded


def _pointer_size(ct, args, size_index: int | None) -> int:
    if size_index is not None:
        return int(args[size_index])
    size = ffi.sizeof(ct.item)
    if ct.item.cname in ("uint8_t", "unsigned char"):
        raise TypeError(f"{ct.cname} argument without a size rule in BYTE_SIZE_ARG")
    return size


def _read(obj, size: int) -> bytes:
    if isinstance(obj, (bytes, bytearray)):
        return bytes(obj[:size])
    return bytes(ffi.buffer(obj, size))


def _size_t_bytes(p) -> bytes:
    value = int(p[0])
    if value >= 1 << 32:
        raise ValueError(f"size_t value {value} does not fit the target's 32 bits")
    return value.to_bytes(4, "little")


class _RecordingLib:
    """The cffi lib with the entry points recorded; everything else passes through."""

    def __init__(self, real, recorder: Recorder):
        self._real = real
        self._wrapped = {name: recorder.wrap(name, getattr(real, name)) for name in ENTRY_POINTS}

    def __getattr__(self, name: str):
        try:
            return self._wrapped[name]
        except KeyError:
            return getattr(self._real, name)


class CaptureEngine(FixedEngine):
    """The fixed engine, recording every entry-point call it makes into ``recorder``."""

    def __init__(self, recorder: Recorder, *args, **kw):
        super().__init__(*args, **kw)
        self.lib = _RecordingLib(self.lib, recorder)


def with_epochs(scenario, epochs: int, step_s: float = 1.0):
    """The scenario with its ranges repeated at t + step_s, t + 2 step_s, ... (static tags)."""
    from peerfix.scenario.model import RangeTable

    if epochs <= 1:
        return scenario
    r = scenario.ranges
    n = len(r)
    table = RangeTable(
        t_s=np.concatenate([r.t_s + k * step_s for k in range(epochs)]),
        node_a=list(r.node_a) * epochs,
        node_b=list(r.node_b) * epochs,
        range_m=np.tile(r.range_m, epochs),
        line=np.zeros(n * epochs, dtype=int),
    )
    return dataclasses.replace(scenario, ranges=table, truth=None)


def run_and_record(run: Run, recorder: Recorder) -> None:
    """One scenario run of the fixed engine, every entry-point call offered to recorder
    (peerfix.runner.run_scenario with the recording engine in place of its own)."""
    from peerfix.reference import EstimatorParams
    from peerfix.reference.params import robust_preset
    from peerfix.runner import blocked_model, run_scenario
    from peerfix.simulate import simulate

    site = {} if run.blocked_probability is None else {"blocked_probability": run.blocked_probability,
                                                       "blocked_bias_mean_m": 1.0}
    scenario = with_epochs(simulate(run.preset, run.seed, **site), run.epochs)
    params = EstimatorParams(max_components=run.K).replace(**dict(run.overrides))
    if run.robust:  # what was set by hand wins over the preset, as in `peerfix run --robust --param`
        params = robust_preset(params, keep=tuple(k for k, _ in run.overrides))
    recorder.source = run.name
    eng = CaptureEngine(recorder, params, blocked_model(scenario, params))
    run_scenario(scenario, eng, params, run.iterations, process_var_m2_per_s=PREDICT_Q_M2_PER_S, score=False)


def record_predictions(recorder: Recorder, dt_ms: Iterable[int] = PREDICT_DT_MS) -> None:
    """pfx_node_predict on every node an update left behind (in the pools), at each dt."""
    rec_lib = _RecordingLib(lib, recorder)
    q = area_q(PREDICT_Q_M2_PER_S)
    nodes = [call.outputs[0] for pool in _sorted_pools(recorder, "pfx_node_update") for call in pool
             if call.status == 0]
    recorder.source = "host predict on captured nodes"
    node = ffi.new("pfx_node_t *")
    for data in nodes:
        for dt in dt_ms:
            ffi.memmove(node, data, len(data))
            rec_lib.pfx_node_predict(node, dt, q)


def _sorted_pools(recorder: Recorder, entry: str) -> list[list[CapturedCall]]:
    pools = recorder.pools[entry]
    return [pools[b] for b in sorted(pools)]


def select(pools: dict[tuple, list[CapturedCall]], count: int, seed: int, first: tuple[tuple, ...] = (),
           first_count: int = 0) -> list[CapturedCall]:
    """``count`` calls, round-robin over the buckets (sorted), each bucket in a
    seeded shuffled order; ``first_count`` calls of each bucket in ``first`` before the rest."""
    order = {b: _shuffled(pools[b], seed, b) for b in sorted(pools)}
    taken = {b: 0 for b in order}
    out: list[CapturedCall] = []
    for b in first:
        if b in order:
            taken[b] = min(first_count, len(order[b]), count - len(out))
            out.extend(order[b][: taken[b]])
    while len(out) < count:
        progress = False
        for b, calls in order.items():
            if len(out) >= count:
                break
            if taken[b] < len(calls):
                out.append(calls[taken[b]])
                taken[b] += 1
                progress = True
        if not progress:
            break
    return out


def _shuffled(calls: list[CapturedCall], seed: int, bucket: tuple) -> list[CapturedCall]:
    out = list(calls)
    random.Random(f"{seed}:{bucket}").shuffle(out)
    return out


@dataclass
class CaptureSet:
    calls: dict[str, list[CapturedCall]]  # entry point -> selected calls
    runs: tuple[Run, ...]
    calls_seen: dict[str, int]  # calls the runs made per entry point (duplicates included)
    distinct: dict[str, int]  # distinct inputs seen per entry point
    seed: int
    available: dict[str, dict[tuple, int]] = field(default_factory=dict)  # distinct inputs per bucket

    def all_calls(self) -> list[CapturedCall]:
        return [c for e in ENTRY_POINTS for c in self.calls.get(e, [])]

    def __len__(self) -> int:
        return sum(len(v) for v in self.calls.values())


def capture(per_entry: int = 1000, headline_min: int = 50, seed: int = 0,
            runs: tuple[Run, ...] = RUNS) -> CaptureSet:
    """Run the scenarios (once per seed and runs: cached), record, and select
    ``per_entry`` calls per entry point (fewer only if the runs did not make
    that many distinct calls), ``headline_min`` of them in each headline bucket (either prior)."""
    recorder = _record(seed, tuple(runs))
    calls = {}
    for entry in ENTRY_POINTS:
        first = HEADLINE_BUCKETS if entry == "pfx_node_update" else ()
        calls[entry] = select(recorder.pools[entry], per_entry, seed, first, headline_min)
    distinct = {e: sum(n for (entry, _), n in recorder.distinct.items() if entry == e) for e in ENTRY_POINTS}
    available = {e: {b: n for (entry, b), n in recorder.distinct.items() if entry == e} for e in ENTRY_POINTS}
    return CaptureSet(calls, tuple(runs), dict(recorder.calls_seen), distinct, seed, available)


@lru_cache(maxsize=2)
def _record(seed: int, runs: tuple[Run, ...]) -> Recorder:
    # The pools do not depend on how many calls are selected, so a smaller
    # selection is a subset of a larger one.
    recorder = Recorder(POOL_PER_BUCKET, seed=seed)
    was_enabled = gc.isenabled()
    gc.disable()  # tens of thousands of kept records and no cycles: collection passes only cost time
    try:
        for run in runs:
            run_and_record(run, recorder)
        record_predictions(recorder)
    finally:
        if was_enabled:
            gc.enable()
    return recorder


# ---- replay on the target --------------------------------------------------------


@dataclass
class Replayed:
    call: CapturedCall
    status: int
    instructions: int
    cycles: int  # ESTIMATE (peerfix.budget.timing)
    stack_bytes: int  # measured high-water mark
    mismatch: list[str]  # what differed from the host; empty: bit-exact
    per_function: dict[str, tuple[int, int]] = field(default_factory=dict)  # name -> (instructions, cycles)

    @property
    def bit_exact(self) -> bool:
        return not self.mismatch


def replay(em, call: CapturedCall) -> Replayed:
    """Run one captured call on the emulated target and compare with the host, byte for byte."""
    from peerfix.budget.emulator import cffi_signature

    argtypes, restype = cffi_signature(ffi, getattr(lib, call.entry))
    em.reset_scratch()
    values: list[int] = []
    addrs: list[int | None] = []
    for a in call.args:
        if a.kind == "scratch":
            addr = em.alloc(a.size)
        elif a.is_pointer:
            addr = em.alloc_bytes(a.data)
        else:
            values.append(a.value)
            addrs.append(None)
            continue
        values.append(addr)
        addrs.append(addr)
    res = em.call(call.entry, *values, argtypes=argtypes, restype=restype)
    problems: list[str] = []
    if res.value != call.status:
        problems.append(f"status {res.value} (host {call.status})")
    outs = iter(call.outputs)
    for i, (a, addr) in enumerate(zip(call.args, addrs, strict=True)):
        if addr is None or a.kind == "scratch":
            continue
        want = next(outs) if a.is_output else a.data
        got = em.read(addr, len(want))
        if got != want:
            diff = [k for k in range(len(want)) if got[k] != want[k]]
            what = "output" if a.is_output else "input changed"
            problems.append(f"argument {i} ({a.kind}, {len(want)} B) {what}: {len(diff)} bytes differ, "
                            f"first at offset {diff[0]}")
    return Replayed(call, res.value, res.instructions, res.cycles, res.stack_bytes, problems, res.per_function)
