#!/bin/sh
# Host tests: the Blender extension inside real Blender (bpy from PyPI, headless),
# on Blender 4.5 LTS and 5.0. Run from the repository root after dev/test.sh has
# made .venv (the core venv, with `build`). Idempotent: creates or refreshes
#   .venv-bpy45  bpy 4.5.15 (LTS) + pytest
#   .venv-bpy50  bpy 5.0.1 + pytest
# builds dist/jointwise-<version>.zip and runs tests/host with each; any failure
# makes the script exit non-zero. The tests set HOME to a temporary folder.
set -eu
cd "$(dirname "$0")/.."
PY=${PYTHON:-python3.11}
command -v "$PY" >/dev/null 2>&1 || PY=python3

if [ ! -x .venv/bin/python ]; then
    echo "dev/host_tests.sh: .venv is missing; run dev/test.sh (it creates .venv with build)" >&2
    exit 1
fi
.venv/bin/python -m pip install -q build

ensure_bpy() {  # $1 venv folder, $2 bpy version spec
    [ -x "$1/bin/python" ] || "$PY" -m venv "$1"
    if ! "$1/bin/python" -c "import importlib.metadata as m, sys; v = m.version('bpy'); sys.exit(0 if v == '$2' else 1)" >/dev/null 2>&1; then
        "$1/bin/python" -m pip install -q --upgrade pip
        "$1/bin/python" -m pip install -q "bpy==$2"
    fi
    "$1/bin/python" -c "import pytest" >/dev/null 2>&1 || "$1/bin/python" -m pip install -q pytest
}

ensure_bpy .venv-bpy45 4.5.15
ensure_bpy .venv-bpy50 5.0.1

ZIP=$(.venv/bin/python addon/package.py)  # prints only the zip path; fails the script on error
echo "== extension zip: $ZIP"
export JOINTWISE_ZIP="$ZIP"

for v in 45 50; do
    echo "== host tests, $(.venv-bpy$v/bin/python -c 'import importlib.metadata as m; print("bpy", m.version("bpy"))')"
    .venv-bpy$v/bin/python -m pytest -q -p no:cacheprovider tests/host
done
echo "== host tests passed"
