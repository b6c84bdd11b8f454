#!/usr/bin/env bash
# Fuzz the belief-frame decoder (c_core/src/pfx_wire.c) with libFuzzer under
# AddressSanitizer and UndefinedBehaviorSanitizer.
#
#   tools/fuzz_wire.sh [--runs N] [--seed S]      (default: 1,000,000 runs)
#
# The target (tests/core/c/fuzz_wire.c) feeds every input to pfx_wire_decode
# and aborts when the decoder returns an undocumented status, leaves data in
# a rejected belief, decodes a covariance that is not positive definite, or
# decodes a frame that does not encode back to the same bytes.  The corpus
# starts from valid frames of the Python mirror (peerfix.core.wire), so
# mutations reach deep fields, plus random bytes.  Exit status 0 only when
# the whole run finished with no crash and no sanitizer report.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
cd "$here"
runs=1000000
seed=1
while [ $# -gt 0 ]; do
    case "$1" in
        --runs) runs=$2; shift 2 ;;
        --seed) seed=$2; shift 2 ;;
        *) echo "usage: tools/fuzz_wire.sh [--runs N] [--seed S]" >&2; exit 2 ;;
    esac
done
command -v clang >/dev/null 2>&1 || { echo "fuzz_wire: clang is missing (tools/install_host_tools.sh)" >&2; exit 3; }
python=${PYTHON:-.venv/bin/python}
work=build/fuzz_wire
mkdir -p "$work/corpus"
# The fuzzer brings its own sanitizer runtimes: drop any preloaded one (tools/sanitize.sh runs the tests with gcc's).
unset LD_PRELOAD
clang -std=c99 -g -O1 -fsanitize=fuzzer,address,undefined -fno-sanitize-recover=all \
    -Ic_core/include tests/core/c/fuzz_wire.c c_core/src/pfx_fixed.c c_core/src/pfx_wire.c \
    -o "$work/fuzz_wire"
# Seed corpus: valid frames for K = 1..8, anchors, far sites.
"$python" - "$work/corpus" <<'PY'
import random, sys
from pathlib import Path
from peerfix.core import wire
out = Path(sys.argv[1])
rng = random.Random(7)
for n in range(40):
    k = 1 + n % 8
    spread_q10 = (n % 4) * 100 * 1024  # components 0 to 300 m apart: all offset exponents
    cx, cy = rng.randrange(-8_000_000, 8_000_000), rng.randrange(-8_000_000, 8_000_000)
    comps = []
    for _ in range(k):
        s = rng.uniform(0.0, 30.0)
        v = int(s * s * 2**20)
        x = max(-wire.REF_LIMIT, min(wire.REF_LIMIT, cx + rng.randint(-spread_q10, spread_q10)))
        y = max(-wire.REF_LIMIT, min(wire.REF_LIMIT, cy + rng.randint(-spread_q10, spread_q10)))
        comps.append((-rng.randrange(0, 20 * 65536), x, y, v, rng.randint(-v // 2, v // 2), v))
    (out / f"frame{n:02d}").write_bytes(wire.encode(comps, wire.Meta(n, n, 0)))
(out / "anchor").write_bytes(wire.encode([(0, 1024, 2048, 0, 0, 0)], wire.Meta(1, 0, wire.FLAG_ANCHOR)))
PY
ASAN_OPTIONS=detect_leaks=0:abort_on_error=1 UBSAN_OPTIONS=halt_on_error=1:print_stacktrace=1 \
    "$work/fuzz_wire" -runs="$runs" -seed="$seed" -max_len=96 -print_final_stats=1 "$work/corpus" 2>"$work/log" || {
    tail -40 "$work/log" >&2
    echo "fuzz_wire: FAILED (see $work/log)" >&2
    exit 1
}
grep -E "^(stat::number_of_executed_units|fuzz_wire statuses)" "$work/log" || true
echo "fuzz_wire: $runs runs, no crash, no sanitizer report"
