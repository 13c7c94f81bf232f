"""Posing by target (issue 11) against closed forms and scipy.

References
----------
* Freudenstein's equation (F. Freudenstein, 1955; Norton, *Design of Machinery*, sec. 4.5):
  K1 cos t4 - K2 cos t2 + K3 = cos(t2 - t4), K1 = d/a, K2 = d/c,
  K3 = (a^2 - b^2 + c^2 + d^2) / (2 a c); closed form t4 = 2 atan2(-B +- sqrt(B^2 - 4AC), 2A),
  A = cos t2 - K1 - K2 cos t2 + K3, B = -2 sin t2, C = K1 - (K2 + 1) cos t2 + K3 (form
  quoted from memory).
* Coupler point (Norton, sec. 4.11): P = A + p (cos(t3 + d3), sin(t3 + d3)), t3 the
  coupler's direction A -> B, p and d3 the point's distance and angle on the coupler.
* Offset slider-crank: x = r cos t + sqrt(l^2 - (r sin t - e)^2); inverted,
  cos(t - psi) = (x^2 + e^2 + r^2 - l^2) / (2 r rho), rho = |(x, e)|, psi = atan2(e, x).
* Right-hand thread: turned positively about its axis by the right-hand rule, a screw
  advances along the axis relative to its nut (ISO 5408's definition of a right-hand
  thread, from memory); a nut that cannot turn therefore moves back along the axis of
  a screw that turns but cannot slide: lead 4 mm, 10 mm of nut travel = 2.5 turns = 900 deg.
* Nearest point of a curve: dense sampling refined by ``scipy.optimize.minimize_scalar``.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

import jointwise
from jointwise import SpecError

import mechanisms as M
from mechanisms import no_traceback, run_cli

# invented demo sizes: a Grashof crank-rocker (25 + 80 <= 55 + 70), coupler point 35 mm at 35 deg
A, B, C, D = 25.0, 80.0, 55.0, 70.0
P, DELTA = 35.0, math.radians(35.0)
HOME = 60.0


def load(d):
    return jointwise.from_dict(d, source="test.toml")


def freudenstein_t4(t2, sign):
    k1, k2, k3 = D / A, D / C, (A * A - B * B + C * C + D * D) / (2 * A * C)
    a_ = math.cos(t2) - k1 - k2 * math.cos(t2) + k3
    b_ = -2 * math.sin(t2)
    c_ = k1 - (k2 + 1) * math.cos(t2) + k3
    return 2 * math.atan2(-b_ + sign * math.sqrt(b_ * b_ - 4 * a_ * c_), 2 * a_)


def coupler_point(t2, sign):
    t4 = freudenstein_t4(t2, sign)
    ax, ay = A * math.cos(t2), A * math.sin(t2)
    bx, by = D + C * math.cos(t4), C * math.sin(t4)
    t3 = math.atan2(by - ay, bx - ax)
    return np.array([ax + P * math.cos(t3 + DELTA), ay + P * math.sin(t3 + DELTA), 0.0])


def home_sign():
    """The root of Freudenstein's closed form that is the builder's branch at home."""
    th4 = M.four_bar_positions(A, B, C, D, HOME)[2]
    return min((+1, -1), key=lambda s: abs(math.remainder(freudenstein_t4(math.radians(HOME), s)
                                                           - math.radians(th4), 2 * math.pi)))


def four_bar_with_point(**kw):
    d = M.four_bar(A, B, C, D, HOME, **kw)
    d["measures"] = {"hook": {"type": "point", "link": "coupler",
                              "at": [float(x) for x in coupler_point(math.radians(HOME), home_sign())]}}
    return d


def hook_at(pose, mech):
    Dm = pose.links["coupler"]
    return Dm[:3, :3] @ np.array(mech.measures["hook"].a[1]) + Dm[:3, 3]


# -- four-bar coupler curve ------------------------------------------------------------------------
def test_home_point_is_the_closed_form_coupler_point():
    m = load(four_bar_with_point())
    p = m.pose()
    # the measure was placed by the closed form at home; check the core puts it there at
    # another crank angle too, so the closed form and the model agree before targeting
    q = m.pose({"crank": 100.0})
    np.testing.assert_allclose(hook_at(q, m), coupler_point(math.radians(100.0), home_sign()), atol=1e-8)
    np.testing.assert_allclose(hook_at(p, m), coupler_point(math.radians(HOME), home_sign()), atol=1e-9)


@pytest.mark.parametrize("phi", [35.0, 82.0, 105.0])
def test_four_bar_target_on_coupler_curve_gives_back_crank_angle(phi):
    m = load(four_bar_with_point())
    sign = home_sign()
    target = coupler_point(math.radians(phi), sign)
    p = m.pose(targets={"hook": target})
    assert p.reached and p.converged
    assert p.target_error["hook"] < 1e-6 * m.size
    assert p.joints["crank"] == pytest.approx(phi, abs=1e-6)
    # same branch: the rocker is the closed form's root of the home branch
    assert math.radians(p.joints["rocker"]) == pytest.approx(
        math.radians(HOME) * 0 + freudenstein_t4(math.radians(phi), sign) + 2 * math.pi * round(
            (math.radians(p.joints["rocker"]) - freudenstein_t4(math.radians(phi), sign)) / (2 * math.pi)),
        abs=1e-8)
    assert p.residual <= 1e-9


def curve_distance(target, sign):
    """Nearest distance from ``target`` to the coupler curve: dense sampling, then scipy."""
    ts = np.radians(np.arange(0.0, 360.0, 0.1))
    d = np.array([np.linalg.norm(coupler_point(t, sign) - target) for t in ts])
    k = int(np.argmin(d))
    res = minimize_scalar(lambda t: np.linalg.norm(coupler_point(t, sign) - target),
                          bounds=(ts[k] - math.radians(0.2), ts[k] + math.radians(0.2)),
                          method="bounded", options={"xatol": 1e-12})
    return float(res.fun), math.degrees(res.x)


@pytest.mark.parametrize("phi, off, lift", [(80.0, 6.0, 0.0), (45.0, -4.0, 3.0), (95.0, 2.5, -7.0)])
def test_four_bar_target_off_curve_gives_nearest_curve_point(phi, off, lift):
    m = load(four_bar_with_point())
    sign = home_sign()
    t = math.radians(phi)
    h = 1e-6
    tangent = (coupler_point(t + h, sign) - coupler_point(t - h, sign)) / (2 * h)
    normal = np.array([-tangent[1], tangent[0], 0.0]) / np.linalg.norm(tangent)
    target = coupler_point(t, sign) + off * normal + [0.0, 0.0, lift]
    dmin, tmin = curve_distance(target, sign)
    p = m.pose(targets={"hook": target})
    assert not p.reached
    assert p.converged
    assert p.target_error["hook"] == pytest.approx(dmin, abs=1e-7)
    assert math.remainder(p.joints["crank"] - tmin, 360.0) == pytest.approx(0.0, abs=1e-3)
    np.testing.assert_allclose(hook_at(p, m), coupler_point(math.radians(p.joints["crank"]), sign), atol=1e-8)


def test_target_keeps_the_start_branch():
    crossed = M.four_bar(A, B, C, D, HOME, branch="crossed")
    m = load(crossed)
    p = m.pose({"crank": 100.0})
    goal = p.links["coupler"]
    got = m.pose(targets={"coupler": goal})
    assert got.reached
    assert got.joints["rocker"] == pytest.approx(p.joints["rocker"], abs=1e-6)
    # the open branch at the same crank angle has another rocker angle
    th4_open = M.four_bar_positions(A, B, C, D, 100.0, "open")[2]
    assert abs(math.remainder(got.joints["rocker"] - th4_open, 360.0)) > 10.0


# -- slider-crank ----------------------------------------------------------------------------------
def inverse_slider(r, l, e, x, sign):
    rho, psi = math.hypot(x, e), math.atan2(e, x)
    return math.degrees(psi + sign * math.acos((x * x + e * e + r * r - l * l) / (2 * r * rho)))


@pytest.mark.parametrize("dx", [-6.0, -20.0, 3.0])
def test_offset_slider_crank_slider_target_gives_closed_form_crank(dx):
    r, l, e, t0 = 15.0, 60.0, 8.0, 40.0  # invented demo sizes (offset slider-crank)
    m = load(M.slider_crank(r, l, e, t0))
    x0 = M.slider_position(r, l, e, t0)
    sign = min((1, -1), key=lambda s: abs(math.remainder(inverse_slider(r, l, e, x0, s) - t0, 360.0)))
    goal = np.eye(4)
    goal[0, 3] = dx
    p = m.pose(targets={"slider": goal})
    assert p.reached
    want = inverse_slider(r, l, e, x0 + dx, sign)
    assert math.remainder(p.joints["crank"] - want, 360.0) == pytest.approx(0.0, abs=1e-6)
    assert p.joints["slide"] == pytest.approx(x0 + dx, abs=1e-6)


# -- lead screw ------------------------------------------------------------------------------------
@pytest.mark.parametrize("hand, turn", [("right", -900.0), ("left", 900.0)])
def test_lead_screw_nut_moved_10mm_turns_screw_900deg(hand, turn):
    m = load(M.screw_jaw(thread="Tr16x4", hand=hand))
    goal = np.eye(4)
    goal[0, 3] = 10.0
    p = m.pose(targets={"jaw": goal})
    assert p.reached
    assert p.joints["spindle"] == pytest.approx(turn, abs=1e-6)
    assert p.joints["way"] == pytest.approx(10.0, abs=1e-9)


# -- limits ----------------------------------------------------------------------------------------
def test_target_beyond_slide_limit_stops_at_limit():
    m = jointwise.load("blend_samples/linnet_vise.toml")
    goal = np.eye(4)
    goal[0, 3] = 20.0  # the jaw slide allows +8 mm, the screw -720 deg (4 mm a turn)
    p = m.pose(targets={"jaw": goal})
    assert not p.reached
    assert p.joints["jaw_slide"] == pytest.approx(8.0, abs=1e-9)
    assert p.joints["screw_bearing"] == pytest.approx(-720.0, abs=1e-6)
    assert p.target_error["jaw"] == pytest.approx(12.0, abs=1e-6)


def test_target_beyond_rocker_limit_stops_at_limit():
    th4_home = M.four_bar_positions(A, B, C, D, HOME)[2]
    lim = (th4_home - 5.0, th4_home + 8.0)
    m = load(four_bar_with_point(rocker_limits=lim))
    sign = home_sign()
    free = load(four_bar_with_point())
    # a crank angle whose rocker lies past the upper limit, from the closed form
    def rocker(t):
        return th4_home + math.remainder(math.degrees(freudenstein_t4(math.radians(t), sign)) - th4_home, 360.0)
    phi = next(HOME + s * k for k in range(1, 120) for s in (1, -1) if rocker(HOME + s * k) > lim[1] + 3.0)
    target = coupler_point(math.radians(phi), sign)
    p = m.pose(targets={"hook": target})
    assert not p.reached
    assert p.joints["rocker"] == pytest.approx(lim[1], abs=1e-7)
    assert p.converged
    # the free four-bar reaches it
    assert free.pose(targets={"hook": target}).reached


# -- holding, several targets, spatial loops ------------------------------------------------------
def test_held_values_stay_and_others_move():
    # the lift's platform raised by 30 mm: the screw (a file drive) turns; held, it cannot
    m = jointwise.load("blend_samples/plover_lift.toml")
    home = m.pose()
    goal = np.eye(4)
    goal[2, 3] = 30.0
    p = m.pose(targets={"platform": goal})
    assert p.converged and p.residual <= 1e-9
    assert p.reached
    assert abs(p.joints["screw_bearing"] - home.joints["screw_bearing"]) > 100.0
    held = m.pose({"screw_bearing": home.joints["screw_bearing"]}, targets={"platform": goal})
    assert held.joints["screw_bearing"] == home.joints["screw_bearing"]
    assert held.target_error["platform"] == pytest.approx(30.0, abs=1e-6)
    assert not held.reached


def test_spatial_rssr_target_keeps_loop_closed():
    m = load(M.rssr())
    want = m.pose({"crank": 40.0})
    goal = want.links["rocker_arm"]
    p = m.pose(targets={"rocker_arm": goal})
    assert p.converged and p.residual <= 1e-9
    assert p.reached
    assert p.joints["rocker"] == pytest.approx(want.joints["rocker"], abs=1e-6)
    assert p.joints["crank"] == pytest.approx(40.0, abs=1e-5)


def test_point_jacobian_matches_finite_differences():
    from jointwise.targets import _Targets, parse_targets
    m = load(M.rssr())
    q = m.pose({"crank": 25.0}).q
    goal = np.eye(4)
    t = _Targets(m, {}, parse_targets(m, {"coupler": goal}))
    lay = t.layout(set())
    links = m.link_poses(q)
    J = t.jacobian(q, links, lay)
    e0, _ = t.errors(links)
    h = 1e-7
    for k in range(len(lay.cols)):
        du = np.zeros(len(lay.cols))
        du[k] = h
        q2 = q.copy()
        t.apply(q2, lay, du)
        e1, _ = t.errors(m.link_poses(q2))
        # errors are goal - current: their derivative is minus the Jacobian column
        np.testing.assert_allclose(-(e1 - e0) / h, J[:, k], atol=1e-5)


def test_start_pose_is_followed_continuously():
    m = load(four_bar_with_point())
    sign = home_sign()
    prev = m.pose()
    for phi in np.arange(HOME, HOME + 200.0, 10.0):
        prev = m.pose(start=prev, targets={"hook": coupler_point(math.radians(phi), sign)})
        assert prev.reached
        assert math.remainder(prev.joints["crank"] - phi, 360.0) == pytest.approx(0.0, abs=1e-6)


# -- bad targets ------------------------------------------------------------------------------------
def test_unknown_target_is_a_spec_error_naming_it():
    m = load(four_bar_with_point())
    with pytest.raises(SpecError, match="'hok'.*did you mean 'hook'"):
        m.pose(targets={"hok": [0, 0, 0]})
    with pytest.raises(SpecError, match="'nothing_like_this' names no point measure or link"):
        m.pose(targets={"nothing_like_this": [0, 0, 0]})
    with pytest.raises(SpecError, match="'hook': expected \\[x, y, z\\]"):
        m.pose(targets={"hook": np.eye(4)})
    with pytest.raises(SpecError, match="'coupler': expected a 4x4"):
        m.pose(targets={"coupler": [1, 2, 3]})
    with pytest.raises(SpecError, match="'hook' must be finite"):
        m.pose(targets={"hook": [0, math.nan, 0]})
    with pytest.raises(SpecError, match="'hook': 1e\\+300 is beyond the limit"):
        m.pose(targets={"hook": [1e300, 0, 0]})
    bad = np.eye(4)
    bad[0, 0] = 2.0
    with pytest.raises(SpecError, match="rigid motion"):
        m.pose(targets={"coupler": bad})


def test_unreachable_target_gives_nearest_pose_not_exception():
    m = jointwise.load("blend_samples/wagtail_rocker.toml")
    p = m.pose(targets={"sign_hook": [1e4, -3e4, 50.0]})
    assert not p.reached and p.converged
    assert math.isfinite(p.target_error["sign_hook"])
    assert p.to_json()["reached"] is False


def test_pose_without_targets_keeps_its_json():
    m = jointwise.load("blend_samples/wagtail_rocker.toml")
    out = m.pose({"crank_pin": 80}).to_json()
    assert "target_error" not in out and "reached" not in out


# -- command line ------------------------------------------------------------------------------------
def test_cli_target_json_and_text(tmp_path):
    path = M.write(four_bar_with_point(), tmp_path / "hf.toml")
    sign = home_sign()
    x, y, z = (float(v) for v in coupler_point(math.radians(82.0), sign))
    run = run_cli("pose", path, "--target", f"hook={x!r},{y!r},{z!r}", "--format", "json")
    no_traceback(run)
    assert run.code == 0, run
    out = run.json()
    assert out["reached"] is True
    assert out["target_error"]["hook"] < 1e-6
    assert out["joints"]["crank"] == pytest.approx(82.0, abs=1e-6)
    far = run_cli("pose", path, "--target", "hook=500,0,0")
    no_traceback(far)
    assert far.code == 0, far
    assert "not all reached" in far.out and "from its target" in far.out
    held = run_cli("pose", path, "--set", "crank=70", "--target", f"hook={x!r},{y!r},{z!r}", "--format", "json")
    assert held.code == 0, held
    assert held.json()["joints"]["crank"] == 70.0
    assert held.json()["reached"] is False


@pytest.mark.parametrize("arg, words", [("hok=1,2,3", "did you mean 'hook'"), ("hook=1,x,3", "not a number"),
                                        ("hook=1,2", "three numbers"), ("coupler=1,2,3", "is a link"),
                                        ("hook=1,inf,3", "not finite"), ("hook", "NAME=X,Y,Z"),
                                        ("hook=1e300,0,0", "beyond the limit")])
def test_cli_bad_target_exits_2(tmp_path, arg, words):
    path = M.write(four_bar_with_point(), tmp_path / "hf.toml")
    run = run_cli("pose", path, "--target", arg)
    no_traceback(run)
    assert run.code == 2, run
    assert words in run.err


def test_link_turn_about_its_joint_line_is_followed():
    # the middle shaft of a double Hooke's joint turns about the line through its two
    # crosses: its joint points do not move, its orientation does (reference: the pose
    # by value, input turned 20 deg)
    m = jointwise.load("blend_samples/heron_twin_shaft.toml")
    aim = m.pose({"input_bearing": 20.0})
    p = m.pose(targets={"middle": aim.links["middle"]})
    assert p.reached
    assert p.joints["input_bearing"] == pytest.approx(20.0, abs=1e-6)
    np.testing.assert_allclose(p.links["middle"], aim.links["middle"], atol=1e-9)
