"""Closed loops against named references (issue 3 item 7).

* Freudenstein's equation (F. Freudenstein, 1955; any machine-design text):
  K1 cos t4 - K2 cos t2 + K3 = cos(t2 - t4), K1 = d/a, K2 = d/c,
  K3 = (a^2 - b^2 + c^2 + d^2) / (2 a c), and its closed-form solution
  t4 = 2 atan2(-B -+ sqrt(B^2 - 4 A C), 2 A) with A = cos t2 - K1 - K2 cos t2 + K3,
  B = -2 sin t2, C = K1 - (K2 + 1) cos t2 + K3 (form quoted from memory).
* Slider-crank displacement x = r cos t + sqrt(l^2 - (r sin t - e)^2).
* Hooke's joint: w_out / w_in = cos b / (1 - sin^2 b sin^2 t) with t = 0 where the input
  yoke's arm is normal to the shafts' plane; extremes cos b and 1 / cos b.
* Grashof's rule s + l <= p + q.
* ``scipy.optimize.least_squares`` on loop equations written here independently.
"""
from __future__ import annotations

import math
import os

import numpy as np
import pytest
from scipy.optimize import least_squares
from scipy.spatial.transform import Rotation

import jointwise

import mechanisms as M
from mechanisms import no_traceback, run_cli

#: Freudenstein's equation is |AB|^2 - b^2 over 2ac: a closure gap of 1e-9 (the solver's
#: tolerance) moves it by about 2 b 1e-9 / (2 a c) = 1.2e-9 for CR; allow a few times that.
FR_TOL = 5e-9
CR = (1.0, 3.0, 2.5, 3.0)  # Grashof crank-rocker: a crank, b coupler, c rocker, d ground (invented demo sizes)


def load(d):
    return jointwise.from_dict(d, source="test.toml")


def freudenstein_residual(a, b, c, d, t2, t4):
    k1, k2, k3 = d / a, d / c, (a * a - b * b + c * c + d * d) / (2 * a * c)
    t2, t4 = math.radians(t2), math.radians(t4)
    return k1 * math.cos(t4) - k2 * math.cos(t2) + k3 - math.cos(t2 - t4)


def freudenstein_roots(a, b, c, d, t2):
    k1, k2, k3 = d / a, d / c, (a * a - b * b + c * c + d * d) / (2 * a * c)
    t = math.radians(t2)
    A = math.cos(t) - k1 - k2 * math.cos(t) + k3
    B = -2 * math.sin(t)
    C = k1 - (k2 + 1) * math.cos(t) + k3
    disc = math.sqrt(B * B - 4 * A * C)
    return [math.degrees(2 * math.atan2(-B - s * disc, 2 * A)) for s in (1, -1)]


def angdiff(x, y):
    return (x - y + 180.0) % 360.0 - 180.0


def assert_joints_hold(mech, pose, tol=1e-8):
    """Independent closure check: every revolute's point and axis are carried alike by
    its parent and its child; every prismatic joint's two links keep one orientation."""
    L = pose.links
    for j in mech.joints.values():
        P, C = L[j.parent], L[j.child]
        if j.type == "revolute":
            p = np.append(j.point, 1.0)
            np.testing.assert_allclose(P @ p, C @ p, atol=tol, err_msg=j.name)
            np.testing.assert_allclose(P[:3, :3] @ j.axis, C[:3, :3] @ j.axis, atol=tol, err_msg=j.name)
        elif j.type == "prismatic":
            np.testing.assert_allclose(P[:3, :3], C[:3, :3], atol=tol, err_msg=j.name)


# -- Freudenstein: crank-rocker through a full turn on both branches -----------------------------------
@pytest.mark.parametrize("branch", ["open", "crossed"])
def test_freudenstein_full_turn_warm_started(branch):
    a, b, c, d = CR
    m = load(M.four_bar(a, b, c, d, 60.0, branch=branch))
    home_t4 = m.pose({}).joints["rocker"]
    roots = freudenstein_roots(a, b, c, d, 60.0)
    k = int(np.argmin([abs(angdiff(r, home_t4)) for r in roots]))  # the home branch's root
    assert abs(angdiff(roots[k], home_t4)) < 1e-9
    prev = None
    for t2 in np.arange(60.0, 60.0 + 360.0 + 1e-9, 7.5):
        p = m.pose({"crank": t2}, start=prev)
        assert p.converged and p.residual <= 1e-9
        t4 = p.joints["rocker"]
        assert abs(freudenstein_residual(a, b, c, d, t2, t4)) < FR_TOL
        assert abs(angdiff(t4, freudenstein_roots(a, b, c, d, t2)[k])) < 1e-7, (t2, t4)
        ref = M.four_bar_positions(a, b, c, d, t2, branch)
        assert abs(angdiff(t4, ref[2])) < 1e-7
        assert_joints_hold(m, p)
        prev = p
    # after one full crank turn the mechanism is back where it started
    np.testing.assert_allclose(prev.links["rocker_arm"], np.eye(4), atol=1e-8)
    np.testing.assert_allclose(prev.links["coupler"], np.eye(4), atol=1e-8)


@pytest.mark.parametrize("branch", ["open", "crossed"])
@pytest.mark.parametrize("t2", [-170.0, -60.0, 0.0, 95.0, 181.0, 300.0, 419.0])
def test_pose_from_home_stays_on_home_branch(branch, t2):
    a, b, c, d = CR
    m = load(M.four_bar(a, b, c, d, 60.0, branch=branch))
    p = m.pose({"crank": t2})
    ref = M.four_bar_positions(a, b, c, d, t2, branch)
    assert p.converged
    assert abs(angdiff(p.joints["rocker"], ref[2])) < 1e-7
    assert abs(freudenstein_residual(a, b, c, d, t2, p.joints["rocker"])) < FR_TOL


def test_crossed_and_open_branches_differ():
    a, b, c, d = CR
    o = load(M.four_bar(a, b, c, d, 60.0, "open")).pose({"crank": 150}).joints["rocker"]
    x = load(M.four_bar(a, b, c, d, 60.0, "crossed")).pose({"crank": 150}).joints["rocker"]
    assert abs(angdiff(o, x)) > 30


# -- slider-crank ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("e", [0.0, 0.4, -0.7])
def test_slider_crank_closed_form(e):
    r, l = 1.0, 3.5
    m = load(M.slider_crank(r, l, e, 40.0))
    prev = None
    for t in np.arange(40.0, 40.0 + 360.0 + 1e-9, 15.0):
        p = m.pose({"crank": t}, start=prev)
        assert p.converged
        # closure within 1e-9 of the length unit: allow a few times that on the slider
        assert p.joints["slide"] == pytest.approx(M.slider_position(r, l, e, t), abs=5e-9)
        np.testing.assert_allclose(p.links["slider"][:3, 3],
                                   [M.slider_position(r, l, e, t) - M.slider_position(r, l, e, 40.0), 0, 0],
                                   atol=5e-9)
        assert_joints_hold(m, p)
        prev = p


def test_slider_crank_offset_changes_stroke():
    # with offset the stroke exceeds 2 r (closed form: sqrt((l+r)^2 - e^2) - sqrt((l-r)^2 - e^2))
    r, l, e = 1.0, 3.5, 0.8
    m = load(M.slider_crank(r, l, e, 40.0))
    xs = [m.pose({"crank": t}).joints["slide"] for t in np.arange(0, 360, 0.5)]
    stroke = math.sqrt((l + r) ** 2 - e * e) - math.sqrt((l - r) ** 2 - e * e)
    assert max(xs) - min(xs) == pytest.approx(stroke, abs=1e-4)
    assert stroke > 2 * r


# -- Hooke's joint ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("beta", [15.0, 30.0, 40.0])
def test_hooke_speed_ratio_extremes_and_one_turn(beta):
    m = load(M.hooke(beta))
    i_in, i_out = m.index["input"], m.index["output"]
    cb = math.cos(math.radians(beta))
    ratios, outs = [], []
    prev = None
    for t in np.arange(0.0, 360.0 + 1e-9, 5.0):
        p = m.pose({"input": t}, start=prev)
        assert p.converged
        dq = m.solver.tangent(p.q, [], i_in)
        ratio = dq[i_out] / dq[i_in]
        ratios.append(ratio)
        sb2 = math.sin(math.radians(beta)) ** 2
        assert ratio == pytest.approx(cb / (1 - sb2 * math.sin(math.radians(t)) ** 2), rel=1e-7)
        outs.append(p.joints["output"])
        prev = p
    assert min(ratios) == pytest.approx(cb, rel=1e-9)
    assert max(ratios) == pytest.approx(1 / cb, rel=1e-9)
    # one output turn per input turn (unwrapped)
    unwrapped = np.degrees(np.unwrap(np.radians(outs)))
    assert unwrapped[-1] - unwrapped[0] == pytest.approx(360.0, abs=1e-6)
    assert np.all(np.diff(unwrapped) > 0)


def test_hooke_ratio_by_finite_differences_of_poses():
    beta = 30.0
    m = load(M.hooke(beta))
    h = 1e-4
    for t in (0.0, 90.0):
        lo = m.pose({"input": t - h}).joints["output"]
        hi = m.pose({"input": t + h}).joints["output"]
        ratio = (hi - lo) / (2 * h)
        want = math.cos(math.radians(beta)) if t == 0 else 1 / math.cos(math.radians(beta))
        assert ratio == pytest.approx(want, rel=1e-6)


# -- Grashof --------------------------------------------------------------------------------------------------
GRASHOF_SETS = {
    "crank-rocker": (1.0, 3.0, 2.5, 3.0),
    "double-crank": (3.0, 3.5, 3.0, 1.0),
    "grashof double-rocker": (3.0, 1.0, 3.0, 3.5),
    "rocker-crank": (3.0, 3.5, 1.0, 3.0),
    "non-grashof A": (3.0, 2.0, 2.2, 4.5),
    "non-grashof B": (2.0, 3.0, 2.2, 4.0),
}


def _home_angle(a, b, c, d):
    for t in (60.0, 90.0, 120.0, 45.0, 30.0, 150.0):
        if M.four_bar_positions(a, b, c, d, t) is not None:
            return t
    raise AssertionError("no home angle")


def _turns_fully(m, home):
    prev = None
    for t in np.arange(home, home + 360.0 + 1e-9, 5.0):
        try:
            prev = m.pose({"crank": t}, start=prev)
        except jointwise.AssemblyError:
            return False
    return True


@pytest.mark.parametrize("name", sorted(GRASHOF_SETS))
def test_grashof_classification_matches_full_turn(name):
    a, b, c, d = GRASHOF_SETS[name]
    is_g, full = M.grashof(a, b, c, d)
    assert is_g == (name.startswith("non") is False)
    home = _home_angle(a, b, c, d)
    m = load(M.four_bar(a, b, c, d, home))
    assert _turns_fully(m, home) == full


@pytest.mark.parametrize("name", ["grashof double-rocker", "non-grashof A"])
def test_double_rocker_full_turn_exit_3(name, mech_file):
    a, b, c, d = GRASHOF_SETS[name]
    home = _home_angle(a, b, c, d)
    path = mech_file(M.four_bar(a, b, c, d, home))
    r = run_cli("pose", path, "--set", f"crank={home + 360}", "--format", "json")
    no_traceback(r)
    assert r.code == 3, r
    assert r.out == ""
    with pytest.raises(jointwise.AssemblyError) as exc:
        jointwise.load(path).pose({"crank": home + 360})
    assert exc.value.loop == jointwise.load(path).loops[0].name


# -- scipy.optimize.least_squares as an independent reference ----------------------------------------------
def test_four_bar_vs_least_squares():
    a, b, c, d = CR
    m = load(M.four_bar(a, b, c, d, 60.0))
    (ax, ay), (bx, by), t4 = M.four_bar_positions(a, b, c, d, 60.0)
    t3_home = math.atan2(by - ay, bx - ax)
    x = np.array([t3_home, math.radians(t4)])
    for t2 in np.arange(60.0, 420.0, 20.0):
        th = math.radians(t2)

        def loop(u):  # a e^{i t2} + b e^{i t3} - c e^{i t4} - d = 0
            return [a * math.cos(th) + b * math.cos(u[0]) - c * math.cos(u[1]) - d,
                    a * math.sin(th) + b * math.sin(u[0]) - c * math.sin(u[1])]

        sol = least_squares(loop, x, xtol=1e-15, ftol=1e-15, gtol=1e-15)
        x = sol.x
        p = m.pose({"crank": t2})
        assert abs(angdiff(p.joints["rocker"], math.degrees(x[1]))) < 1e-7
        coupler_turn = math.degrees(Rotation.from_matrix(p.links["coupler"][:3, :3]).as_rotvec()[2])
        assert abs(angdiff(coupler_turn, math.degrees(x[0] - t3_home))) < 1e-7


def test_slider_crank_vs_least_squares():
    r, l, e = 1.0, 3.5, 0.4
    m = load(M.slider_crank(r, l, e, 40.0))
    x = np.array([M.slider_position(r, l, e, 40.0), 0.0])
    for t in np.arange(40.0, 400.0, 30.0):
        th = math.radians(t)

        def loop(u):  # slider at (u0, e), rod angle u1: crank tip + rod = slider
            return [r * math.cos(th) + l * math.cos(u[1]) - u[0], r * math.sin(th) + l * math.sin(u[1]) - e]

        x = least_squares(loop, x, xtol=1e-15, ftol=1e-15, gtol=1e-15).x
        assert m.pose({"crank": t}).joints["slide"] == pytest.approx(x[0], abs=1e-9)


def test_hooke_vs_least_squares():
    beta = 35.0
    m = load(M.hooke(beta))
    b = math.radians(beta)
    u = np.array([math.cos(b), math.sin(b), 0.0])
    arm2 = np.array([-math.sin(b), math.cos(b), 0.0])
    x = np.zeros(3)
    for t in np.arange(0.0, 360.0, 25.0):
        Rin = Rotation.from_rotvec([math.radians(t), 0, 0])

        def loop(v):  # space-form product via the cross equals the output shaft's turn
            path = Rin * Rotation.from_rotvec([0, 0, v[0]]) * Rotation.from_rotvec(arm2 * v[1])
            out = Rotation.from_rotvec(u * v[2])
            return (out.inv() * path).as_rotvec()

        x = least_squares(loop, x, xtol=1e-15, ftol=1e-15, gtol=1e-15).x
        p = m.pose({"input": t})
        assert abs(angdiff(p.joints["output"], math.degrees(x[2]))) < 1e-6
        assert abs(angdiff(p.joints["cross.1"], math.degrees(x[0]))) < 1e-6
        assert abs(angdiff(p.joints["cross.2"], math.degrees(x[1]))) < 1e-6


# -- bad held values, assembly errors ------------------------------------------------------------------------
def _rocker_extremes(a, b, c, d):
    """Rocker angles where crank and coupler are in line (|O2 B| = b + a or b - a)."""
    out = []
    for rr in (a + b, b - a):
        x = (rr * rr - c * c + d * d) / (2 * d)
        out.append(math.degrees(math.atan2(math.sqrt(rr * rr - x * x), x - d)))
    return sorted(out)


def test_rocker_beyond_range_exit_3_names_loop_and_writes_nothing(tmp_path):
    a, b, c, d = CR
    lo, hi = _rocker_extremes(a, b, c, d)
    path = M.write(M.four_bar(a, b, c, d, 60.0), tmp_path / "crank.toml")
    before = sorted(os.listdir(tmp_path))
    m = jointwise.load(path)
    for v in (lo - 10.0, hi + 10.0):
        with pytest.raises(jointwise.AssemblyError) as exc:
            m.pose({"rocker": v})
        assert exc.value.loop == m.loops[0].name
        assert exc.value.error is not None and exc.value.error > 1e-9
        r = run_cli("pose", path, "--set", f"rocker={v}", "--format", "json", cwd=tmp_path)
        no_traceback(r)
        assert r.code == 3, r
        assert r.out == ""
        assert m.loops[0].name in r.err and "rocker" in r.err
    assert sorted(os.listdir(tmp_path)) == before
    # inside the range it assembles, and the crank follows Freudenstein
    p = m.pose({"rocker": (lo + hi) / 2})
    assert abs(freudenstein_residual(a, b, c, d, p.joints["crank"], p.joints["rocker"])) < FR_TOL


# -- couplings -------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("offset", [0.0, 12.5])
def test_gear_pair_ratio(offset, mech_file):
    z1, z2 = 18, 42
    m = load(M.gear_pair(z1, z2, offset))
    for v in (-100.0, 30.0, 725.0):
        p = m.pose({"pinion": v})
        assert p.joints["wheel"] == pytest.approx(-z1 / z2 * v + offset, abs=1e-9)
        np.testing.assert_allclose(p.links["wheel"][:3, :3],
                                   Rotation.from_rotvec([0, 0, math.radians(-z1 / z2 * v)]).as_matrix(),
                                   atol=1e-12)
    # holding the follower moves the leader
    p = m.pose({"wheel": offset - 30.0})
    assert p.joints["pinion"] == pytest.approx(30.0 * z2 / z1)
    r = run_cli("pose", mech_file(M.gear_pair(z1, z2, offset)), "--set", "pinion=84", "--format", "json")
    assert r.code == 0, r
    assert r.json()["joints"]["wheel"] == pytest.approx(-z1 / z2 * 84 + offset)


def test_rack_and_pinion():
    # pitch radius r = m z / 2: advance per degree r pi / 180 (module 2, 20 teeth: r = 20 mm)
    r_pitch = 2.0 * 20 / 2
    d = M.base("HF rack feed", links=["pinion", "rack"])
    d["joints"]["pinion"] = M.revolute("frame", "pinion", (0, 0), drive=True)
    d["joints"]["rack"] = {"type": "prismatic", "parent": "frame", "child": "rack",
                           "point": [0.0, -r_pitch, 0.0], "axis": [1.0, 0.0, 0.0]}
    d["couplings"] = {"teeth": {"leader": "pinion", "follower": "rack",
                                "ratio": r_pitch * math.pi / 180.0}}
    m = load(d)
    p = m.pose({"pinion": 90.0})
    # a turn of +90 deg (counter-clockwise about z) carries the contact point (0, -r) towards +x
    assert p.joints["rack"] == pytest.approx(r_pitch * math.pi / 2)
    np.testing.assert_allclose(p.links["rack"][:3, 3], [r_pitch * math.pi / 2, 0, 0], atol=1e-12)
    # the pinion's pitch point (0, -r) moves with the rack: rolling without slip
    h = 1e-3
    q = m.pose({"pinion": h})
    contact = q.links["pinion"] @ [0, -r_pitch, 0, 1]
    assert (contact[0]) == pytest.approx(q.links["rack"][0, 3], rel=1e-6)


def test_coupling_drives_a_loop():
    a, b, c, d = CR
    fb = M.four_bar(a, b, c, d, 60.0, drive=False)
    fb["links"]["gear"] = {}
    fb["joints"]["gear"] = M.revolute("frame", "gear", (-5, 0), drive=True)
    fb["couplings"] = {"g": {"leader": "gear", "follower": "crank", "ratio": -0.5, "offset": 60.0}}
    m = load(fb)
    for g in (-40.0, 100.0, -500.0):
        p = m.pose({"gear": g})
        t2 = -0.5 * g + 60.0
        assert p.converged
        assert p.joints["crank"] == pytest.approx(t2, abs=1e-9)
        assert abs(angdiff(p.joints["rocker"], M.four_bar_positions(a, b, c, d, t2)[2])) < 1e-7
        assert_joints_hold(m, p)


def test_contradicting_held_coupled_values_exit_3():
    m = load(M.gear_pair(18, 42))
    with pytest.raises(jointwise.AssemblyError):
        m.pose({"pinion": 10.0, "wheel": 50.0})


# -- passive limits --------------------------------------------------------------------------------------------
def test_passive_joint_limit_violation_names_joint(mech_file):
    a, b, c, d = CR
    data = M.four_bar(a, b, c, d, 60.0, rocker_limits=[85.0, 100.0])
    m = load(data)
    ok = m.pose({"crank": 70.0})
    assert 85.0 <= ok.joints["rocker"] <= 100.0
    bad_t2 = 150.0
    assert M.four_bar_positions(a, b, c, d, bad_t2)[2] > 100.0
    with pytest.raises(jointwise.LimitError) as exc:
        m.pose({"crank": bad_t2})
    assert exc.value.joint == "rocker"
    r = run_cli("pose", mech_file(data), "--set", f"crank={bad_t2}")
    no_traceback(r)
    assert r.code == 3, r
    assert "rocker" in r.err and "100" in r.err


# -- assembly tolerance --------------------------------------------------------------------------------------------
def _gear_driven_four_bar(offset_error):
    fb = M.four_bar(*CR, 60.0, drive=False)
    fb["links"]["gear"] = {}
    fb["joints"]["gear"] = M.revolute("frame", "gear", (-5, 0), drive=True)
    # the coupling says crank = 60 + error at home, the file places it at 60
    fb["couplings"] = {"g": {"leader": "gear", "follower": "crank", "ratio": -0.5,
                             "offset": 60.0 + offset_error}}
    return fb


def test_slightly_off_home_settles_with_note(mech_file):
    path = mech_file(_gear_driven_four_bar(0.01))
    m = jointwise.load(path)
    assert m.home_closure() > 1e-9
    r = run_cli("pose", path, "--format", "json")
    assert r.code == 0, r
    assert r.json()["converged"] is True
    assert "settled" in r.err


def test_far_off_home_exit_3_names_loop(mech_file):
    path = mech_file(_gear_driven_four_bar(20.0))
    r = run_cli("pose", path, "--format", "json")
    no_traceback(r)
    assert r.code == 3, r
    assert jointwise.load(path).loops[0].name in r.err


def test_home_closes_as_modelled():
    for d in (M.four_bar(*CR), M.watt_six_bar(), M.hooke(), M.screw_jaw(), M.scissor_stack(4)):
        assert load(d).home_closure() <= 1e-12


# -- singular positions ---------------------------------------------------------------------------------------------
def test_slider_crank_dead_centre_singular(mech_file):
    r, l = 1.0, 3.0
    data = M.slider_crank(r, l, 0.0, 40.0, drive="slide")
    m = load(data)
    p = m.pose({"slide": r + l})  # top dead centre: crank and rod in line
    assert p.converged and p.singular
    assert abs(angdiff(p.joints["crank"], 0.0)) < 0.5
    q = m.pose({"slide": r + l - 0.5})
    assert q.converged and not q.singular
    out = run_cli("pose", mech_file(data), "--set", f"slide={r + l}", "--format", "json")
    assert out.code == 0, out
    assert out.json()["singular"] is True


def test_four_bar_toggle_singular():
    a, b, c, d = CR
    lo, hi = _rocker_extremes(a, b, c, d)
    m = load(M.four_bar(a, b, c, d, 60.0))
    for v in (lo, hi):
        p = m.pose({"rocker": v})
        assert p.converged and p.singular
    assert not m.pose({"rocker": (lo + hi) / 2}).singular
    assert not m.pose({"crank": 100.0}).singular


# -- multi-loop linkages close -----------------------------------------------------------------------------------------
@pytest.mark.parametrize("builder,held", [
    (M.watt_six_bar, {"ft": 8.0}), (M.stephenson_six_bar, {"fc": -6.0}),
    (M.five_bar, {"j0": 5.0, "j4": -4.0}), (lambda: M.scissor_stack(5), {"slide": 300.0}),
])
def test_multi_loop_poses_hold_every_joint(builder, held):
    m = load(builder())
    p = m.pose(held)
    assert p.converged and p.residual <= 1e-9
    for k, v in held.items():
        assert p.joints[k] == pytest.approx(v)
    assert_joints_hold(m, p)
    assert max(abs(v) for k, v in p.joints.items() if k not in held) > 1e-3  # something moved


def test_scissor_stack_height_closed_form():
    # each stage of bar length s spans width x and height sqrt(s^2 - x^2)
    w, h, n = 400.0, 120.0, 4
    m = load(M.scissor_stack(n, w, h))
    s = math.hypot(w, h)
    for x in (300.0, 380.0, 200.0):
        p = m.pose({"slide": x})
        top = p.links[f"L{n - 1}"] @ [w, n * h, 0, 1]
        assert top[1] == pytest.approx(n * math.sqrt(s * s - x * x), abs=1e-8)
        assert top[0] == pytest.approx(x, abs=1e-8)


# -- property: random Grashof crank-rockers obey Freudenstein ---------------------------------------------------
from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=25, deadline=None)
@given(st.floats(0.5, 1.5), st.floats(2.5, 4.0), st.floats(2.0, 4.0), st.floats(2.5, 4.0),
       st.floats(-180, 180), st.sampled_from(["open", "crossed"]))
def test_property_crank_rockers_obey_freudenstein(a, b, c, d, t2, branch):
    from hypothesis import assume
    s, p, q, l = sorted([a, b, c, d])
    assume(a == s and s + l < p + q - 0.2)  # clear crank-rocker, away from change points
    m = load(M.four_bar(a, b, c, d, 90.0, branch=branch))
    pose = m.pose({"crank": t2})
    assert pose.converged
    assert abs(freudenstein_residual(a, b, c, d, t2, pose.joints["rocker"])) < FR_TOL * max(b / (a * c), 1)
    assert abs(angdiff(pose.joints["rocker"], M.four_bar_positions(a, b, c, d, t2, branch)[2])) < 1e-6


# -- spatial RSSR with ball joints ----------------------------------------------------------------------------------
def test_rssr_ball_joints_vs_least_squares():
    m = load(M.rssr())
    A0, B0, O4 = np.array([2.0, 0, 0]), np.array(M.RSSR_B0), np.array([0.0, 6, 1])
    b = np.linalg.norm(B0 - A0)
    assert b == pytest.approx(6.0)
    phi = 0.0
    prev = None
    for t in np.arange(0.0, 360.0 + 1e-9, 15.0):
        p = m.pose({"crank": t}, start=prev)
        assert p.converged
        th = math.radians(t)
        A = np.array([2 * math.cos(th), 2 * math.sin(th), 0.0])

        def Bof(f):  # B turns about the x axis through O4
            return O4 + Rotation.from_rotvec([f, 0, 0]).apply(B0 - O4)

        phi = least_squares(lambda f: [np.linalg.norm(Bof(f[0]) - A) - b], [phi],
                            xtol=1e-15, ftol=1e-15, gtol=1e-15).x[0]
        assert abs(angdiff(p.joints["rocker"], math.degrees(phi))) < 1e-6
        # the balls' centres are carried alike by both links they join
        L = p.links
        for jn, P in (("ball_a", A0), ("ball_b", B0)):
            j = m.joints[jn]
            np.testing.assert_allclose(L[j.parent] @ np.append(P, 1), L[j.child] @ np.append(P, 1), atol=1e-8)
        prev = p


# -- consistent over-determined held values -----------------------------------------------------------------------
def test_consistent_crank_and_rocker_held_together():
    # crank and rocker both held at values that close the loop (closed form, circle intersection)
    a, b, c, d = CR
    m = load(M.four_bar(a, b, c, d, 60.0))
    t4 = M.four_bar_positions(a, b, c, d, 150.0)[2]
    p = m.pose({"crank": 150.0, "rocker": t4})
    assert p.converged
    assert p.joints["crank"] == pytest.approx(150.0) and p.joints["rocker"] == pytest.approx(t4)


def test_consistent_held_values_at_home():
    a, b, c, d = CR
    m = load(M.four_bar(a, b, c, d, 60.0))
    t4 = M.four_bar_positions(a, b, c, d, 60.0)[2]
    p = m.pose({"crank": 60.0, "rocker": t4})
    assert p.converged and p.residual <= 1e-9
