#!/usr/bin/env bash
# Set up a development environment in .venv (created if missing): the package,
# editable, with its test extras.  Safe to run again; used by tools/test.sh,
# tools/demo.sh and CI.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
cd "$here"
python=${PYTHON:-python3}
if [ ! -x .venv/bin/python ]; then
    "$python" -m venv .venv
fi
.venv/bin/python -m pip install --quiet --upgrade pip
.venv/bin/python -m pip install --quiet -e ".[test]"
