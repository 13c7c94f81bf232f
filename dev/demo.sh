#!/bin/sh
# The main job, one command, on a machine with Python 3.11 (run from anywhere):
#   sh dev/demo.sh [--frames N] [--sample NAME] [--docs]
# Sets up what it needs (idempotent, quick when present):
#   .venv        the core, editable, with the plot extra and build (for the zip)
#   .venv-bpy50  Blender 5.0 as a module (bpy from PyPI)
# builds dist/jointwise-<version>.zip and runs dev/main_job.py inside bpy:
# the wagtail_rocker sample imported, baked, traced, saved, tabulated, plotted and
# rendered into out/demo (printed on the last line).
set -eu
cd "$(dirname "$0")/.."
PY=${PYTHON:-python3.11}
command -v "$PY" >/dev/null 2>&1 || PY=python3

[ -x .venv/bin/python ] || "$PY" -m venv .venv
if ! .venv/bin/python -c "import jointwise, matplotlib, build" >/dev/null 2>&1; then
    echo "== setting up .venv (core + plot extra + build)"
    .venv/bin/python -m pip install -q --upgrade pip
    .venv/bin/python -m pip install -q -e '.[plot]' build
fi

[ -x .venv-bpy50/bin/python ] || "$PY" -m venv .venv-bpy50
if ! .venv-bpy50/bin/python -c "import importlib.metadata as m, sys; sys.exit(m.version('bpy') != '5.0.1')" >/dev/null 2>&1; then
    echo "== setting up .venv-bpy50 (bpy 5.0.1, about 1 GB)"
    .venv-bpy50/bin/python -m pip install -q --upgrade pip
    .venv-bpy50/bin/python -m pip install -q "bpy==5.0.1"
fi

ZIP=$(.venv/bin/python addon/package.py | tail -n 1)
echo "== extension zip: $ZIP"
JOINTWISE_ZIP="$ZIP" .venv-bpy50/bin/python dev/main_job.py --out out/demo "$@"
