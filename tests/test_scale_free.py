"""Scale-free tolerances: a sample drawn 1e-7 or 1e7 times as large poses the same.

Reference: similarity.  Scaling every length of a linkage by k leaves its angles unchanged
and multiplies its lengths by k (any kinematics text; Norton, *Design of Machinery*,
ch. 4: the position equations are homogeneous in the link lengths).  So the swept angles
of the scaled samples must equal the unscaled ones (1e-9 relative, as issue 14 asks) and
the slide of the slider-crank must scale by k.
"""
import math
import os
import tomllib

import numpy as np
import pytest

import jointwise
import mechanisms as M

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _scaled(sample, k):
    with open(os.path.join(ROOT, "blend_samples", sample), "rb") as fh:
        data = tomllib.load(fh)
    for j in data["joints"].values():
        j["point"] = [k * float(x) for x in j["point"]]
        if j["type"] in ("prismatic",) and "home" in j:
            j["home"] = k * float(j["home"])
    data.pop("measures", None)  # measure points are not needed here
    return jointwise.loads(M.dumps_toml(data), source=f"{sample} x {k:g}")


def _close(a, b, rel):
    a, b = np.asarray(a), np.asarray(b)
    return np.abs(a - b).max() <= rel * max(np.abs(b).max(), 1e-300)


@pytest.mark.parametrize("k", [1e-7, 1e7])
def test_scaled_four_bar_sample_sweeps_the_same_angles(k):
    base = _scaled("wagtail_rocker.toml", 1.0)
    big = _scaled("wagtail_rocker.toml", k)
    v = np.linspace(60, 420, 73)
    a, b = base.sweep("crank_pin", v), big.sweep("crank_pin", v)
    assert a.converged.all() and b.converged.all()
    for c in ("coupler_pin", "rocker_pin", "rocker_pivot"):
        assert _close(b.joints[c], a.joints[c], 1e-9), c
    p, q = base.pose({"crank_pin": 200}), big.pose({"crank_pin": 200})
    assert q.converged
    assert q.joints["rocker_pivot"] == pytest.approx(p.joints["rocker_pivot"], rel=1e-9)


@pytest.mark.parametrize("k", [1e-7, 1e7])
def test_scaled_slider_crank_sample_scales_its_stroke(k):
    base = _scaled("dipper_pump.toml", 1.0)
    big = _scaled("dipper_pump.toml", k)
    v = np.linspace(30, 390, 61)
    a, b = base.sweep("crank_pin", v), big.sweep("crank_pin", v)
    assert a.converged.all() and b.converged.all()
    assert _close(b.joints["rod_big_end"], a.joints["rod_big_end"], 1e-9)
    assert _close(b.joints["plunger_slide"] / k, a.joints["plunger_slide"], 1e-9)
    # and against the closed form x = r cos t + sqrt(l^2 - (r sin t - e)^2) (Norton sec. 4.6)
    r, l, e = 15.0, math.hypot(72.988297687263 - 12.990381056767, 0.5), 8.0
    x = [M.slider_position(r, l, e, t) for t in v]
    assert _close(b.joints["plunger_slide"] / k, x, 1e-7)


@pytest.mark.parametrize("k", [1e-7, 1e7])
def test_scaled_rssr_matches_closed_form(k):
    from sweep_fixtures import rssr_rocker, rssr_toml
    text = rssr_toml()
    v = np.linspace(0, 360, 181)
    out = []
    for f in (1.0, k):
        data = tomllib.loads(text)
        for j in data["joints"].values():
            j["point"] = [f * float(x) for x in j["point"]]
        data.pop("measures", None)
        sw = jointwise.loads(M.dumps_toml(data), source="rssr scaled").sweep("crank", v)
        assert sw.converged.all()
        out.append(sw.joints["arm"])
    ref = np.degrees(rssr_rocker(np.radians(v)))
    assert np.abs((out[1] - ref + 180) % 360 - 180).max() < 1e-7  # as tests/test_sweep.py
    assert _close(out[1], out[0], 1e-9)
