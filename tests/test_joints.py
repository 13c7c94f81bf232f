"""Joint types and thread presets against independent references.

* Rotations: ``scipy.spatial.transform.Rotation.from_rotvec`` (and products of them for
  compound joints, built by hand in the space-form order the core documents).
* Thread data: ISO 261 coarse pitches and ISO 2904 / ISO 2902 trapezoidal pitches --
  these values are quoted FROM MEMORY of the standards, not read from them.
* Lead angle: tan(lambda) = L / (pi d), the usual definition at the diameter d.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.transform import Rotation

import jointwise
from jointwise import joints as J

import mechanisms as M

SET = settings(max_examples=60, deadline=None)
ang = st.floats(-170, 170, allow_nan=False)
length = st.floats(-50, 50, allow_nan=False)


def rot(axis, deg):
    a = np.asarray(axis, dtype=float)
    return Rotation.from_rotvec(a / np.linalg.norm(a) * math.radians(deg)).as_matrix()


def about_point(R, p, t=(0, 0, 0)):
    """4x4 of rotation R about point p, followed by translation t (hand-built)."""
    T = np.eye(4)
    T[:3, :3] = R
    T[:3, 3] = np.asarray(p) - R @ np.asarray(p) + np.asarray(t)
    return T


def one_joint(jd, length_unit="mm", angle_unit="deg"):
    d = M.base("one joint", links=["b"], length_unit=length_unit, angle_unit=angle_unit)
    jd = dict({"parent": "frame", "child": "b"}, **jd)
    d["joints"]["j"] = jd
    return jointwise.from_dict(d, source="one.toml")


def posed(m, **values):
    return m.pose(values).links["b"]


# -- ISO 261 coarse pitches (from memory of ISO 261) --------------------------------------------------
ISO261_FROM_MEMORY = {"M3": 0.5, "M3.5": 0.6, "M4": 0.7, "M5": 0.8, "M6": 1.0, "M7": 1.0, "M8": 1.25,
                      "M10": 1.5, "M12": 1.75, "M14": 2.0, "M16": 2.0, "M18": 2.5, "M20": 2.5,
                      "M22": 2.5, "M24": 3.0}


@pytest.mark.parametrize("name,pitch", sorted(ISO261_FROM_MEMORY.items()))
def test_iso261_coarse_pitch(name, pitch):
    t = J.thread_lead(name)
    assert t["pitch"] == pytest.approx(pitch)
    assert t["lead"] == pytest.approx(pitch)
    assert t["starts"] == 1
    assert t["diameter"] == pytest.approx(float(name[1:]))


def test_metric_explicit_fine_pitch():
    assert J.thread_lead("M10x1.25")["lead"] == pytest.approx(1.25)


# -- ISO 2904 trapezoidal (pitches per ISO 2902, from memory) ----------------------------------------
@pytest.mark.parametrize("name,lead,pitch,starts", [
    ("Tr10x2", 2, 2, 1), ("Tr12x3", 3, 3, 1), ("Tr16x4", 4, 4, 1), ("Tr20x4", 4, 4, 1),
    ("Tr24x5", 5, 5, 1), ("Tr32x6", 6, 6, 1), ("Tr40x7", 7, 7, 1),
    ("Tr16x8(P4)", 8, 4, 2), ("Tr20x8(P4)", 8, 4, 2), ("Tr24x10(P5)", 10, 5, 2),
])
def test_iso2904_trapezoidal(name, lead, pitch, starts):
    t = J.thread_lead(name)
    assert (t["lead"], t["pitch"], t["starts"]) == (pytest.approx(lead), pytest.approx(pitch), starts)


@pytest.mark.parametrize("bad", ["M11", "Tr16x5", "Tr16x6(P4)", "Q10", "Tr17x4", ""])
def test_unknown_threads_raise(bad):
    with pytest.raises(ValueError):
        J.thread_lead(bad)


@pytest.mark.parametrize("thread,lead_mm", [("M10", 1.5), ("Tr16x4", 4.0), ("Tr16x8(P4)", 8.0)])
@pytest.mark.parametrize("unit,scale", [("mm", 1.0), ("cm", 0.1), ("in", 1 / 25.4)])
def test_thread_preset_advance_per_turn_in_file_units(thread, lead_mm, unit, scale):
    m = one_joint({"type": "helical", "point": [0, 0, 0], "axis": [0, 0, 1], "thread": thread},
                  length_unit=unit)
    T = posed(m, j=360.0)
    np.testing.assert_allclose(T[:3, 3], [0, 0, lead_mm * scale], atol=1e-12)
    np.testing.assert_allclose(T[:3, :3], np.eye(3), atol=1e-12)


# -- lead, pitch x starts, lead angle, hand -------------------------------------------------------------
def test_pitch_times_starts():
    m = one_joint({"type": "helical", "axis": [0, 0, 1], "pitch": 2.0, "starts": 3})
    np.testing.assert_allclose(posed(m, j=360.0)[:3, 3], [0, 0, 6.0], atol=1e-12)


@pytest.mark.parametrize("lam_deg,d", [(5.2, 14.0), (2.0, 30.0), (30.0, 8.0), (45.0, 10.0)])
def test_lead_angle_relation(lam_deg, d):
    # tan(lambda) = L / (pi d)
    lead = math.pi * d * math.tan(math.radians(lam_deg))
    assert J.lead_from_angle(math.radians(lam_deg), d) == pytest.approx(lead)
    assert J.lead_angle_of(lead, d) == pytest.approx(math.radians(lam_deg))
    m = one_joint({"type": "helical", "axis": [0, 0, 1], "lead_angle": lam_deg, "diameter": d})
    np.testing.assert_allclose(posed(m, j=90.0)[:3, 3], [0, 0, lead / 4], atol=1e-9)


@pytest.mark.parametrize("theta", [-200.0, -10.0, 33.0, 270.0])
def test_lead_angle_zero_behaves_as_revolute(theta):
    p, a = [3.0, -1.0, 2.0], [1.0, 2.0, 2.0]
    hel = one_joint({"type": "helical", "point": p, "axis": a, "lead_angle": 0, "diameter": 12})
    rev = one_joint({"type": "revolute", "point": p, "axis": a})
    np.testing.assert_allclose(posed(hel, j=theta), posed(rev, j=theta), atol=1e-12)
    np.testing.assert_allclose(posed(rev, j=theta), about_point(rot(a, theta), p), atol=1e-12)


def test_lead_angle_ninety_is_a_slide():
    a = [0.0, 0.6, 0.8]
    hel = one_joint({"type": "helical", "point": [1, 1, 1], "axis": a, "lead_angle": 90, "diameter": 12})
    pri = one_joint({"type": "prismatic", "point": [1, 1, 1], "axis": a})
    assert hel.coordinate_kind("j") == "length"
    np.testing.assert_allclose(posed(hel, j=7.5), posed(pri, j=7.5), atol=1e-12)


@pytest.mark.parametrize("s", [2.5, -4.0])
def test_lead_angle_towards_ninety_approaches_translation(s):
    # as lambda -> 90 deg, the turn that advances s approaches a pure translation s
    a = np.array([0.0, 0.6, 0.8])
    errs = []
    for eps in [1.0, 0.1, 0.01, 0.001]:
        lam, d = 90.0 - eps, 12.0
        lead = math.pi * d * math.tan(math.radians(lam))
        m = one_joint({"type": "helical", "point": [1, 1, 1], "axis": list(a), "lead_angle": lam,
                       "diameter": d})
        T = posed(m, j=360.0 * s / lead)
        np.testing.assert_allclose(a @ (T[:3, 3] - (np.eye(3) - T[:3, :3]) @ [1, 1, 1]), s, atol=1e-9)
        errs.append(np.abs(T - M_translation(a * s)).max())
    assert errs == sorted(errs, reverse=True) and errs[-1] < 1e-3 * abs(s)


def M_translation(t):
    T = np.eye(4)
    T[:3, 3] = t
    return T


@pytest.mark.parametrize("theta", [45.0, 360.0, -720.0])
def test_left_hand_reverses_advance(theta):
    base = {"type": "helical", "point": [0, 5, 0], "axis": [1, 0, 0], "lead": 3.0}
    r = posed(one_joint(dict(base, hand="right")), j=theta)
    l_ = posed(one_joint(dict(base, hand="left")), j=theta)
    np.testing.assert_allclose(r[:3, :3], l_[:3, :3], atol=1e-12)
    np.testing.assert_allclose(r[:3, :3], rot([1, 0, 0], theta), atol=1e-12)
    assert r[0, 3] == pytest.approx(3.0 * theta / 360)
    assert l_[0, 3] == pytest.approx(-3.0 * theta / 360)


@SET
@given(ang, st.floats(0.1, 20))
def test_helical_vs_scipy(theta, lead):
    p, a = np.array([1.0, -2.0, 0.5]), np.array([2.0, -1.0, 2.0]) / 3
    T = posed(one_joint({"type": "helical", "point": list(p), "axis": list(a), "lead": lead}), j=theta)
    np.testing.assert_allclose(T, about_point(rot(a, theta), p, a * lead * theta / 360), atol=1e-9)


# -- primitives and compound joints vs hand-built products of scipy rotations -------------------------
@SET
@given(ang)
def test_revolute_vs_scipy(theta):
    p, a = [4.0, 0.0, -1.0], [0.0, 1.0, 1.0]
    T = posed(one_joint({"type": "revolute", "point": p, "axis": a, "home": 10.0}), j=theta)
    np.testing.assert_allclose(T, about_point(rot(a, theta - 10.0), p), atol=1e-12)


@SET
@given(length)
def test_prismatic_translation(s):
    T = posed(one_joint({"type": "prismatic", "point": [5, 5, 5], "axis": [0, 3, 4], "home": 1.0}), j=s)
    np.testing.assert_allclose(T, M_translation(np.array([0, 0.6, 0.8]) * (s - 1.0)), atol=1e-12)


@SET
@given(ang, length)
def test_cylindrical_order_turn_then_slide(theta, s):
    p, a = np.array([1.0, 2.0, 0.0]), np.array([1.0, 0.0, 0.0])
    m = one_joint({"type": "cylindrical", "point": list(p), "axis": list(a)})
    assert m.coordinates == ["j.1", "j.2"]
    assert [m.coordinate_kind(c) for c in m.coordinates] == ["angle", "length"]
    T = m.pose({"j.1": theta, "j.2": s}).links["b"]
    np.testing.assert_allclose(T, about_point(rot(a, theta), p, a * s), atol=1e-9)


@SET
@given(ang, ang)
def test_universal_order_and_product(alpha, beta):
    p = np.array([0.0, 1.0, 2.0])
    a1, a2 = np.array([0.0, 0.0, 1.0]), np.array([1.0, 1.0, 0.0]) / math.sqrt(2)
    m = one_joint({"type": "universal", "point": list(p), "axis": list(a1), "axis2": list(a2)})
    assert m.coordinates == ["j.1", "j.2"]
    T = m.pose({"j.1": alpha, "j.2": beta}).links["b"]
    # space form: exp(S1 alpha) exp(S2 beta), S2 = home axis2
    R = rot(a1, alpha) @ rot(a2, beta)
    np.testing.assert_allclose(T, about_point(R, p), atol=1e-9)
    # axis2 is carried by the parent's turn: in the child it stays the home axis2
    np.testing.assert_allclose(T[:3, :3] @ a2, rot(a1, alpha) @ a2, atol=1e-9)


@SET
@given(ang, ang, ang)
def test_spherical_order_and_product(x, y, z):
    p = np.array([2.0, 0.0, 1.0])
    a = np.array([0.0, 0.0, 1.0])
    b_hint = np.array([1.0, 0.0, 0.0])
    m = one_joint({"type": "spherical", "point": list(p), "axis": list(a), "axis2": list(b_hint)})
    assert m.coordinates == ["j.1", "j.2", "j.3"]
    c = np.cross(a, b_hint)
    T = m.pose({"j.1": x, "j.2": y, "j.3": z}).links["b"]
    R = rot(a, x) @ rot(b_hint, y) @ rot(c, z)
    np.testing.assert_allclose(T, about_point(R, p), atol=1e-9)


@SET
@given(length, length, ang)
def test_planar_order_two_slides_then_turn(s1, s2, theta):
    p, n = np.array([1.0, 1.0, 3.0]), np.array([0.0, 0.0, 1.0])
    u = np.array([1.0, 1.0, 0.0]) / math.sqrt(2)
    m = one_joint({"type": "planar", "point": list(p), "axis": list(n), "axis2": list(u)})
    assert m.coordinates == ["j.1", "j.2", "j.3"]
    assert [m.coordinate_kind(c) for c in m.coordinates] == ["length", "length", "angle"]
    w = np.cross(n, u)
    T = m.pose({"j.1": s1, "j.2": s2, "j.3": theta}).links["b"]
    ref = M_translation(u * s1) @ M_translation(w * s2) @ about_point(rot(n, theta), p)
    np.testing.assert_allclose(T, ref, atol=1e-9)


def test_fixed_joint_has_no_coordinate():
    m = one_joint({"type": "fixed", "point": [1, 2, 3]})
    assert m.coordinates == []
    np.testing.assert_array_equal(m.pose({}).links["b"], np.eye(4))


def test_primitive_rotation_parts_match_from_rotvec():
    """Every turning primitive's exponential has the rotation from_rotvec(axis * angle)."""
    from jointwise import spatial as S
    specs = [("revolute", {}), ("helical", {"lead": 5.0}), ("cylindrical", {}),
             ("universal", {"axis2": [1.0, 0.0, 0.0]}), ("spherical", {}), ("planar", {})]
    for jtype, extra in specs:
        m = one_joint(dict({"type": jtype, "point": [1.0, 2.0, 3.0], "axis": [0.0, 0.6, -0.8]}, **extra))
        j = m.joints["j"]
        for prim in j.primitives:
            if prim.kind != "angle":
                continue
            w = prim.screw[:3]
            for deg in (-120.0, 0.5, 77.0):
                T = S.exp6(prim.screw, math.radians(deg))
                np.testing.assert_allclose(T[:3, :3], Rotation.from_rotvec(w * math.radians(deg)).as_matrix(),
                                           atol=1e-12, err_msg=jtype)


# -- spherical coordinates from a transform -------------------------------------------------------------
def ball():
    return one_joint({"type": "spherical", "point": [1, 2, 3], "axis": [0, 1, 1]}).joints["j"]


@SET
@given(st.floats(-3, 3), st.floats(-1.5, 1.5), st.floats(-3, 3))
def test_spherical_coordinates_round_trip(d1, d2, d3):
    j = ball()
    e = j.transform(np.array([d1, d2, d3]))
    q = j.coordinates_from_transform(e)
    np.testing.assert_allclose(j.transform(q), e, atol=1e-9)


@pytest.mark.parametrize("sign", [1, -1])
@pytest.mark.parametrize("delta", [1e-2, 1e-4, 0.0])
def test_spherical_round_trip_at_and_away_from_gimbal_lock(sign, delta):
    j = ball()
    e = j.transform(np.array([0.3, sign * (math.pi / 2 - delta), 1.1]))
    np.testing.assert_allclose(j.transform(j.coordinates_from_transform(e)), e, atol=1e-9)


def test_spherical_round_trip_near_gimbal_lock():
    j = ball()
    worst = 0.0
    for sign in (1, -1):
        for delta in (1e-5, 1e-6, 1e-7, 1e-8, 1e-9):
            e = j.transform(np.array([0.3, sign * (math.pi / 2 - delta), 1.1]))
            worst = max(worst, float(np.abs(j.transform(j.coordinates_from_transform(e)) - e).max()))
    assert worst < 1e-9


def test_joint_type_table_and_order():
    assert J.JOINT_TYPES["universal"] == ("angle", "angle")
    assert J.JOINT_TYPES["spherical"] == ("angle", "angle", "angle")
    assert J.JOINT_TYPES["planar"] == ("length", "length", "angle")
    assert J.JOINT_TYPES["cylindrical"] == ("angle", "length")
    assert J.JOINT_TYPES["fixed"] == ()
