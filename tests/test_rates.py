"""Velocities and accelerations at a drive speed (Mechanism.sweep(..., speed=, acceleration=)).

References
----------
- Offset slider-crank: x(t) = r cos t + sqrt(l^2 - (r sin t - e)^2) (any machine-design
  text); its first and second derivatives are written out exactly below, and the long-rod
  approximation a = -r w^2 (cos t + (r/l) cos 2t) (Norton, *Design of Machinery*, ch. 13,
  the slider-crank's Fourier form; from memory) serves as a sanity check.
- Four-bar: the vector loop a e^(i t2) + b e^(i t3) - c e^(i t4) - d = 0 differentiated once
  and twice (Norton, *Design of Machinery*, ch. 6 and 7, velocity and acceleration analysis
  of the four-bar); the two complex equations are solved here for w3, w4 and a3, a4.  Also
  against eighth-order central differences of closed-form (circle-intersection) positions.
- Hooke's joint: w2 / w1 = cos b / (1 - sin^2 b sin^2 t1) (any machine-design text; the phase
  as derived in tests/test_measures.py); the output acceleration is its derivative,
  a2 = (w2/w1) a1 + w1^2 cos b sin^2 b sin 2t1 / (1 - sin^2 b sin^2 t1)^2.
- Motion laws: follower rate f'(x) x_dot and acceleration f''(x) x_dot^2 + f'(x) x_ddot.
"""
import json
import math

import numpy as np
import pytest

import jointwise
from jointwise.errors import JointwiseError

from mechanisms import four_bar, four_bar_positions, hooke, slider_crank


def _slider_derivatives(r, l, e, t):
    u = r * np.sin(t) - e
    up, upp = r * np.cos(t), -r * np.sin(t)
    S = np.sqrt(l * l - u * u)
    x1 = -r * np.sin(t) - u * up / S
    x2 = -r * np.cos(t) - (up * up + u * upp) / S - (u * up) ** 2 / S ** 3
    return x1, x2


@pytest.mark.parametrize("rpm, acc", [(60.0, 0.0), (120.0, 0.0), (300.0, 900.0), (-90.0, -200.0)])
def test_offset_slider_crank_against_exact_derivatives(rpm, acc):
    r, l, e = 15.0, 60.0, 8.0
    m = jointwise.from_dict(slider_crank(r, l, e, 30.0))
    w = rpm * 6.0                                  # deg/s
    th = np.linspace(30, 30 + math.copysign(720, w), 97)
    s = m.sweep("crank", th, speed=w, acceleration=acc)
    assert s.converged.all()
    # drive timing: theta = theta0 + w t + acc t^2 / 2
    assert np.allclose(30 + w * s.time + acc * s.time ** 2 / 2, th, atol=1e-9)
    om = w + acc * s.time
    assert np.allclose(s.velocities["crank"], om, atol=1e-9)
    assert np.allclose(s.accelerations["crank"], acc, atol=1e-9)
    x1, x2 = _slider_derivatives(r, l, e, np.radians(th))
    omr, accr = np.radians(om), math.radians(acc)
    assert np.allclose(s.velocities["slide"], x1 * omr, rtol=1e-9, atol=1e-9 * r * abs(omr).max())
    want = x2 * omr ** 2 + x1 * accr
    assert np.allclose(s.accelerations["slide"], want, rtol=1e-8, atol=1e-9 * r * (omr ** 2).max())


def test_long_rod_slider_crank_against_the_approximate_form():
    r, l = 10.0, 200.0                              # r / l = 0.05
    m = jointwise.from_dict(slider_crank(r, l, 0.0, 0.0))
    th = np.linspace(0, 360, 73)
    s = m.sweep("crank", th, speed=360.0)           # 60 rpm
    w = 2 * math.pi
    approx = -r * w ** 2 * (np.cos(np.radians(th)) + r / l * np.cos(2 * np.radians(th)))
    # the neglected terms are O((r/l)^3) r w^2
    assert np.abs(s.accelerations["slide"] - approx).max() < 2 * (r / l) ** 3 * r * w ** 2


def _four_bar_rates(a, b, c, d, t2, w2, a2):
    """w3, w4, a3, a4 from the complex vector loop differentiated (Norton, ch. 6-7 form)."""
    out = []
    for t in np.atleast_1d(t2):
        (ax, ay), (bx, by), t4d = four_bar_positions(a, b, c, d, math.degrees(t))
        t3 = math.atan2(by - ay, bx - ax)
        t4 = math.radians(t4d)
        # i a w2 e^(i t2) + i b w3 e^(i t3) - i c w4 e^(i t4) = 0 -> real 2x2 in (w3, w4)
        M = np.array([[-b * math.sin(t3), c * math.sin(t4)], [b * math.cos(t3), -c * math.cos(t4)]])
        rhs = np.array([a * w2 * math.sin(t), -a * w2 * math.cos(t)])
        w3, w4 = np.linalg.solve(M, rhs)
        # second derivative: (i a2 - w2^2) a e^(i t2) + (i a3 - w3^2) b e^(i t3) - (i a4 - w4^2) c e^(i t4) = 0
        k = (-(a * a2 * -math.sin(t) - a * w2 ** 2 * math.cos(t)) - (-b * w3 ** 2 * math.cos(t3)) + (-c * w4 ** 2 * math.cos(t4)),
             -(a * a2 * math.cos(t) - a * w2 ** 2 * math.sin(t)) - (-b * w3 ** 2 * math.sin(t3)) + (-c * w4 ** 2 * math.sin(t4)))
        a3, a4 = np.linalg.solve(M, np.array(k))
        out.append((t3, t4, w3, w4, a3, a4))
    return np.array(out).T


@pytest.mark.parametrize("rpm, acc", [(100.0, 0.0), (45.0, 300.0)])
def test_four_bar_against_vector_loop_analysis(rpm, acc):
    a, b, c, d = 1.0, 3.0, 2.5, 3.0
    m = jointwise.from_dict(four_bar(a, b, c, d, 60.0))
    th = np.linspace(60, 420, 91)
    w = rpm * 6.0
    s = m.sweep("crank", th, speed=w, acceleration=acc)
    assert s.converged.all()
    w2 = np.radians(w + acc * s.time)
    t3, t4, w3, w4, a3, a4 = np.array([_four_bar_rates(a, b, c, d, math.radians(t), wi, math.radians(acc))[:, 0]
                                       for t, wi in zip(th, w2)]).T
    assert np.allclose(np.radians(s.velocities["rocker"]), w4, rtol=1e-9, atol=1e-10)
    assert np.allclose(np.radians(s.accelerations["rocker"]), a4, rtol=1e-8, atol=1e-8)
    # the coupler's absolute turn is crank + pin_a (relative angles)
    assert np.allclose(np.radians(s.velocities["crank"] + s.velocities["pin_a"]), w3, rtol=1e-9, atol=1e-10)
    assert np.allclose(np.radians(s.accelerations["crank"] + s.accelerations["pin_a"]), a3, rtol=1e-8, atol=1e-8)


def test_four_bar_against_central_differences_of_positions():
    """Eighth-order central differences (step 1e-2 rad) of the closed-form rocker angle."""
    a, b, c, d = 1.0, 3.0, 2.5, 3.0
    m = jointwise.from_dict(four_bar(a, b, c, d, 60.0))
    th = np.array([75.0, 140.0, 222.0, 305.0])
    s = m.sweep("crank", np.concatenate([[60.0], th]), speed=1.0)  # 1 deg/s: rates per degree
    h = 1e-2
    c1 = [(1, 4 / 5), (2, -1 / 5), (3, 4 / 105), (4, -1 / 280)]
    c2 = [(0, -205 / 72), (1, 8 / 5), (2, -1 / 5), (3, 8 / 315), (4, -1 / 560)]

    def t4(x):
        return math.radians(four_bar_positions(a, b, c, d, math.degrees(x))[2])
    for k, t in enumerate(np.radians(th)):
        d1 = sum(cf * (t4(t + j * h) - t4(t - j * h)) for j, cf in c1) / h
        d2 = sum(cf * (t4(t + j * h) + t4(t - j * h)) * (0.5 if j == 0 else 1) for j, cf in c2) / h ** 2
        # theta4' per radian of crank; the sweep's rates are per degree of crank per second
        assert s.velocities["rocker"][k + 1] == pytest.approx(d1, rel=1e-8)
        assert math.radians(s.accelerations["rocker"][k + 1]) == pytest.approx(d2 * math.radians(1.0) ** 2, rel=1e-6)


@pytest.mark.parametrize("beta, acc", [(30.0, 0.0), (20.0, 400.0)])
def test_hooke_output_acceleration(beta, acc):
    m = jointwise.from_dict(hooke(beta))
    th = np.linspace(0, 360, 73)
    s = m.sweep("input", th, speed=720.0, acceleration=acc)
    assert s.converged.all()
    b = math.radians(beta)
    t1 = np.radians(th)
    den = 1 - math.sin(b) ** 2 * np.sin(t1) ** 2
    ratio = math.cos(b) / den
    dratio = math.cos(b) * math.sin(b) ** 2 * np.sin(2 * t1) / den ** 2
    w1 = np.radians(720.0 + acc * s.time)
    assert np.allclose(np.radians(s.velocities["output"]), ratio * w1, rtol=1e-8)
    want = ratio * math.radians(acc) + w1 ** 2 * dratio
    assert np.allclose(np.radians(s.accelerations["output"]), want, rtol=1e-7, atol=1e-7 * (w1 ** 2).max())


def test_motion_law_follower_rates():
    from test_couplings import PROGRAM, _cam_file
    m = jointwise.from_dict(_cam_file(PROGRAM))
    law = m.couplings["cam"].law
    th = np.linspace(0, 360, 181)
    s = m.sweep("cam_shaft", th, speed=600.0, acceleration=-100.0)
    x = np.radians(th)
    y, d1, d2 = law.evaluate(x)
    w = np.radians(600.0 - 100.0 * s.time)
    assert np.allclose(s.velocities["lift"], d1 * w, atol=1e-9)
    assert np.allclose(s.accelerations["lift"], d2 * w ** 2 + d1 * math.radians(-100.0), atol=1e-8)


def test_cam_feeding_a_loop_rates():
    """A program law sets the slider of a slider-crank; the passive crank's rate and
    acceleration come from the loop with the law's curvature on the right-hand side.
    Check: differentiate x(t) = slider position along the path, x_dot = x'(t) t_dot,
    x_ddot = x''(t) t_dot^2 + x'(t) t_ddot, with x_dot and x_ddot from the law."""
    from test_couplings import slider_position  # noqa: F401  (same closed form)
    r, l, e = 15.0, 60.0, 8.0
    data = slider_crank(r, l, e, theta_deg=30.0, drive=None)
    x0 = slider_position(r, l, e, 30.0)
    data["links"]["cam"] = {}
    data["joints"]["cam_shaft"] = {"type": "revolute", "parent": "frame", "child": "cam",
                                   "point": [0.0, -80.0, 0.0], "axis": [0.0, 0.0, 1.0], "drive": True}
    data["couplings"] = {"cam": {"leader": "cam_shaft", "follower": "slide", "law": "program",
                                 "segments": [[0, 120, x0, x0 - 10, "cycloidal"], [120, 180, x0 - 10, x0 - 10, "dwell"],
                                              [180, 300, x0 - 10, x0, "polynomial-345"], [300, 360, x0, x0, "dwell"]]}}
    m = jointwise.from_dict(data)
    s = m.sweep("cam_shaft", np.linspace(0, 360, 121), speed=360.0)
    assert s.converged.all()
    t = np.radians(s.joints["crank"])
    x1, x2 = _slider_derivatives(r, l, e, t)
    td, tdd = np.radians(s.velocities["crank"]), np.radians(s.accelerations["crank"])
    assert np.allclose(s.velocities["slide"], x1 * td, atol=1e-8)
    assert np.allclose(s.accelerations["slide"], x2 * td ** 2 + x1 * tdd, atol=1e-7)


def test_point_measure_velocity_and_acceleration():
    """The crank pin of a slider-crank moves on a circle: |v| = r w, a = -w^2 (p - o) + alpha x p."""
    r, l, e = 15.0, 60.0, 8.0
    data = slider_crank(r, l, e, 30.0)
    data["measures"] = {"pin": {"type": "point", "link": "rod", "at": [r * math.cos(math.radians(30)),
                                                                       r * math.sin(math.radians(30)), 0.0]},
                        "reach": {"type": "distance", "a": {"link": "slider", "at": [data["joints"]["wrist"]["point"][0], e, 0.0]},
                                  "b": {"link": "frame", "at": [0.0, 0.0, 0.0]}}}
    m = jointwise.from_dict(data)
    s = m.sweep("crank", np.linspace(30, 390, 37), speed=180.0, acceleration=30.0)
    w = np.radians(180.0 + 30.0 * s.time)
    al = math.radians(30.0)
    p = s.measures["pin"]
    v = s.measure_velocities["pin"]
    a = s.measure_accelerations["pin"]
    assert np.allclose(v[:, 0], -w * p[:, 1]) and np.allclose(v[:, 1], w * p[:, 0]) and np.allclose(v[:, 2], 0)
    assert np.allclose(a[:, 0], -w ** 2 * p[:, 0] - al * p[:, 1], atol=1e-9)
    assert np.allclose(a[:, 1], -w ** 2 * p[:, 1] + al * p[:, 0], atol=1e-9)
    # wrist pin to crank centre: d = sqrt(x^2 + e^2), d_dot = x x_dot / d,
    # d_ddot = (x_dot^2 + x x_ddot - d_dot^2) / d
    x, xd, xdd = s.joints["slide"], s.velocities["slide"], s.accelerations["slide"]
    dist = np.sqrt(x * x + e * e)
    assert np.allclose(s.measures["reach"], dist)
    dd = x * xd / dist
    assert np.allclose(s.measure_velocities["reach"], dd, atol=1e-9)
    assert np.allclose(s.measure_accelerations["reach"], (xd * xd + x * xdd - dd * dd) / dist, atol=1e-7)


def test_timing_errors():
    m = jointwise.from_dict(slider_crank(15.0, 60.0, 8.0, 30.0))
    with pytest.raises(JointwiseError, match="must not be 0"):
        m.sweep("crank", [30, 40], speed=0.0)
    with pytest.raises(JointwiseError, match="against the speed"):
        m.sweep("crank", [30, 40], speed=-10.0)
    with pytest.raises(JointwiseError, match="stops at 35"):
        m.sweep("crank", [30, 40], speed=10.0, acceleration=-10.0)


# -- command line -------------------------------------------------------------------------------

def test_cli_speed_columns_units_and_json(tmp_path):
    from mechanisms import run_cli, write
    path = write(slider_crank(15.0, 60.0, 8.0, 30.0), tmp_path / "press.toml")
    base = ("sweep", path, "--drive", "crank", "--from", 30, "--to", 390, "--steps", 13)
    r = run_cli(*base, "--speed", "120rpm", "--acceleration", "600 deg/s2")
    assert r.code == 0, r
    lines = r.out.strip().splitlines()
    head = lines[0].split(",")
    assert head[-2:] == ["converged", "singular"]
    i = head.index("time")
    assert head[i:i + 9] == ["time", "crank.vel", "crank.acc", "big_end.vel", "big_end.acc",
                             "wrist.vel", "wrist.acc", "slide.vel", "slide.acc"]
    rows = [dict(zip(head, ln.split(","))) for ln in lines[1:]]
    ref = jointwise.from_dict(slider_crank(15.0, 60.0, 8.0, 30.0)).sweep(
        "crank", np.linspace(30, 390, 13), speed=720.0, acceleration=600.0)
    for k, row in enumerate(rows):
        assert float(row["crank.vel"]) == pytest.approx(720.0 + 600.0 * ref.time[k])
        assert float(row["slide.acc"]) == pytest.approx(ref.accelerations["slide"][k], rel=1e-12)
    # the same speed in other units
    for speed in ("720 deg/s", f"{4 * math.pi!r}rad/s", "720"):
        r2 = run_cli(*base, "--speed", speed, "--acceleration", "600")
        assert r2.code == 0 and r2.out == r.out, speed
    out = tmp_path / "press.json"
    r = run_cli(*base, "--speed", "2 rad/s", "--format", "json", "--out", out)
    data = json.loads(out.read_text())
    for key in ("time", "velocities", "accelerations", "measure_velocities", "measure_accelerations"):
        assert key in data
    assert data["velocities"]["crank"][0] == pytest.approx(math.degrees(2.0))


@pytest.mark.parametrize("args, words", [
    (("--speed", "3 mm/s"), "'crank' is an angle"),
    (("--speed", "3 furlong/s"), "unknown unit"),
    (("--speed", "fast"), "expected a number"),
    (("--acceleration", "3"), "needs --speed"),
    (("--speed", "10", "--acceleration", "3 deg/s"), "unknown unit"),
    (("--speed", "-10"), "against the speed"),
])
def test_cli_speed_errors(tmp_path, args, words):
    from mechanisms import run_cli, write
    path = write(slider_crank(15.0, 60.0, 8.0, 30.0), tmp_path / "press.toml")
    target = tmp_path / "never.csv"
    r = run_cli("sweep", path, "--drive", "crank", "--from", 30, "--to", 90, "--steps", 5, *args, "--out", target)
    assert r.code == 2 and words in r.err and "Traceback" not in r.err, r
    assert not target.exists()


def test_cli_unreachable_rows_stay_empty(tmp_path):
    """A non-Grashof four-bar's crank cannot turn fully: rows beyond its reach are empty."""
    from mechanisms import run_cli, write
    path = write(four_bar(2.0, 2.0, 2.2, 3.5, 60.0), tmp_path / "rocker.toml")  # s + l > p + q
    r = run_cli("sweep", path, "--drive", "crank", "--from", 60, "--to", 300, "--steps", 49, "--speed", "30rpm")
    assert r.code == 3, r
    assert "nan" not in r.out.lower() and "inf" not in r.out.lower()
    head = r.out.splitlines()[0].split(",")
    rows = [dict(zip(head, ln.split(","))) for ln in r.out.strip().splitlines()[1:]]
    bad = [row for row in rows if row["converged"] == "0"]
    good = [row for row in rows if row["converged"] == "1"]
    assert bad and good
    assert all(row["rocker.vel"] == "" and row["rocker.acc"] == "" for row in bad)
    assert all(row["rocker.vel"] != "" and row["time"] != "" for row in good)


def test_spatial_rssr_rocker_against_central_differences():
    """Ball joints (spherical, idle spin of the rod): the rocker's rate and acceleration are
    determined by the geometry; fourth-order central differences of positions solved by the
    core (step 0.05 deg, truncation about 1e-7) agree.  The balls' own coordinates are not
    compared: the rod's spin about its axis is not determined by the loop."""
    from mechanisms import rssr
    m = jointwise.from_dict(rssr())
    d = m.driven[0]
    v = np.linspace(0, 40, 21) + math.degrees(m.home[m.index[d]])
    s = m.sweep(d, v, speed=10.0, acceleration=2.0)
    h = 0.05
    pos = {k: m.sweep(d, v + k * h).joints["rocker"] for k in (-2, -1, 1, 2)}
    d1 = (-pos[2] + 8 * pos[1] - 8 * pos[-1] + pos[-2]) / (12 * h)      # d rocker / d crank
    d2 = (-pos[2] + 16 * pos[1] - 30 * s.joints["rocker"] + 16 * pos[-1] - pos[-2]) / (12 * h * h)
    w = 10.0 + 2.0 * s.time                                             # deg/s
    assert np.allclose(s.velocities["rocker"], d1 * w, atol=1e-6)
    # deg/s^2: d2 [deg/deg^2] w^2 + d1 * crank acceleration
    assert np.allclose(s.accelerations["rocker"], d2 * w ** 2 + d1 * 2.0, atol=1e-5)


def test_streamed_chunks_keep_the_drive_timing():
    """The CLI solves long sweeps in chunks; each chunk starts at the drive's rate and time
    where the one before ended, so the rows equal one whole sweep's."""
    from jointwise.report import sweep_chunks
    m = jointwise.from_dict(slider_crank(15.0, 60.0, 8.0, 30.0))
    whole = m.sweep("crank", np.linspace(30, 750, 50), speed=200.0, acceleration=-20.0)
    parts = list(sweep_chunks(m, "crank", 30.0, 750.0, 50, chunk=7,
                              timing={"speed": 200.0, "acceleration": -20.0}))
    assert [k for k, _ in parts] == list(range(0, 50, 7))
    t = np.concatenate([sw.time for _, sw in parts])
    assert np.allclose(t, whole.time, atol=1e-12)
    for key in ("velocities", "accelerations"):
        for c in m.coordinates:
            got = np.concatenate([getattr(sw, key)[c] for _, sw in parts])
            assert np.allclose(got, getattr(whole, key)[c], rtol=1e-9, atol=1e-9), (key, c)
