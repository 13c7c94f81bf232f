"""Settling only what must be settled, and saying what moved.

Reference: geometry of the drawings themselves.  A 4R loop with one pin axis tilted is a
rigid spatial loop (its home Jacobian has full rank), so settling is needed and the mean
direction of the four axes is used: with three axes along z and one tilted by t, each
axis turns by the angle between it and the normalised sum (computed here from the
vectors).  A spatial RSSR whose crank and rocker axes are only 0.03 deg apart moves as
drawn (one freedom plus the coupler's spin either way), so it is used exactly as given.
"""
import math
import os

import numpy as np
import pytest

import jointwise
import mechanisms as M

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
ROCKER = open(os.path.join(ROOT, "blend_samples", "wagtail_rocker.toml"), encoding="utf-8").read()


def test_spatial_linkage_with_nearly_parallel_axes_is_used_as_drawn():
    d = M.rssr()
    tilt = 5e-4  # rad, 0.029 deg: within the settling tolerance of the crank's axis (z)
    d["joints"]["rocker"]["axis"] = [0.0, math.sin(tilt), math.cos(tilt)]
    m = jointwise.loads(M.dumps_toml(d), source="rssr.toml")
    assert m.settle_notes == []
    assert np.allclose(m.joints["rocker"].axis, [0.0, math.sin(tilt), math.cos(tilt)], rtol=0, atol=1e-15)
    assert m.pose({"crank": 30.0}).converged  # it moves as drawn


def test_settled_rocker_reports_each_axis_and_its_turn():
    t = 0.0003
    text = ROCKER.replace('point = [60, 0, 0]\naxis = [0, 0, 1]', f'point = [60, 0, 0]\naxis = [0, {t}, 1]')
    m = jointwise.loads(text, source="rocker.toml")
    tilted = np.array([0, t, 1.0]) / math.hypot(t, 1.0)
    mean = 3 * np.array([0, 0, 1.0]) + tilted
    mean /= np.linalg.norm(mean)
    want = {"crank_pin": math.degrees(math.acos(mean[2])), "coupler_pin": math.degrees(math.acos(mean[2])),
            "rocker_pin": math.degrees(math.acos(mean[2])),
            "rocker_pivot": math.degrees(math.acos(float(np.dot(mean, tilted))))}
    for name, ang in want.items():
        note = next(n for n in m.settle_notes if n.startswith(f"axis of joint {name} turned by"))
        assert float(note.split("turned by ")[1].split(" deg")[0]) == pytest.approx(ang, rel=1e-2)
    assert np.allclose(m.joints["rocker_pivot"].axis, mean, atol=1e-12)
