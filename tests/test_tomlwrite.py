"""The extension's TOML writer (addon/tomlwrite.py, no bpy) writes every float in its
shortest round-trip form: ``tomllib`` (the reader of the standard library) reads back the
very same float64, for homes, limits, points, axes and couplings; the mechanism written
loads to the same numbers in jointwise."""
from __future__ import annotations

import importlib.util
import math
import struct
import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings, strategies as st

import jointwise

ROOT = Path(__file__).resolve().parent.parent
_spec = importlib.util.spec_from_file_location("jw_tomlwrite", ROOT / "addon" / "tomlwrite.py")
tomlwrite = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(tomlwrite)

finite = st.floats(allow_nan=False, allow_infinity=False)


def _same(a, b):
    return struct.pack("<d", a) == struct.pack("<d", b)  # bit for bit: -0.0 differs from 0.0


@settings(max_examples=300, deadline=None, derandomize=True, database=None)
@given(finite)
def test_any_finite_float_reads_back_bit_for_bit(v):
    text = tomlwrite.dumps({"v": v})
    back = tomllib.loads(text)["v"]
    assert isinstance(back, float) and _same(back, v)
    assert text.strip() == f"v = {tomlwrite.value(v)}"
    assert tomlwrite.value(v) in (repr(v), repr(v) + ".0")  # the shortest round-trip form


@pytest.mark.parametrize("v", [72.988297687263, 0.1 + 0.2, 1 / 3, 5e-324, 1.7976931348623157e308, -0.0, 1e16,
                               123456789012.34567, 2.0 ** 53 + 2])
def test_awkward_values(v):
    assert _same(tomllib.loads(tomlwrite.dumps({"v": v}))["v"], v)


def test_non_finite_is_refused():
    for bad in (math.nan, math.inf, -math.inf):
        with pytest.raises(ValueError):
            tomlwrite.dumps({"v": bad})


@settings(max_examples=60, deadline=None, derandomize=True, database=None)
@given(home=st.floats(-1e3, 1e3), lo=st.floats(-1e6, -1e3), hi=st.floats(1e3, 1e6),
       pt=st.lists(st.floats(-1e4, 1e4), min_size=3, max_size=3),
       ratio=st.floats(0.01, 100), offset=st.floats(-1e3, 1e3))
def test_mechanism_file_round_trip(tmp_path_factory, home, lo, hi, pt, ratio, offset):
    """Written by tomlwrite, read by jointwise: the same numbers, exactly."""
    data = {"format": 1, "mechanism": {"ground": "frame", "length_unit": "mm", "angle_unit": "deg"},
            "links": {"frame": {}, "arm": {}, "slider": {}},
            "joints": {"pin": {"type": "revolute", "parent": "frame", "child": "arm", "point": pt,
                               "axis": [0.0, 0.0, 1.0], "home": home, "limits": [lo, hi]},
                       "slide": {"type": "prismatic", "parent": "arm", "child": "slider", "point": pt,
                                 "axis": [1.0, 0.0, 0.0], "home": ratio * home + offset}},
            "couplings": {"link": {"leader": "pin", "follower": "slide", "ratio": ratio, "offset": offset}}}
    path = tmp_path_factory.mktemp("tw") / "m.toml"
    tomlwrite.write(path, data)
    assert tomllib.loads(path.read_text()) == data
    m = jointwise.load(path)
    assert m.to_dict()["joints"]["pin"]["home"] == home
    assert m.to_dict()["joints"]["pin"]["limits"] == [lo, hi]
    assert m.couplings["link"].ratio == ratio and m.couplings["link"].offset == offset
