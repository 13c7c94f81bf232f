"""Plate cam layout (jointwise.cam, ``jointwise cam``) checked against independent constructions.

References
----------
- Norton, *Design of Machinery*, ch. 8 (radial cams, translating roller follower): pressure
  angle tan(phi) = (ds/dtheta - e) / (s + sqrt(Rp^2 - e^2)), Rp the prime-circle radius
  (base radius + roller radius); undercutting where the pitch curve's radius of curvature
  is below the roller radius on a convex part.
- The pitch curve is rebuilt here with scipy's Rotation (the roller centre seen from the
  turning cam); the pressure angle and the radius of curvature are measured numerically on
  the generated curves (central differences), not taken from the module's formulas.
"""
import json
import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import jointwise
from jointwise.cam import cam_profile, cam_warnings

from mechanisms import base, revolute, run_cli, write

SEGMENTS = [[0, 100, 0, 12, "cycloidal"], [100, 160, 12, 12, "dwell"],
            [160, 280, 12, 0, "polynomial-4567"], [280, 360, 0, 0, "dwell"]]


def _file(tmp_path=None, coupling=None):
    m = base("Fennwick test cam", links=["cam", "follower", "wheel"])
    m["joints"]["cam_shaft"] = revolute("frame", "cam", (0, 0), drive=True)
    m["joints"]["lift"] = {"type": "prismatic", "parent": "frame", "child": "follower",
                           "point": [0.0, 40.0, 0.0], "axis": [0.0, 1.0, 0.0]}
    m["joints"]["wheel_pin"] = revolute("frame", "wheel", (80, 0))
    m["couplings"] = {
        "cam": coupling or {"leader": "cam_shaft", "follower": "lift", "law": "program", "segments": SEGMENTS},
        "gear": {"leader": "cam_shaft", "follower": "wheel_pin", "ratio": -0.5},
    }
    if m["couplings"]["cam"]["follower"] == "wheel_pin":
        del m["couplings"]["gear"]  # one law per follower
    if tmp_path is None:
        return jointwise.from_dict(m, source="cam.toml")
    return write(m, tmp_path / "cam.toml")


def _rows(mech, rb, rr, e, thetas):
    return cam_profile(mech, "cam", rb, rr, e, thetas)


@pytest.mark.parametrize("rb, rr, e", [(30.0, 8.0, 0.0), (30.0, 8.0, 6.0), (25.0, 0.0, -4.0)])
def test_pitch_curve_against_rotated_roller_centre(rb, rr, e):
    mech = _file()
    th = np.radians(np.arange(0.0, 360.0, 2.5))
    res = _rows(mech, rb, rr, e, th)
    law = mech.couplings["cam"].law
    s = law.evaluate(th)[0]  # lowest follower value is 0 here
    d = math.sqrt((rb + rr) ** 2 - e ** 2)
    centre = np.stack([np.full(th.shape, e), d + s, np.zeros(th.shape)], axis=1)
    # the cam has turned by theta about +z: a point still in the frame is R_z(-theta) p in the cam
    want = Rotation.from_euler("z", -th[:, None]).apply(centre)[:, :2]
    assert np.allclose(res["pitch"], want, atol=1e-12)
    assert np.allclose(np.linalg.norm(res["pitch"] - res["profile"], axis=1), rr, atol=1e-12)
    if rr == 0:
        assert np.allclose(res["profile"], res["pitch"])


@pytest.mark.parametrize("e", [0.0, 7.0, -5.0])
def test_pressure_angle_formula_and_generated_curve(e):
    rb, rr = 28.0, 6.0
    mech = _file()
    th = np.radians(np.arange(1.0, 359.0, 3.0))
    h = 1e-6
    res, ahead, behind = (_rows(mech, rb, rr, e, th + k) for k in (0.0, h, -h))
    # Norton's formula
    s, ds = res["lift"], res["velocity"]
    d = math.sqrt((rb + rr) ** 2 - e ** 2)
    assert np.allclose(np.tan(res["pressure_angle"]), (ds - e) / (s + d), atol=1e-12)
    # measured on the generated pitch curve: its tangent, turned back into the still frame,
    # against the line of lift (+y); the pressure angle is the normal's angle from it
    tangent = (ahead["pitch"] - behind["pitch"]) / (2 * h)
    still = Rotation.from_euler("z", th[:, None]).apply(np.c_[tangent, np.zeros(len(th))])[:, :2]
    normal = np.stack([-still[:, 1], still[:, 0]], axis=1)
    measured = np.arctan2(normal[:, 0], normal[:, 1])
    assert np.allclose(-measured, res["pressure_angle"], atol=1e-6)


def test_radius_of_curvature_against_numerical_curvature():
    rb, rr, e = 30.0, 8.0, 4.0
    mech = _file()
    th = np.radians(np.arange(2.0, 358.0, 4.0))
    h = 1e-4
    res, ahead, behind = (_rows(mech, rb, rr, e, th + k) for k in (0.0, h, -h))
    for curve, radius in (("profile", "profile_radius"), ("pitch", "pitch_radius")):
        p0, p1, pm = res[curve], ahead[curve], behind[curve]
        d1 = (p1 - pm) / (2 * h)
        d2 = (p1 - 2 * p0 + pm) / (h * h)
        cross = d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0]
        rho = -np.linalg.norm(d1, axis=1) ** 3 / cross  # the cam's outline runs clockwise
        assert np.allclose(rho, res[radius], rtol=2e-5, atol=1e-4), curve
    # on the base-circle dwell the profile is the base circle itself
    dwell = (th > math.radians(282)) & (th < math.radians(358))
    assert np.allclose(res["profile_radius"][dwell], rb, atol=1e-9)
    assert np.allclose(np.linalg.norm(res["profile"][dwell], axis=1), rb, atol=1e-9) if e == 0 else True


def test_warnings_name_the_leader_angles():
    mech = _file()
    ok = cam_profile(mech, "cam", 40.0, 8.0)
    assert cam_warnings(ok) == []
    steep = cam_profile(mech, "cam", 6.0, 4.0)
    phi = np.degrees(np.abs(steep["pressure_angle"]))
    assert phi.max() > 30
    w = cam_warnings(steep)
    assert any("pressure angle above 30 deg" in x for x in w)
    first = int(np.flatnonzero(phi > 30)[0])
    assert f"at leader {first:g} to" in next(x for x in w if "pressure" in x)
    under = cam_profile(mech, "cam", 3.0, 25.0)
    rho = under["pitch_radius"]
    flagged = (rho > 0) & (rho < 25.0)
    assert flagged.any()
    text = next(x for x in cam_warnings(under) if x.startswith("undercutting"))
    assert f"{int(np.flatnonzero(flagged)[0]):g} to" in text


def test_cli_cam_csv_json_and_exit_codes(tmp_path):
    path = _file(tmp_path)
    r = run_cli("cam", path, "--coupling", "cam", "--base-radius", 30, "--roller", 8, "--offset", 3)
    assert r.code == 0, r
    lines = r.out.strip().splitlines()
    assert lines[0] == "leader,lift,pitch_x,pitch_y,profile_x,profile_y,pressure_angle,curvature_radius"
    assert len(lines) == 361 and "nan" not in r.out.lower() and "inf" not in r.out.lower()
    row = [float(v) for v in lines[31].split(",")]
    ref = cam_profile(_file(), "cam", 30.0, 8.0, 3.0, np.radians([30.0]))
    assert row[0] == 30.0 and row[1] == pytest.approx(ref["lift"][0], abs=1e-12)
    assert row[6] == pytest.approx(math.degrees(ref["pressure_angle"][0]), abs=1e-12)
    out = tmp_path / "cam.json"
    r = run_cli("cam", path, "--coupling", "cam", "--base-radius", 6, "--roller", 4, "--format", "json", "--out", out)
    assert r.code == 0 and "warning: pressure angle above 30 deg" in r.err
    data = json.loads(out.read_text())
    assert len(data["leader"]) == 360 and data["warnings"] and data["angle_unit"] == "deg"
    for args, code, words in [
        (("--coupling", "gear", "--base-radius", 30, "--roller", 8), 3, "linear, not a motion law"),
        (("--coupling", "nope", "--base-radius", 30, "--roller", 8), 2, "no coupling named 'nope'"),
        (("--coupling", "cam", "--base-radius", 0, "--roller", 8), 2, "base radius must be positive"),
        (("--coupling", "cam", "--base-radius", 30, "--roller", -1), 2, "roller radius"),
        (("--coupling", "cam", "--base-radius", 3, "--roller", 2, "--offset", 5), 2, "prime-circle"),
        (("--coupling", "cam", "--base-radius", "nan", "--roller", 2), 2, "finite"),
    ]:
        target = tmp_path / "never.csv"
        r = run_cli("cam", path, *args, "--out", target)
        assert r.code == code and words in r.err and "Traceback" not in r.err, (args, r)
        assert not target.exists()


@pytest.mark.parametrize("coupling, words", [
    ({"leader": "cam_shaft", "follower": "wheel_pin", "law": "geneva", "slots": 4}, "geneva"),
    ({"leader": "lift", "follower": "wheel_pin", "law": "table", "points": [[0, 0], [5, 10], [9, 20]]}, "slides"),
    ({"leader": "cam_shaft", "follower": "wheel_pin", "law": "program",
      "segments": [[0, 180, 0, 30, "harmonic"], [180, 360, 30, 0, "harmonic"]]}, "turns"),
    ({"leader": "cam_shaft", "follower": "lift", "law": "program",
      "segments": [[0, 180, 0, 30, "harmonic"], [180, 360, 30, 40, "harmonic"]]}, "end where it starts"),
])
def test_cli_cam_exit_3_for_laws_a_cam_cannot_make(tmp_path, coupling, words):
    path = _file(tmp_path, coupling)
    r = run_cli("cam", path, "--coupling", "cam", "--base-radius", 30, "--roller", 8)
    assert r.code == 3 and words in r.err, r


def test_sample_cam_stays_below_30_degrees_and_is_not_undercut():
    import os
    here = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "blend_samples")
    mech = jointwise.load(os.path.join(here, "kittiwake_index.toml"))
    res = cam_profile(mech, "marking_cam", 22.0, 5.0)
    assert cam_warnings(res) == []
    assert np.degrees(np.abs(res["pressure_angle"])).max() < 30
