"""Measures against closed forms.

References
----------
* Transmission angle of a four-bar, cos mu = (b^2 + c^2 - a^2 - d^2 + 2 a d cos t2) / (2 b c)
  (law of cosines in the two triangles on the diagonal A-O4; standard machine-design texts).
* Offset slider-crank, slider x = r cos t + sqrt(l^2 - (r sin t - e)^2), so
  dx/dt = -r sin t - r cos t (r sin t - e) / sqrt(l^2 - (r sin t - e)^2); with e = 0 this is
  dx/dt = -r sin t - r^2 sin t cos t / sqrt(l^2 - r^2 sin^2 t) (differentiating the
  slider position of the triangle crank-rod-line of stroke).
* Hooke's joint, w2 / w1 = cos b / (1 - sin^2 b sin^2 t1).  Derivation of the phase used:
  input shaft along x, output along u = (cos b, sin b, 0).  The cross arm fixed in the
  input is a1 = Rx(t1) z = (0, -sin t1, cos t1), so t1 = 0 where it is perpendicular to
  the plane of both shafts (the xy plane).  The arm fixed in the output turns about u by
  t2 from v = z x u: a2 = v cos t2 + z sin t2 = (-sin b cos t2, cos b cos t2, sin t2).  The
  arms stay perpendicular: a1 . a2 = -sin t1 cos b cos t2 + cos t1 sin t2 = 0, so
  tan t2 = cos b tan t1, and differentiating, w2 / w1 = cos b sec^2 t1 / (1 + cos^2 b tan^2
  t1) = cos b / (1 - sin^2 b sin^2 t1).  The fixture places the input arm along z at home,
  so the input coordinate is t1.
"""
import math
import os
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(__file__))
from sweep_fixtures import fourbar_points, fourbar_toml, hooke_toml, load, slider_crank_toml  # noqa: E402

from jointwise.sweep import sweep  # noqa: E402

A, B, C, D = 30.0, 90.0, 70.0, 100.0


def test_transmission_angle():
    A0, B0 = fourbar_points(A, B, C, D, 60.0)
    u = B0 - A0
    v = B0 - np.array([D, 0.0])
    meas = (f'[measures.mu]\ntype = "angle"\na = {{link = "coupler", axis = [{u[0]}, {u[1]}, 0]}}\n'
            f'b = {{link = "rocker", axis = [{v[0]}, {v[1]}, 0]}}\n')
    m = load(fourbar_toml(measures=meas))
    vals = np.linspace(0, 360, 361)
    sw = sweep(m, "crank", vals)
    t2 = np.radians(vals)
    cmu = (B * B + C * C - A * A - D * D + 2 * A * D * np.cos(t2)) / (2 * B * C)
    mu = np.degrees(np.arccos(cmu))
    assert np.abs(sw.measures["mu"] - mu).max() < 1e-7
    assert sw.measures["mu"].min() >= 0 and sw.measures["mu"].max() <= 180


@pytest.mark.parametrize("e", [0.0, 6.0])
def test_slider_velocity_ratio(e):
    r, l = 25.0, 80.0
    meas = '[measures.speed]\ntype = "rate"\nof = "slide"\nper = "crank"\n'
    m = load(slider_crank_toml(r=r, l=l, e=e, measures=meas))
    vals = np.linspace(0, 360, 181)
    sw = sweep(m, "crank", vals)
    assert sw.converged.all()
    t = np.radians(vals)
    x = r * np.cos(t) + np.sqrt(l * l - (r * np.sin(t) - e) ** 2)
    assert np.abs(sw.joints["slide"] - x).max() < 1e-7
    if e == 0:
        dx = -r * np.sin(t) - r * r * np.sin(t) * np.cos(t) / np.sqrt(l * l - r * r * np.sin(t) ** 2)
    else:
        s = r * np.sin(t) - e
        dx = -r * np.sin(t) - r * np.cos(t) * s / np.sqrt(l * l - s * s)
    per_deg = dx * math.pi / 180  # mm per deg: the file's units
    assert np.abs(sw.measures["speed"] - per_deg).max() < 1e-8
    # ideal mechanical advantage = 1 / rate where the rate is not tiny
    ok = np.abs(per_deg) > 1e-3
    assert np.allclose(sw.advantage["speed"][ok], 1 / per_deg[ok], rtol=1e-7)
    assert np.all(np.isfinite(sw.advantage["speed"]))


@pytest.mark.parametrize("beta", [20.0, 35.0])
def test_hooke_joint_speed_ratio(beta):
    meas = '[measures.ratio]\ntype = "rate"\nof = "output"\nper = "input"\n'
    m = load(hooke_toml(beta=beta, measures=meas))
    vals = np.linspace(0, 360, 121)
    sw = sweep(m, "input", vals)
    assert sw.converged.all()
    b = math.radians(beta)
    t1 = np.radians(vals)
    ref = math.cos(b) / (1 - math.sin(b) ** 2 * np.sin(t1) ** 2)
    assert np.abs(sw.measures["ratio"] - ref).max() < 1e-8
    # positions too: tan t2 = cos b tan t1
    t2 = np.radians(sw.joints["output"])
    assert np.abs(np.sin(t2) * np.cos(t1) - math.cos(b) * np.cos(t2) * np.sin(t1)).max() < 1e-9


def test_rate_matches_solver_tangent():
    meas = '[measures.ratio]\ntype = "rate"\nof = "rocker"\nper = "crank"\n'
    m = load(fourbar_toml(measures=meas))
    vals = np.linspace(60, 300, 9)
    sw = sweep(m, "crank", vals)
    ic, ir = m.index["crank"], m.index["rocker"]
    for i in range(len(vals)):
        dq = m.solver.tangent(sw.q[i], [], ic)
        assert abs(sw.measures["ratio"][i] - dq[ir]) < 1e-10  # deg/deg = rad/rad


def test_rate_per_other_than_drive():
    """d(rocker)/d(crank) while the rocker drives equals the inverse of d(crank)/d(rocker)."""
    meas = ('[measures.r1]\ntype = "rate"\nof = "rocker"\nper = "crank"\n'
            '[measures.r2]\ntype = "rate"\nof = "crank"\nper = "rocker"\n')
    m = load(fourbar_toml(measures=meas))
    sw = sweep(m, "rocker", np.linspace(100, 130, 7))
    assert np.allclose(sw.measures["r1"] * sw.measures["r2"], 1.0, rtol=1e-9)


def test_point_and_distance():
    A0, B0 = fourbar_points(A, B, C, D, 60.0)
    meas = (f'[measures.pin]\ntype = "point"\nlink = "rocker"\nat = [{B0[0]}, {B0[1]}, 0]\n'
            f'[measures.gap]\ntype = "distance"\na = {{link = "crank", at = [{A0[0]}, {A0[1]}, 0]}}\n'
            f'b = {{link = "frame", at = [{D}, 0, 0]}}\n')
    m = load(fourbar_toml(measures=meas))
    vals = np.linspace(0, 360, 73)
    sw = sweep(m, "crank", vals)
    t2 = np.radians(vals)
    # distance crank pin to the rocker pivot, law of cosines
    gap = np.sqrt(A * A + D * D - 2 * A * D * np.cos(t2))
    assert np.abs(sw.measures["gap"] - gap).max() < 1e-9
    t4 = np.radians(sw.joints["rocker"])
    P = sw.measures["pin"]
    assert np.abs(P[:, 0] - (D + C * np.cos(t4))).max() < 1e-9
    assert np.abs(P[:, 1] - C * np.sin(t4)).max() < 1e-9
