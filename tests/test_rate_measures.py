"""Rates of the measures at a drive speed: ``M.vel``/``M.acc`` of rate, distance and angle
measures, ``M.vx..M.az`` of points, empty where undefined (issue 12).

References
----------
- Offset slider-crank position x(t) = r cos t + sqrt(l^2 - (r sin t - e)^2) (any
  machine-design text, e.g. Norton, *Design of Machinery*, ch. 4; from memory).  Its
  first three derivatives are written out exactly below (u = r sin t - e, S = sqrt(l^2 -
  u^2)); the rate measure d(slide)/d(crank) is x'(t), its time derivatives x'' t_dot and
  x''' t_dot^2 + x'' t_ddot (chain rule).
- Four-bar velocity and acceleration analysis from the complex vector loop (Norton, ch. 6
  and 7; the same 2x2 systems as tests/test_rates.py): the rocker's speed ratio w4 / w2
  has the time derivative (a4 w2 - w4 a2) / w2^2 (quotient rule).  The transmission angle
  between coupler and rocker is t4 - t3 (mod 180 deg): its rate is w4 - w3.
- Cycloidal rise s = h (u - sin(2 pi u) / (2 pi)), u = x / b: s' = (h/b)(1 - cos 2 pi u),
  s'' = 2 pi (h/b^2) sin 2 pi u, s''' = 4 pi^2 (h/b^3) cos 2 pi u (standard cam motion
  formulas; from memory, and checked here against differences of the law's own s'').
- Eighth-order central differences of the rate measure's values over a sweep (the
  standard central-difference weights 4/5, -1/5, 4/105, -1/280 and -205/72, 8/5, -1/5,
  8/315, -1/560).
"""
import json
import math

import numpy as np
import pytest

import jointwise
from mechanisms import four_bar, four_bar_positions, run_cli, slider_crank, write
from test_rates import _four_bar_rates

K = math.pi / 180  # rad per degree


def _slider(r, l, e, t):
    """x', x'', x''' of the offset slider-crank (per radian of crank)."""
    u, u1, u2, u3 = r * np.sin(t) - e, r * np.cos(t), -r * np.sin(t), -r * np.cos(t)
    S = np.sqrt(l * l - u * u)
    x1 = -r * np.sin(t) - u * u1 / S
    x2 = -r * np.cos(t) - (u1 * u1 + u * u2) / S - (u * u1) ** 2 / S ** 3
    x3 = (r * np.sin(t) - (3 * u1 * u2 + u * u3) / S - 3 * u * u1 * (u1 * u1 + u * u2) / S ** 3
          - 3 * (u * u1) ** 3 / S ** 5)
    return x1, x2, x3


def test_slider_third_derivative_formula():
    # the x''' written above against central differences of the exact x''
    t = np.linspace(0, 2 * math.pi, 37)
    h = 1e-5
    fd = (_slider(15.0, 60.0, 8.0, t + h)[1] - _slider(15.0, 60.0, 8.0, t - h)[1]) / (2 * h)
    assert np.allclose(_slider(15.0, 60.0, 8.0, t)[2], fd, atol=1e-7)


def _press(r, l, e, theta=30.0):
    data = slider_crank(r, l, e, theta)
    data["measures"] = {"stroke_rate": {"type": "rate", "of": "slide", "per": "crank"},
                        "crank_per_mm": {"type": "rate", "of": "crank", "per": "slide"}}
    return jointwise.from_dict(data)


@pytest.mark.parametrize("rpm, acc", [(60.0, 0.0), (120.0, 600.0), (-90.0, -200.0)])
def test_slider_crank_rate_measure_against_exact_derivatives(rpm, acc):
    r, l, e = 15.0, 60.0, 8.0
    m = _press(r, l, e)
    w = rpm * 6.0
    th = np.linspace(30, 30 + math.copysign(720, w), 97)
    s = m.sweep("crank", th, speed=w, acceleration=acc)
    assert s.converged.all()
    x1, x2, x3 = _slider(r, l, e, np.radians(th))
    om, al = np.radians(w + acc * s.time), math.radians(acc)     # rad/s, rad/s^2
    # stroke_rate = x' K (mm per degree)
    assert np.allclose(s.measures["stroke_rate"], x1 * K, atol=1e-12)
    v, a = s.measure_velocities["stroke_rate"], s.measure_accelerations["stroke_rate"]
    assert np.allclose(v, x2 * om * K, rtol=1e-9, atol=1e-9 * np.abs(x2 * om * K).max())
    want = (x3 * om ** 2 + x2 * al) * K
    assert np.allclose(a, want, rtol=1e-8, atol=1e-8 * np.abs(want).max())
    # crank_per_mm = 1 / (x' K): d/dt = -x'' om / (x'^2 K), d2/dt2 from the quotient rule
    inv1 = -x2 / (x1 ** 2 * K)
    inv2 = (-x3 * x1 + 2 * x2 ** 2) / (x1 ** 3 * K)
    assert np.allclose(s.measure_velocities["crank_per_mm"], inv1 * om, rtol=1e-8)
    assert np.allclose(s.measure_accelerations["crank_per_mm"], inv2 * om ** 2 + inv1 * al, rtol=1e-7)


def test_dead_point_of_per_leaves_the_rate_empty(tmp_path):
    """Centred slider-crank (e = 0): the slide stands still at 0 and 180 degrees of crank, so
    d(crank)/d(slide) has no rate there: NaN in Python, an empty cell in the CSV, null in
    JSON; every other row holds the closed form."""
    r, l = 15.0, 60.0
    m = _press(r, l, 0.0, 0.0)
    th = np.linspace(0, 360, 25)                 # 0, 15, ..., 360: dead points at 0, 180, 360
    s = m.sweep("crank", th, speed=360.0)
    dead = np.isin(th, [0.0, 180.0, 360.0])
    v, a = s.measure_velocities["crank_per_mm"], s.measure_accelerations["crank_per_mm"]
    assert np.isnan(v[dead]).all() and np.isnan(a[dead]).all()
    assert np.isfinite(v[~dead]).all() and np.isfinite(a[~dead]).all()
    x1, x2, x3 = _slider(r, l, 0.0, np.radians(th[~dead]))
    om = math.radians(360.0)
    assert np.allclose(v[~dead], -x2 / (x1 ** 2 * K) * om, rtol=1e-8)
    # stroke_rate's per is the crank, which always moves: defined everywhere
    assert np.isfinite(s.measure_velocities["stroke_rate"]).all()
    path = tmp_path / "press.toml"
    data = slider_crank(r, l, 0.0, 0.0)
    data["measures"] = {"crank_per_mm": {"type": "rate", "of": "crank", "per": "slide"}}
    write(data, path)
    args = ("sweep", path, "--drive", "crank", "--from", 0, "--to", 360, "--steps", 25, "--speed", "60rpm")
    r1 = run_cli(*args)
    assert r1.code == 0, r1
    assert "nan" not in r1.out.lower() and "inf" not in r1.out.lower()
    head = r1.out.splitlines()[0].split(",")
    assert "crank_per_mm.vel" in head and "crank_per_mm.acc" in head
    rows = [dict(zip(head, ln.split(","))) for ln in r1.out.strip().splitlines()[1:]]
    for k, row in enumerate(rows):
        empty = row["crank_per_mm.vel"] == "" and row["crank_per_mm.acc"] == ""
        assert empty == bool(dead[k]), (k, row)
    out = tmp_path / "press.json"
    r2 = run_cli(*args, "--format", "json", "--out", out)
    assert r2.code == 0, r2
    data = json.loads(out.read_text())
    vel = data["measure_velocities"]["crank_per_mm"]
    assert [x is None for x in vel] == list(dead)


def _central(f, x, h):
    """First and second derivatives of f at x by eighth-order central differences."""
    c1 = [(1, 4 / 5), (2, -1 / 5), (3, 4 / 105), (4, -1 / 280)]
    c2 = [(1, 8 / 5), (2, -1 / 5), (3, 8 / 315), (4, -1 / 560)]
    f0 = f(x)
    d1 = sum(c * (f(x + j * h) - f(x - j * h)) for j, c in c1) / h
    d2 = (-205 / 72 * f0 + sum(c * (f(x + j * h) + f(x - j * h)) for j, c in c2)) / h ** 2
    return d1, d2


def _rocker_file(a, b, c, d):
    data = four_bar(a, b, c, d, 60.0)
    data["measures"] = {"ratio": {"type": "rate", "of": "rocker", "per": "crank"},
                        "back": {"type": "rate", "of": "crank", "per": "rocker"},
                        "transmission": {"type": "angle", "a": {"link": "coupler", "axis": [1, 0, 0]},
                                         "b": {"link": "rocker_arm", "axis": [1, 0, 0]}}}
    (ax, ay), (bx, by), _ = four_bar_positions(a, b, c, d, 60.0)
    data["measures"]["transmission"]["a"]["axis"] = [bx - ax, by - ay, 0.0]
    data["measures"]["transmission"]["b"]["axis"] = [bx - d, by, 0.0]
    return jointwise.from_dict(data)


def test_four_bar_ratio_against_the_vector_loop_and_differences():
    a, b, c, d = 1.0, 3.0, 2.5, 3.0
    m = _rocker_file(a, b, c, d)
    th = np.array([75.0, 140.0, 222.0, 305.0])
    w, acc = 600.0, 250.0                                   # deg/s, deg/s^2
    s = m.sweep("crank", np.concatenate([[60.0], th]), speed=w, acceleration=acc)
    assert s.converged.all()
    om = np.radians(w + acc * s.time[1:])
    al = math.radians(acc)
    t3, t4, w3, w4, a3, a4 = np.array([_four_bar_rates(a, b, c, d, math.radians(t), wi, al)[:, 0]
                                       for t, wi in zip(th, om)]).T
    # the speed ratio w4 / w2 (deg per deg) and its rate (a4 w2 - w4 a2) / w2^2 (1/s)
    assert np.allclose(s.measures["ratio"][1:], w4 / om, rtol=1e-9)
    assert np.allclose(np.radians(s.measure_velocities["ratio"][1:]) / K, (a4 * om - w4 * al) / om ** 2,
                       rtol=1e-8)
    # the transmission angle's rate is +-(w4 - w3) (deg/s)
    assert np.allclose(np.abs(s.measure_velocities["transmission"][1:]), np.degrees(np.abs(w4 - w3)), rtol=1e-8)
    assert np.allclose(np.abs(s.measure_accelerations["transmission"][1:]), np.degrees(np.abs(a4 - a3)),
                       rtol=1e-7)
    # both rate measures' accelerations against eighth-order differences of their values
    h = 0.05                                                 # deg
    for name in ("ratio", "back"):
        def values(x, name=name):
            return m.sweep("crank", np.concatenate([[60.0], x])).measures[name][1:]
        d1, d2 = _central(values, th, h)                     # per degree, per degree^2
        wd = w + acc * s.time[1:]
        assert np.allclose(s.measure_velocities[name][1:], d1 * wd, rtol=1e-8), name
        assert np.allclose(s.measure_accelerations[name][1:], d2 * wd ** 2 + d1 * acc, rtol=1e-6), name


def test_cam_rate_measure_third_derivative():
    """A cycloidal rise (h = 10 mm over b = 120 deg): d(lift)/d(cam_shaft) = s'(x) K; its
    acceleration needs s''' (from the law's exact s'' by a central difference)."""
    from test_couplings import PROGRAM, _cam_file
    data = _cam_file(PROGRAM)
    data["measures"] = {"lift_rate": {"type": "rate", "of": "lift", "per": "cam_shaft"}}
    m = jointwise.from_dict(data)
    th = np.linspace(2, 118, 59)
    w, acc = 600.0, -100.0
    s = m.sweep("cam_shaft", th, speed=w, acceleration=acc)
    hh, bb = 10.0, math.radians(120.0)
    u = np.radians(th) / bb
    s1 = hh / bb * (1 - np.cos(2 * math.pi * u))
    s2 = 2 * math.pi * hh / bb ** 2 * np.sin(2 * math.pi * u)
    s3 = 4 * math.pi ** 2 * hh / bb ** 3 * np.cos(2 * math.pi * u)
    om, al = np.radians(w + acc * s.time), math.radians(acc)
    assert np.allclose(s.measures["lift_rate"], s1 * K, rtol=1e-10)
    assert np.allclose(s.measure_velocities["lift_rate"], s2 * om * K, rtol=1e-9, atol=1e-9)
    want = (s3 * om ** 2 + s2 * al) * K
    assert np.allclose(s.measure_accelerations["lift_rate"], want, rtol=1e-6, atol=1e-6 * np.abs(want).max())


def test_unreachable_rows_leave_every_new_column_empty(tmp_path):
    """A non-Grashof four-bar's crank cannot turn fully: on those rows every rate column
    (coordinates, points, distances, angles, rate measures) is empty, JSON null, never NaN."""
    a, b, c, d = 2.0, 2.0, 2.2, 3.5
    data = four_bar(a, b, c, d, 60.0)
    (ax, ay), (bx, by), _ = four_bar_positions(a, b, c, d, 60.0)
    data["measures"] = {
        "tip": {"type": "point", "link": "coupler", "at": [bx, by + 0.5, 0.0]},
        "span": {"type": "distance", "a": {"link": "crank_arm", "at": [ax, ay, 0.0]},
                 "b": {"link": "frame", "at": [d, 0.0, 0.0]}},
        "transmission": {"type": "angle", "a": {"link": "coupler", "axis": [bx - ax, by - ay, 0.0]},
                         "b": {"link": "rocker_arm", "axis": [bx - d, by, 0.0]}},
        "ratio": {"type": "rate", "of": "rocker", "per": "crank"}}
    path = tmp_path / "rocker.json"           # a JSON mechanism file: inline tables
    path.write_text(json.dumps(data))
    args = ("sweep", path, "--drive", "crank", "--from", 60, "--to", 300, "--steps", 49, "--speed", "30rpm")
    r = run_cli(*args)
    assert r.code == 3, r
    assert "nan" not in r.out.lower() and "inf" not in r.out.lower()
    head = r.out.splitlines()[0].split(",")
    new = ([f"tip.{k}" for k in ("vx", "vy", "vz", "ax", "ay", "az")]
           + ["span.vel", "span.acc", "transmission.vel", "transmission.acc", "ratio.vel", "ratio.acc"])
    assert all(col in head for col in new)
    rows = [dict(zip(head, ln.split(","))) for ln in r.out.strip().splitlines()[1:]]
    bad = [row for row in rows if row["converged"] == "0"]
    good = [row for row in rows if row["converged"] == "1"]
    assert bad and good
    assert all(row[col] == "" for row in bad for col in new)
    assert all(row[col] != "" for row in good for col in new)
    out = tmp_path / "rates.json"
    r = run_cli(*args, "--format", "json", "--out", out)
    assert r.code == 3, r
    text = out.read_text()
    assert "NaN" not in text and "Infinity" not in text
    js = json.loads(text)
    conv = [p["converged"] for p in js["poses"]]
    for key in ("measure_velocities", "measure_accelerations"):
        assert set(js[key]) == {"tip", "span", "transmission", "ratio"}
        for name, vals in js[key].items():
            for ok, v in zip(conv, vals):
                cells = v if name == "tip" else [v]          # a point: [x, y, z] per row
                assert all((x is None) == (not ok) for x in cells), (key, name)


def test_geneva_rate_measure_and_its_undefined_jerk():
    """Six-slot external Geneva wheel, standard proportions (lam = sin(pi / 6)): while the
    pin drives, b' = lam (cos a - lam) / d, d = 1 - 2 lam cos a + lam^2 (the closed form
    of test_couplings), so b'' = -lam (1 - lam^2) sin a / d^2 and b''' = -lam (1 - lam^2)
    (cos a d - 4 lam sin^2 a) / d^3 (differentiated by hand, checked against differences
    here).  The wheel's acceleration jumps where the pin enters and leaves (a = +-60 deg):
    the rate measure's acceleration is undefined (empty) exactly there, zero in the dwell."""
    from mechanisms import base, revolute
    data = base("Fennwick test index", links=["crank", "wheel"])
    data["joints"]["crank"] = revolute("frame", "crank", (0, 0), drive=True)
    data["joints"]["wheel"] = revolute("frame", "wheel", (100, 0))
    data["couplings"] = {"index": {"leader": "crank", "follower": "wheel", "law": "geneva", "slots": 6}}
    data["measures"] = {"index_ratio": {"type": "rate", "of": "wheel", "per": "crank"}}
    m = jointwise.from_dict(data)
    th = np.linspace(-90, 90, 61)                        # 3 deg steps: +-60 are rows
    w, acc = 360.0, 120.0
    s = m.sweep("crank", th, speed=w, acceleration=acc)
    lam = math.sin(math.pi / 6)
    a = np.radians(th)
    d = 1 - 2 * lam * np.cos(a) + lam * lam
    b2 = -lam * (1 - lam * lam) * np.sin(a) / d ** 2
    b3 = -lam * (1 - lam * lam) * (np.cos(a) * d - 4 * lam * np.sin(a) ** 2) / d ** 3
    h = 1e-5
    bp = -lam * (1 - lam * lam) * np.sin(a + h) / (1 - 2 * lam * np.cos(a + h) + lam * lam) ** 2
    bm = -lam * (1 - lam * lam) * np.sin(a - h) / (1 - 2 * lam * np.cos(a - h) + lam * lam) ** 2
    assert np.allclose(b3, (bp - bm) / (2 * h), atol=1e-6)  # the hand derivative
    inside, edge = np.abs(th) < 60, np.isclose(np.abs(th), 60)
    om, al = np.radians(w + acc * s.time), math.radians(acc)
    v, ac = s.measure_velocities["index_ratio"], s.measure_accelerations["index_ratio"]
    assert np.allclose(v[inside], b2[inside] * om[inside], rtol=1e-9, atol=1e-12)
    want = b3 * om ** 2 + b2 * al
    assert np.allclose(ac[inside], want[inside], rtol=1e-6, atol=1e-6 * np.abs(want[inside]).max())
    assert np.isnan(ac[edge]).all() and edge.sum() == 2
    dwell = ~inside & ~edge
    assert (v[dwell] == 0).all() and (ac[dwell] == 0).all()


def test_plot_at_a_speed_names_a_unit_on_every_axis(tmp_path, monkeypatch):
    """Every axis of a --speed plot (left and right) names its unit(s), every line its own,
    and a rate measure's change is in its own unit per s (1/s for deg/deg)."""
    pytest.importorskip("matplotlib")
    import re

    import matplotlib.pyplot as plt

    from jointwise.report import plot_sweep
    r, l, e = 15.0, 60.0, 8.0
    data = slider_crank(r, l, e, 30.0)
    data["measures"] = {"stroke_rate": {"type": "rate", "of": "slide", "per": "crank"},
                        "turn": {"type": "rate", "of": "big_end", "per": "crank"},
                        "pin": {"type": "point", "link": "crank_arm", "at": [r * math.cos(K * 30), r * math.sin(K * 30), 0]}}
    m = jointwise.from_dict(data)
    s = m.sweep("crank", np.linspace(30, 390, 73), speed=720.0)
    figs = []
    monkeypatch.setattr(plt, "close", lambda fig=None: figs.append(fig))
    plot_sweep(m, s, "crank", str(tmp_path / "p.png"))
    assert (tmp_path / "p.png").stat().st_size > 0
    fig = figs[-1]
    unit = re.compile(r"\[[^\]]+\]")
    labels = [ax.get_ylabel() for ax in fig.axes]
    assert all(unit.search(t) for t in labels), labels
    lines = [ln.get_label() for ax in fig.axes for ln in ax.get_lines() if not ln.get_label().startswith("_")]
    assert lines and all(unit.search(t) for t in lines), lines
    assert any("velocity [deg/s]" == t for t in labels) and any("[mm/s]" in t for t in labels)
    assert "stroke_rate.vel [(mm/deg)/s]" in lines and "turn.vel [1/s]" in lines
    assert any(t.startswith("pin.vx [mm/s]") for t in lines)
    plt.close("all")


def test_two_freedoms_with_one_held_and_a_measure_of_another_motion():
    """Five-bar (two freedoms) driven at j0 with j4 held: d(j2)/d(j0) follows the sweep's
    motion, its rates match fourth-order central differences of its values; a measure
    whose ``of`` is the held j4 releases it (another motion than the sweep's): empty."""
    from mechanisms import five_bar
    data = five_bar()
    data["measures"] = {"follow": {"type": "rate", "of": "j2", "per": "j0"},
                        "other": {"type": "rate", "of": "j4", "per": "j0"}}
    m = jointwise.from_dict(data)
    x0, h, w, acc = 5.0, 0.01, 10.0, 3.0
    vals = x0 + h * np.arange(-2, 3)
    s = m.sweep("j0", np.concatenate([[0.0], vals]), held={"j4": 0.0}, speed=w, acceleration=acc)
    assert s.converged.all()
    M = s.measures["follow"][1:]
    d1 = (-M[4] + 8 * M[3] - 8 * M[1] + M[0]) / (12 * h)
    d2 = (-M[4] + 16 * M[3] - 30 * M[2] + 16 * M[1] - M[0]) / (12 * h * h)
    wd = w + acc * s.time[3]
    assert s.measure_velocities["follow"][3] == pytest.approx(d1 * wd, rel=1e-7)
    assert s.measure_accelerations["follow"][3] == pytest.approx(d2 * wd ** 2 + d1 * acc, rel=1e-5)
    assert np.isnan(s.measure_velocities["other"]).all() and np.isnan(s.measure_accelerations["other"]).all()


def test_short_rise_keeps_its_third_derivative():
    """A 3 degree cycloidal rise (f''' up to 4 pi^2 h / b^3, large): the jump test of the
    third derivative finds no jump where f'' is smooth, and the value holds the closed form."""
    from test_couplings import _cam_file
    prog = {"law": "program", "segments": [[0, 3, 0, 10, "cycloidal"], [3, 180, 10, 10, "dwell"],
                                           [180, 300, 10, 0, "polynomial-4567"], [300, 360, 0, 0, "dwell"]]}
    data = _cam_file(prog)
    data["measures"] = {"lift_rate": {"type": "rate", "of": "lift", "per": "cam_shaft"}}
    m = jointwise.from_dict(data)
    th = np.linspace(0.0, 360.0, 3601)
    s = m.sweep("cam_shaft", th, speed=360.0)
    acc = s.measure_accelerations["lift_rate"]
    assert np.isfinite(acc).all()
    bb = math.radians(3.0)
    inside = (th > 0) & (th < 3)
    u = np.radians(th[inside]) / bb
    s3 = 4 * math.pi ** 2 * 10.0 / bb ** 3 * np.cos(2 * math.pi * u)
    assert np.allclose(acc[inside], s3 * math.radians(360.0) ** 2 * K, rtol=1e-6)
