#!/usr/bin/env bash
# Set everything up (tools/setup.sh) and run the built-in demo into demo-out/.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
cd "$here"
PEERFIX_NO_SYSTEM=1 bash tools/setup.sh
exec .venv/bin/peerfix demo --out "${1:-demo-out}"
