"""Motion-law couplings (jointwise.couplings): values, derivatives, validation, solving.

References
----------
- Norton, *Design of Machinery* (cam motion laws, ch. 8; Geneva mechanism): the peak
  velocity and acceleration coefficients quoted below, in units of h/beta and h/beta^2.
  The figures are entered from memory of the usual comparison table and are re-derived
  here from each law's own formula (roots of its derivatives), not trusted as such.
- scipy.interpolate.CubicSpline (natural and periodic boundary conditions) for the
  table law's spline.
- The Geneva wheel's closed form is derived in the test from the triangle crank centre,
  pin and wheel centre.
"""
import math
import re

import numpy as np
import pytest
from numpy.polynomial import Polynomial
from scipy.interpolate import CubicSpline

import jointwise
from jointwise import couplings as laws
from jointwise.errors import JointwiseError, SpecError

from mechanisms import base, revolute, slider_crank, slider_position


def _rise(kind, h=3.0, beta=1.25):
    return laws.Program([(0.0, beta, 0.0, h, kind), (beta, 2 * math.pi, h, h, "dwell")], 2 * math.pi)


# -- peak coefficients -------------------------------------------------------------------------

# (kind, peak velocity coefficient, peak acceleration coefficient): Norton, Design of
# Machinery, table of cam motion laws (values from memory, 4 decimals).  The 4-5-6-7
# acceleration figure from memory, 7.5107, is 2.5e-3 below what the polynomial gives
# (7.5132, at u = (5 - sqrt 5) / 10, see the derivation test below); the derived value is used.
_U4567 = (5 - math.sqrt(5)) / 10
PEAK_4567 = float(Polynomial((0, 0, 0, 0, 35, -84, 70, -20)).deriv(2)(_U4567))
PEAKS = [
    ("harmonic", math.pi / 2, math.pi ** 2 / 2),
    ("cycloidal", 2.0, 2 * math.pi),
    ("polynomial-345", 1.875, 5.7735),
    ("polynomial-4567", 2.1875, PEAK_4567),
]


@pytest.mark.parametrize("kind, cv, ca", PEAKS)
def test_peak_coefficients_sampled(kind, cv, ca):
    h, beta = 3.0, 1.25
    law = _rise(kind, h, beta)
    x = np.linspace(0, beta, 200001)
    y, dy, ddy = law.evaluate(x)
    assert y[0] == pytest.approx(0.0, abs=1e-12) and y[-1] == pytest.approx(h, abs=1e-12)
    assert np.abs(dy).max() / (h / beta) == pytest.approx(cv, abs=1e-4)
    assert np.abs(ddy).max() / (h / beta ** 2) == pytest.approx(ca, abs=1e-4)


@pytest.mark.parametrize("coeffs, cv, ca, tol", [
    ((0, 0, 0, 10, -15, 6), 1.875, 5.7735, 5e-5),
    ((0, 0, 0, 0, 35, -84, 70, -20), 2.1875, 7.5107, 3e-3),   # memory figure 2.5e-3 low
])
def test_polynomial_peaks_derived_from_the_polynomial(coeffs, cv, ca, tol):
    """Peak velocity at the critical point of s' (u = 1/2 by symmetry), peak acceleration
    at the real roots of s''' in (0, 1): the figures from memory agree within ``tol``."""
    s = Polynomial(coeffs)
    assert s(0) == 0 and s(1) == pytest.approx(1)
    v_peaks = [abs(s.deriv(1)(u)) for u in s.deriv(2).roots() if abs(u.imag) < 1e-12 and 0 < u.real < 1]
    a_peaks = [abs(s.deriv(2)(u.real)) for u in s.deriv(3).roots() if abs(u.imag) < 1e-12 and 0 < u.real < 1]
    assert max(v_peaks) == pytest.approx(cv, abs=1e-12)
    assert max(a_peaks) == pytest.approx(ca, abs=tol)
    if len(coeffs) == 6:  # 3-4-5: exactly 10 sqrt(3) / 3 at u = (3 - sqrt 3) / 6
        assert max(a_peaks) == pytest.approx(10 * math.sqrt(3) / 3, abs=1e-12)
    else:                 # 4-5-6-7: s''' = 840 u (u - 1)(5 u^2 - 5 u + 1) / -1, peak at (5 - sqrt 5) / 10
        assert max(a_peaks) == pytest.approx(PEAK_4567, abs=1e-12)
        assert PEAK_4567 == pytest.approx(7.5132, abs=1e-4)


@pytest.mark.parametrize("kind", laws.KINDS)
def test_derivatives_match_central_differences(kind):
    h = 0.0 if kind == "dwell" else 2.0
    law = laws.Program([(0.1, 1.3, 1.0, 1.0 + h, kind), (1.3, 0.1 + 2 * math.pi, 1.0 + h, 1.0, "constant-velocity")],
                       2 * math.pi)
    x = np.linspace(0.15, 1.25, 50)
    e = 1e-5
    y, dy, ddy = law.evaluate(x)
    yp, yn = law.evaluate(x + e)[0], law.evaluate(x - e)[0]
    assert np.allclose(dy, (yp - yn) / (2 * e), atol=1e-8)
    dyp, dyn = law.evaluate(x + e)[1], law.evaluate(x - e)[1]
    assert np.allclose(ddy, (dyp - dyn) / (2 * e), atol=1e-6)


def test_program_repeats_each_period_and_accumulates_its_rise():
    law = laws.Program([(0.0, 1.0, 0.0, 1.0, "cycloidal"), (1.0, 2 * math.pi, 1.0, 1.0, "dwell")], 2 * math.pi)
    x = np.linspace(-7, 7, 101)
    y, dy, ddy = law.evaluate(x)
    y2, dy2, ddy2 = law.evaluate(x + 2 * math.pi)
    assert np.allclose(y2, y + 1.0) and np.allclose(dy2, dy) and np.allclose(ddy2, ddy)


# -- continuity across joins -------------------------------------------------------------------

SMOOTH = ("cycloidal", "polynomial-345", "polynomial-4567")


@pytest.mark.parametrize("kind", ["harmonic", *SMOOTH])
def test_continuity_across_dwell_joins(kind):
    """Rise - dwell - return - dwell: velocity continuous at every join for all four laws
    (they start and end at rest); acceleration continuous for cycloidal and the
    polynomials (they start and end with zero acceleration), not for the harmonic."""
    d = math.radians
    law = laws.Program([(0, d(90), 0, 5, kind), (d(90), d(150), 5, 5, "dwell"),
                        (d(150), d(240), 5, 0, kind), (d(240), d(360), 0, 0, "dwell")], 2 * math.pi)
    e = 1e-9
    for j in (0.0, d(90), d(150), d(240), d(360)):
        lo, hi = law.evaluate(np.array([j - e, j + e]))[1:]
        y = law.evaluate(np.array([j - e, j + e]))[0]
        assert abs(y[1] - y[0]) < 1e-7
        assert abs(lo[1] - lo[0]) < 1e-6
        if kind in SMOOTH:
            assert abs(hi[1] - hi[0]) < 1e-5
    if kind == "harmonic":  # the known acceleration jump at the start of the rise: pi^2/2 h/beta^2
        acc = law.evaluate(np.array([-e, e]))[2]
        assert acc[1] - acc[0] == pytest.approx(math.pi ** 2 / 2 * 5 / d(90) ** 2, rel=1e-6)


# -- Geneva ------------------------------------------------------------------------------------

@pytest.mark.parametrize("n", [4, 6])
def test_geneva_against_closed_form(n):
    """Closed form (derived here): crank radius a, centre distance C, a = C sin(pi/N) so
    that the pin enters radially (crank perpendicular to the slot), i.e. at crank angle
    pi/2 - pi/N from the line of centres.  The pin drives the wheel over 2 (pi/2 - pi/N)
    of each crank turn, so the dwell fraction is 1 - (pi - 2 pi/N) / (2 pi) = 1/2 + 1/N.
    The wheel angle is phi = atan2(a sin x, C - a cos x); its rate peaks on the line of
    centres: dphi/dx = a / (C - a) = lam / (1 - lam), lam = sin(pi/N)."""
    law = laws.Geneva(n)
    C = 100.0
    a = C * math.sin(math.pi / n)
    lam = a / C
    x = np.linspace(-math.pi, math.pi, 720001)[:-1]
    y, dy, ddy = law.evaluate(x)
    assert (dy == 0).mean() == pytest.approx(0.5 + 1 / n, abs=1e-5)
    assert dy.max() == pytest.approx(lam / (1 - lam), rel=1e-9)
    assert law.evaluate(0.0)[1] == pytest.approx(lam / (1 - lam), rel=1e-12)
    if n == 4:
        assert lam / (1 - lam) == pytest.approx(1 + math.sqrt(2))   # 2.414
    else:
        assert lam / (1 - lam) == pytest.approx(1.0)
    inside = np.abs(x) <= math.pi / 2 - math.pi / n
    pin = np.stack([a * np.cos(x), a * np.sin(x)], axis=1)
    phi = np.arctan2(pin[:, 1], C - pin[:, 0])
    assert np.allclose(y[inside], phi[inside], atol=1e-12)
    # the pin enters radially: at engagement the crank is perpendicular to the slot
    xe = math.pi / 2 - math.pi / n
    p = np.array([a * math.cos(xe), a * math.sin(xe)])
    assert abs(p @ (p - np.array([C, 0.0]))) < 1e-9
    # one index per crank turn, dwell at +- half an index
    assert law.evaluate(math.pi - 1e-9)[0] == pytest.approx(math.pi / n)
    assert law.evaluate(2 * math.pi)[0] == pytest.approx(2 * math.pi / n)
    e = 1e-6
    inside = np.abs(x) < math.pi / 2 - math.pi / n - 1e-4   # central differences off the joins
    assert np.allclose(dy[inside][::97], ((law.evaluate(x + e)[0] - law.evaluate(x - e)[0]) / (2 * e))[inside][::97],
                       atol=1e-7)
    assert np.allclose(ddy[inside][::97], ((law.evaluate(x + e)[1] - law.evaluate(x - e)[1]) / (2 * e))[inside][::97],
                       atol=1e-5)


# -- table (spline) ----------------------------------------------------------------------------

def test_table_natural_spline_matches_scipy():
    x = np.array([0.0, 0.4, 1.1, 1.5, 2.7, 3.0])
    y = np.array([0.0, 1.0, 0.5, 2.0, -1.0, 0.3])
    law = laws.Table(np.c_[x, y])
    ref = CubicSpline(x, y, bc_type="natural")
    xs = np.linspace(0, 3, 997)
    for k, got in enumerate(law.evaluate(xs)):
        assert np.allclose(got, ref(xs, k), atol=1e-12)
    # beyond the ends: straight on with the end slope
    out = law.evaluate(np.array([-1.0, 4.0]))
    assert out[0][0] == pytest.approx(ref(0.0) - ref(0.0, 1)) and out[2][1] == 0.0


def test_table_periodic_spline_matches_scipy():
    x = np.array([0.0, 0.7, 1.5, 2.9, 4.0, 2 * math.pi])
    y = np.array([0.0, 3.0, 5.0, 2.0, 1.0, 0.0])
    law = laws.Table(np.c_[x, y], 2 * math.pi)
    assert law.periodic
    ref = CubicSpline(x, y, bc_type="periodic")
    xs = np.linspace(-3, 10, 1001)
    for k, got in enumerate(law.evaluate(xs)):
        assert np.allclose(got, ref(np.mod(xs, 2 * math.pi), k), atol=1e-12)


def test_table_periodic_with_a_net_rise():
    x = np.array([0.0, 1.0, 2.5, 4.0, 2 * math.pi])
    y = np.array([0.0, 0.2, 1.0, 1.1, 1.5])
    law = laws.Table(np.c_[x, y], 2 * math.pi)
    slope = 1.5 / (2 * math.pi)
    ref = CubicSpline(x, y - slope * x, bc_type="periodic")
    xs = np.linspace(-3, 10, 301)
    assert np.allclose(law.evaluate(xs)[0], ref(np.mod(xs, 2 * math.pi)) + slope * xs, atol=1e-12)
    assert np.allclose(law.evaluate(xs)[1], ref(np.mod(xs, 2 * math.pi), 1) + slope, atol=1e-12)


# -- file keys and validation --------------------------------------------------------------------

def _cam_file(coupling, leader_kind="angle"):
    m = base("Fennwick test cam", links=["cam", "follower"])
    m["joints"]["cam_shaft"] = revolute("frame", "cam", (0, 0), drive=True)
    m["joints"]["lift"] = {"type": "prismatic", "parent": "frame", "child": "follower",
                           "point": [0.0, 40.0, 0.0], "axis": [0.0, 1.0, 0.0]}
    m["couplings"] = {"cam": {"leader": "cam_shaft", "follower": "lift", **coupling}}
    return m


PROGRAM = {"law": "program", "segments": [[0, 120, 0, 10, "cycloidal"], [120, 180, 10, 10, "dwell"],
                                          [180, 300, 10, 0, "polynomial-345"], [300, 360, 0, 0, "dwell"]]}


def test_program_file_poses_the_follower_and_round_trips():
    m = jointwise.from_dict(_cam_file(PROGRAM), source="cam.toml")
    law = m.couplings["cam"].law
    assert m.couplings["cam"].kind == "program"
    for v in (0, 37, 150, 250, 400):
        p = m.pose({"cam_shaft": v})
        assert p.joints["lift"] == pytest.approx(float(law.evaluate(math.radians(v))[0]), abs=1e-12)
    again = jointwise.from_dict(m.to_dict())
    assert again.couplings["cam"].spec == m.couplings["cam"].spec
    s = m.sweep("cam_shaft", np.linspace(0, 360, 73))
    assert s.converged.all()
    assert np.allclose(s.joints["lift"], law.evaluate(np.radians(s.values))[0], atol=1e-12)


@pytest.mark.parametrize("change, key, words", [
    ({"segments": [[0, 120, 0, 10, "cycloidal"], [130, 360, 10, 10, "dwell"]]}, "segments[1]", "do not tile"),
    ({"segments": [[0, 120, 0, 10, "cycloidal"], [120, 350, 10, 10, "dwell"]]}, "segments", "do not tile"),
    ({"segments": [[0, 120, 0, 10, "cycloidal"], [120, 360, 9, 9, "dwell"]]}, "segments[1]", "follower jumps"),
    ({"segments": [[0, 120, 0, 10, "dwell"], [120, 360, 10, 10, "dwell"]]}, "segments[0]", "dwell"),
    ({"segments": [[0, 120, 0, 10, "sinusoid"], [120, 360, 10, 10, "dwell"]]}, "segments[0]", "not one of"),
    ({"segments": [[120, 0, 0, 10, "cycloidal"]]}, "segments[0]", "above"),
    ({"period": -5}, "period", "positive"),
    ({"ratio": 2}, "ratio", "does not take"),
])
def test_program_validation_names_coupling_and_key(change, key, words):
    data = _cam_file({**PROGRAM, **change})
    with pytest.raises(SpecError, match=rf"^cam.toml: couplings\.cam\.{re.escape(key)}: .*{words}"):
        jointwise.from_dict(data, source="cam.toml")


def test_table_validation():
    bad = _cam_file({"law": "table", "points": [[0, 0], [90, 5], [80, 6], [360, 0]]})
    with pytest.raises(SpecError, match=r"couplings\.cam\.points\[2\]: table leaders must increase"):
        jointwise.from_dict(bad, source="cam.toml")
    bad = _cam_file({"law": "table", "points": [[0, 0], [90, 5], [200, 6], [350, 0]], "period": 360})
    with pytest.raises(SpecError, match=r"couplings\.cam\.period: the points span 350"):
        jointwise.from_dict(bad, source="cam.toml")


def test_geneva_validation():
    m = base("Fennwick test index", links=["crank", "wheel"])
    m["joints"]["crank"] = revolute("frame", "crank", (0, 0), drive=True)
    m["joints"]["wheel"] = revolute("frame", "wheel", (100, 0))
    m["couplings"] = {"index": {"leader": "crank", "follower": "wheel", "law": "geneva", "slots": 2}}
    with pytest.raises(SpecError, match=r"couplings\.index\.slots: .*>= 3"):
        jointwise.from_dict(m, source="g.toml")
    m["couplings"]["index"]["slots"] = 6
    mech = jointwise.from_dict(m, source="g.toml")
    s = mech.sweep("crank", np.linspace(-180, 540, 145))
    assert s.converged.all()
    assert np.allclose(s.joints["wheel"], np.degrees(laws.Geneva(6).evaluate(np.radians(s.values))[0]), atol=1e-9)
    with pytest.raises(JointwiseError, match="follows a motion law"):
        mech.pose({"wheel": 10})


# -- a motion law feeding a loop -----------------------------------------------------------------

def test_cam_driven_slider_crank_loop():
    """A cam (program law) sets the slider of an offset slider-crank; the crank is passive.
    At every cam angle the slider follows the law and the crank angle satisfies the closed
    form x = r cos t + sqrt(l^2 - (r sin t - e)^2) (any machine-design text)."""
    r, l, e = 15.0, 60.0, 8.0
    data = slider_crank(r, l, e, theta_deg=30.0, drive=None)
    x0 = slider_position(r, l, e, 30.0)
    data["links"]["cam"] = {}
    data["joints"]["cam_shaft"] = revolute("frame", "cam", (0, -80), drive=True)
    data["couplings"] = {"cam": {"leader": "cam_shaft", "follower": "slide", "law": "program",
                                 "segments": [[0, 120, x0, x0 - 10, "harmonic"], [120, 180, x0 - 10, x0 - 10, "dwell"],
                                              [180, 300, x0 - 10, x0, "polynomial-4567"], [300, 360, x0, x0, "dwell"]]}}
    m = jointwise.from_dict(data)
    law = m.couplings["cam"].law
    values = np.linspace(0, 720, 241)
    s = m.sweep("cam_shaft", values)
    assert s.converged.all()
    want = law.evaluate(np.radians(values))[0]
    assert np.allclose(s.joints["slide"], want, atol=1e-9)
    xs = np.array([slider_position(r, l, e, t) for t in s.joints["crank"]])
    assert np.allclose(xs, want, atol=1e-7)
    for v in (45.0, 150.0, 250.0):
        p = m.pose({"cam_shaft": v})
        assert p.joints["slide"] == pytest.approx(float(law.evaluate(math.radians(v))[0]), abs=1e-9)
        assert slider_position(r, l, e, p.joints["crank"]) == pytest.approx(p.joints["slide"], abs=1e-7)



def test_a_motion_law_follower_cannot_be_a_drive():
    data = _cam_file(PROGRAM)
    data["joints"]["lift"]["drive"] = True
    with pytest.raises(SpecError, match=r"couplings\.cam\.follower: 'lift' follows a motion law"):
        jointwise.from_dict(data, source="cam.toml")
