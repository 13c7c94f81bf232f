"""Shared fixtures: run the real console script, write mechanism files."""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import mechanisms  # noqa: E402

#: The installed console script next to the interpreter running the tests (.venv/bin/jointwise).
JOINTWISE = Path(sys.executable).parent / "jointwise"


class Run:
    def __init__(self, proc):
        self.code = proc.returncode
        self.out = proc.stdout
        self.err = proc.stderr

    def json(self):
        return json.loads(self.out)

    def __repr__(self):
        return f"Run(code={self.code}, out={self.out[:300]!r}, err={self.err[:300]!r})"


def run_cli(*args, cwd=None):
    """Run ``jointwise ARGS`` as a subprocess (no network, no stdin)."""
    exe = str(JOINTWISE) if JOINTWISE.exists() else None
    cmd = [exe] if exe else [sys.executable, "-m", "jointwise.cli"]
    env = dict(os.environ)
    env.pop("PYTHONPATH", None)
    proc = subprocess.run(cmd + [str(a) for a in args], capture_output=True, text=True,
                          stdin=subprocess.DEVNULL, cwd=cwd, env=env, timeout=120)
    return Run(proc)


@pytest.fixture
def cli():
    return run_cli


@pytest.fixture
def mech_file(tmp_path):
    """``mech_file(data, name="m.toml")`` writes a mechanism dict and returns its path."""
    def make(data, name="m.toml"):
        return mechanisms.write(data, tmp_path / name)
    return make


def no_traceback(run):
    assert "Traceback" not in run.err, run.err
    assert "Traceback" not in run.out, run.out
