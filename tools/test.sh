#!/usr/bin/env bash
# Set everything up (tools/setup.sh) and run the test suite.  Extra arguments go to pytest.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
cd "$here"
bash tools/setup.sh
# One BLAS thread: the suite's small matrices run much slower with OpenBLAS's
# thread pool on a loaded 2-core machine.
export OPENBLAS_NUM_THREADS=${OPENBLAS_NUM_THREADS:-1}
exec .venv/bin/python -m pytest "$@"
