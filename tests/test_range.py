"""Reachable range: bracketing and bisection to 1e-6 of the unit.

Reference: the rocker of a crank-rocker stops where crank and coupler are collinear,
O2-B = b + a (extended) or b - a (folded); the rocker angle there follows from the law of
cosines in triangle O2-O4-B: cos g = (d^2 + c^2 - s^2) / (2 d c), t4 = 180 deg - g on the
upper branch (standard machine-design texts, limit positions of a crank-rocker).
"""
import json
import math
import os
import subprocess
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(__file__))
from sweep_fixtures import fourbar_toml, load, slider_crank_toml  # noqa: E402

from jointwise.sweep import reach  # noqa: E402

A, B, C, D = 30.0, 90.0, 70.0, 100.0


def limit_angle(s):
    return 180.0 - math.degrees(math.acos((D * D + C * C - s * s) / (2 * D * C)))


def test_rocker_range_is_the_two_limit_positions():
    m = load(fourbar_toml())
    res = reach(m, "rocker")
    assert res["drive"] == "rocker"
    (lo, hi), = res["intervals"]
    assert abs(lo - limit_angle(B + A)) < 2e-6
    assert abs(hi - limit_angle(B - A)) < 2e-6
    assert res["reasons"] == [["dead point", "dead point"]]
    home = m.pose().joints["rocker"]
    assert lo <= home <= hi


def test_crank_turns_fully():
    m = load(fourbar_toml())
    res = reach(m, "crank")
    assert res["intervals"] == [[60.0 - 180.0, 60.0 + 180.0]]
    assert res["reasons"] == [["turns fully", "turns fully"]]


def test_limit_of_the_drive_and_of_a_passive_joint():
    m = load(fourbar_toml(limits=[90, 120]))
    res = reach(m, "rocker")
    assert np.allclose(res["intervals"], [[limit_angle(B + A), 120.0]], atol=2e-6)
    assert res["reasons"] == [["dead point", "limit of joint rocker"]]
    res = reach(m, "crank")  # now the rocker's limits stop the crank
    (lo, hi), = res["intervals"]
    assert res["reasons"] == [["limit of joint rocker", "limit of joint rocker"]]
    assert lo < 60 < hi
    p_lo = m.pose({"crank": lo})
    p_hi = m.pose({"crank": hi})
    assert min(abs(p.joints["rocker"] - 120.0) for p in (p_lo, p_hi)) < 1e-4


def test_slider_range():
    """Driving the slider of a slider-crank: it stops at the dead centres x = l - r, l + r."""
    m = load(slider_crank_toml(r=25.0, l=80.0, e=0.0, theta=30.0))
    res = reach(m, "slide")
    (lo, hi), = res["intervals"]
    assert abs(lo - 55.0) < 2e-6 and abs(hi - 105.0) < 2e-6
    assert res["reasons"] == [["dead point", "dead point"]]


def test_range_cli_json(tmp_path):
    f = tmp_path / "treadle.toml"
    f.write_text(fourbar_toml())
    out = subprocess.run([sys.executable, "-m", "jointwise.cli", "range", str(f), "--drive", "rocker",
                          "--format", "json"], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    res = json.loads(out.stdout)
    assert set(res) == {"drive", "intervals", "reasons"}
    assert res["drive"] == "rocker" and len(res["intervals"][0]) == 2
    txt = subprocess.run([sys.executable, "-m", "jointwise.cli", "range", str(f), "--drive", "rocker"],
                         capture_output=True, text=True)
    assert txt.returncode == 0 and "dead point" in txt.stdout
    bad = subprocess.run([sys.executable, "-m", "jointwise.cli", "range", str(f), "--drive", "nope"],
                         capture_output=True, text=True)
    assert bad.returncode == 2 and "nope" in bad.stderr and "Traceback" not in bad.stderr
