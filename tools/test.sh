#!/usr/bin/env bash
# Set everything up (tools/setup.sh) and run the test suite.  Extra arguments go to pytest.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
cd "$here"
bash tools/setup.sh
exec .venv/bin/python -m pytest "$@"
