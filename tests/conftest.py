"""Shared fixtures: run the real console script, write mechanism files.

The helpers themselves live in ``tests/mechanisms.py`` (import them from there, not
from this conftest: ``tests/host`` has a conftest of its own).
"""
from __future__ import annotations

import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import mechanisms  # noqa: E402


@pytest.fixture
def cli():
    return mechanisms.run_cli


@pytest.fixture
def mech_file(tmp_path):
    """``mech_file(data, name="m.toml")`` writes a mechanism dict and returns its path."""
    def make(data, name="m.toml"):
        return mechanisms.write(data, tmp_path / name)
    return make
