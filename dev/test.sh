#!/bin/sh
# Sets up everything the test suite needs on a fresh machine with Python 3.11, then runs it:
#   1. .venv        core + test extras (numpy, scipy, hypothesis, pytest, matplotlib, build)
#   2. .venv-bpy45  Blender 4.5 LTS as a module (bpy from PyPI) for the host tests
#   3. .venv-bpy50  Blender 5.0 as a module
# Any failing test makes the script exit non-zero.
set -eu
cd "$(dirname "$0")/.."
PY=${PYTHON:-python3.11}
command -v "$PY" >/dev/null 2>&1 || PY=python3

[ -x .venv/bin/python ] || "$PY" -m venv .venv
.venv/bin/python -m pip install -q --upgrade pip
.venv/bin/python -m pip install -q -e '.[test,plot]' build

echo "== core tests"
.venv/bin/python -m pytest -q tests --ignore=tests/host

sh dev/host_tests.sh
echo "== all tests passed"
