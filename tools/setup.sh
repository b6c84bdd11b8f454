#!/usr/bin/env bash
# Set up a development environment in .venv (created if missing): the package,
# editable, with its test extras; and, where the machine allows, the Arm cross
# compiler and host tools the target-budget and fuzz checks use.  Safe to run
# again; used by tools/test.sh, tools/demo.sh and CI.  PEERFIX_NO_SYSTEM=1
# skips the system packages (the demo does not need them).
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
cd "$here"
python=${PYTHON:-python3}
if [ ! -x .venv/bin/python ]; then
    "$python" -m venv .venv
fi
# The build tools in the venv too, not only in pip's isolated build: the
# in-place rebuild after a C change (DEVELOPERS.md) runs setup.py with them,
# and a venv's own setuptools is too old for the SPDX license string.
.venv/bin/python -m pip install --quiet --upgrade pip "setuptools>=77" wheel "cffi>=1.15"
.venv/bin/python -m pip install --quiet -e ".[test]"
if [ "${PEERFIX_NO_SYSTEM:-0}" != "1" ]; then
    bash tools/install_cross.sh || echo "setup: no Arm cross compiler: the target-budget tests will skip (and fail under CI=true)" >&2
    bash tools/install_host_tools.sh || echo "setup: some host tools are missing: the checks that need them will skip" >&2
fi
