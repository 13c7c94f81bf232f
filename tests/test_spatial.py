"""Spatial maths against independent references.

References named per test: ``scipy.spatial.transform.Rotation.from_rotvec`` (rotation
matrices), ``scipy.linalg.expm`` (matrix exponential of the 4x4 twist matrix), and
the textbook identities Ad(T)[S] = T [S] T^-1 and exp(-tS) = exp(tS)^-1 (Lynch & Park,
Modern Robotics, 2017, ch. 3 -- cited from memory).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.linalg import expm
from scipy.spatial.transform import Rotation

import jointwise
from jointwise import spatial as S

finite = st.floats(-10, 10, allow_nan=False, allow_infinity=False)
vec3 = arrays(np.float64, 3, elements=finite)
angle = st.floats(-2 * math.pi, 2 * math.pi, allow_nan=False)
unit3 = vec3.filter(lambda v: np.linalg.norm(v) > 1e-3).map(lambda v: v / np.linalg.norm(v))
pitch = st.floats(-5, 5, allow_nan=False)
SET = settings(max_examples=150, deadline=None)


def rot_about_line(q, w, theta, h=0.0):
    """Independent screw motion: translate q to 0, turn by scipy, translate back, advance h*theta."""
    T = np.eye(4)
    T[:3, :3] = Rotation.from_rotvec(np.asarray(w) * theta).as_matrix()
    T[:3, 3] = np.asarray(q) - T[:3, :3] @ np.asarray(q) + h * theta * np.asarray(w)
    return T


# -- exp3 / exp6 vs scipy -------------------------------------------------------------------------
@SET
@given(vec3)
def test_exp3_matches_scipy_from_rotvec(w):
    np.testing.assert_allclose(S.exp3(w), Rotation.from_rotvec(w).as_matrix(), atol=1e-12)


@pytest.mark.parametrize("scale", [0.0, 1e-12, 1e-9, 1e-6, 1e-4, 1e-3, 0.5, math.pi - 1e-6, math.pi, 4.0])
def test_exp3_matches_scipy_near_special_angles(scale):
    w = np.array([0.3, -0.5, 0.81])
    w = w / np.linalg.norm(w) * scale
    np.testing.assert_allclose(S.exp3(w), Rotation.from_rotvec(w).as_matrix(), atol=1e-14)


@SET
@given(unit3, vec3, pitch, angle)
def test_exp6_matches_scipy_expm_of_twist_matrix(w, q, h, theta):
    s = S.screw_axis(q, w, h)
    np.testing.assert_allclose(S.exp6(s, theta), expm(S.twist_matrix(s) * theta), atol=1e-9)


@SET
@given(unit3, vec3, angle)
def test_exp6_translation_screw_matches_expm(u, v, theta):
    s = S.screw_axis(v, u, math.inf)
    np.testing.assert_allclose(s[:3], 0)
    T = S.exp6(s, theta)
    np.testing.assert_allclose(T, expm(S.twist_matrix(s) * theta), atol=1e-12)
    np.testing.assert_allclose(T[:3, 3], u * theta, atol=1e-12)


@SET
@given(unit3, vec3, pitch, angle)
def test_screw_axis_is_rotation_about_line_with_advance(w, q, h, theta):
    # reference: conjugating a scipy rotation by the translation to the line, plus h*theta along w
    T = S.exp6(S.screw_axis(q, w, h), theta)
    np.testing.assert_allclose(T, rot_about_line(q, w, theta, h), atol=1e-9)


@pytest.mark.parametrize("theta", [0.0, 1e-10, 1e-7, 1e-5, 1e-4 * 0.999, 1e-4 * 1.001, 1e-2])
def test_exp6_small_angles_match_expm(theta):
    s = S.screw_axis([1.0, -2.0, 0.5], [0.2, 0.9, -0.3], 0.7)
    np.testing.assert_allclose(S.exp6(s, theta), expm(S.twist_matrix(s) * theta), atol=1e-13)


def test_screw_axis_zero_direction_raises():
    with pytest.raises(ValueError, match="zero length"):
        S.screw_axis([0, 0, 0], [0, 0, 0])


# -- hypothesis properties ---------------------------------------------------------------------------
@SET
@given(unit3, vec3, pitch, angle)
def test_rotation_part_orthonormal_det_plus_one(w, q, h, theta):
    R = S.exp6(S.screw_axis(q, w, h), theta)[:3, :3]
    np.testing.assert_allclose(R.T @ R, np.eye(3), atol=1e-12)
    assert np.linalg.det(R) == pytest.approx(1.0, abs=1e-12)


@SET
@given(unit3, vec3, pitch, angle)
def test_exp_of_minus_theta_is_inverse(w, q, h, theta):
    s = S.screw_axis(q, w, h)
    np.testing.assert_allclose(S.exp6(s, -theta) @ S.exp6(s, theta), np.eye(4), atol=1e-9)
    np.testing.assert_allclose(S.inverse(S.exp6(s, theta)), S.exp6(s, -theta), atol=1e-9)
    np.testing.assert_allclose(S.inverse(S.exp6(s, theta)), np.linalg.inv(S.exp6(s, theta)), atol=1e-9)


@SET
@given(unit3, vec3, unit3, vec3, angle, angle, vec3)
def test_composition_order(w1, q1, w2, q2, a, b, p):
    """exp(S1 a) exp(S2 b) applied to p == apply exp(S2 b) first, then exp(S1 a)."""
    T1 = S.exp6(S.screw_axis(q1, w1), a)
    T2 = S.exp6(S.screw_axis(q2, w2), b)
    ph = S.to_homogeneous(p)
    first = T2 @ ph
    both = T1 @ first
    np.testing.assert_allclose((T1 @ T2) @ ph, both, atol=1e-9)
    # and against the scipy construction of each motion, applied one after the other
    ref = rot_about_line(q1, w1, a) @ (rot_about_line(q2, w2, b) @ ph)
    np.testing.assert_allclose(both, ref, atol=1e-9)


@SET
@given(unit3, vec3, pitch, angle, unit3, vec3, pitch)
def test_adjoint_identity(w, q, h, theta, w2, q2, h2):
    """twist_matrix(Ad(T) S) == T [S] T^-1 (definition of the adjoint)."""
    T = S.exp6(S.screw_axis(q, w, h), theta)
    s = S.screw_axis(q2, w2, h2)
    lhs = S.twist_matrix(S.adjoint(T) @ s)
    rhs = T @ S.twist_matrix(s) @ np.linalg.inv(T)
    np.testing.assert_allclose(lhs, rhs, atol=1e-9)


@SET
@given(unit3, vec3, pitch, angle, unit3, vec3, pitch)
def test_adjoint_moves_screw_exponentials(w, q, h, theta, w2, q2, h2):
    """exp(Ad(T) S t) == T exp(S t) T^-1, checked with scipy's expm."""
    T = S.exp6(S.screw_axis(q, w, h), theta)
    s = S.screw_axis(q2, w2, h2)
    lhs = expm(S.twist_matrix(S.adjoint(T) @ s) * 0.7)
    rhs = T @ expm(S.twist_matrix(s) * 0.7) @ np.linalg.inv(T)
    np.testing.assert_allclose(lhs, rhs, atol=1e-8)


# -- logarithms ------------------------------------------------------------------------------------
@SET
@given(vec3.filter(lambda v: np.linalg.norm(v) < math.pi - 1e-3))
def test_log3_of_exp3_round_trip(w):
    np.testing.assert_allclose(S.log3(Rotation.from_rotvec(w).as_matrix()), w, atol=1e-9)


AXES = [np.array([1.0, 2.0, 3.0]) / math.sqrt(14), np.array([0.0, 0.0, 1.0]),
        np.array([-0.88, 0.44, 0.176]) / np.linalg.norm([-0.88, 0.44, 0.176])]


@pytest.mark.parametrize("ang", [0.0, 1e-12, 1e-9, 1e-7, 1e-5, 1e-4, 1e-3, 0.5, 3.0])
@pytest.mark.parametrize("k", range(3))
def test_log3_round_trip_near_zero_and_mid(ang, k):
    w = AXES[k] * ang
    r = Rotation.from_rotvec(w).as_matrix()
    np.testing.assert_allclose(S.log3(r), w, atol=1e-10)


def _log3_near_pi_errors(deltas):
    """Largest rotation-vector error of log3 on scipy rotations pi - delta about each axis."""
    worst = 0.0
    for delta in deltas:
        for ax in AXES:
            w = ax * (math.pi - delta)
            r = Rotation.from_rotvec(w).as_matrix()
            w2 = S.log3(r)
            worst = max(worst, float(np.abs(Rotation.from_rotvec(w2).as_matrix() - r).max()))
            if delta > 0:  # at exactly pi the axis sign is arbitrary
                worst = max(worst, float(np.abs(w2 - w).max()))
    return worst


def test_log3_round_trip_a_little_below_pi():
    # reference: scipy's from_rotvec; angles pi - 1e-2 and pi - 1e-3
    assert _log3_near_pi_errors([1e-2, 1e-3]) < 1e-9


def test_log3_round_trip_near_pi():
    # reference: scipy's from_rotvec; pi - delta for delta = 1e-4 ... 1e-8 and 0
    # (observed: error 1.4e-4 rad at delta = 1e-6, ~1e-8 at exactly pi)
    assert _log3_near_pi_errors([1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 0.0]) < 1e-10


def test_log6_round_trip_at_pi():
    s = S.screw_axis([0.4, -1.0, 2.0], [0.0, 0.6, 0.8], 0.3)
    T = S.exp6(s, math.pi)
    np.testing.assert_allclose(expm(S.twist_matrix(S.log6(T))), T, atol=1e-10)


@SET
@given(unit3, vec3, pitch, st.floats(-math.pi + 1e-3, math.pi - 1e-3))
def test_log6_of_exp6_round_trip(w, q, h, theta):
    T = S.exp6(S.screw_axis(q, w, h), theta)
    tw = S.log6(T)
    np.testing.assert_allclose(expm(S.twist_matrix(tw)), T, atol=1e-8)
    np.testing.assert_allclose(tw, S.screw_axis(q, w, h) * theta, atol=1e-7)


@pytest.mark.parametrize("theta", [0.0, 1e-10, 1e-6, 1e-4, 2.0, 3.1])
def test_log6_round_trip_special_angles(theta):
    s = S.screw_axis([0.4, -1.0, 2.0], [0.0, 0.6, 0.8], 0.3)
    T = S.exp6(s, theta)
    np.testing.assert_allclose(expm(S.twist_matrix(S.log6(T))), T, atol=1e-9)


def test_log6_pure_translation():
    T = S.translation([1.0, -2.0, 3.5])
    np.testing.assert_allclose(S.log6(T), [0, 0, 0, 1.0, -2.0, 3.5], atol=1e-15)


# -- homogeneous conversion ----------------------------------------------------------------------------
def test_homogeneous_round_trip_and_scaling():
    p = np.array([[1.0, 2.0, 3.0], [-4.0, 0.5, 0.0]])
    h = S.to_homogeneous(p)
    assert h.shape == (2, 4)
    np.testing.assert_array_equal(h[:, 3], 1.0)
    np.testing.assert_allclose(S.from_homogeneous(h), p)
    np.testing.assert_allclose(S.from_homogeneous(np.array([2.0, 4.0, 6.0, 2.0])), [1, 2, 3])


def test_homogeneous_w_zero_is_a_direction_error():
    with pytest.raises(jointwise.JointwiseError, match="direction"):
        S.from_homogeneous([1.0, 0.0, 0.0, 0.0])
    with pytest.raises(ValueError):
        S.from_homogeneous([[1.0, 2.0, 3.0, 1.0], [1.0, 0.0, 0.0, 0.0]])


@pytest.mark.parametrize("bad", [[1.0, 2.0], [1.0, 2.0, 3.0, 4.0]])
def test_to_homogeneous_shape_error(bad):
    with pytest.raises(ValueError):
        S.to_homogeneous(bad)


def test_from_homogeneous_shape_error():
    with pytest.raises(ValueError):
        S.from_homogeneous([1.0, 2.0, 3.0])


# -- stacks broadcast --------------------------------------------------------------------------------
def test_exp6_broadcasts_stack_of_screws_and_values():
    rng = np.random.default_rng(7)
    w = rng.normal(size=(4, 5, 3))
    w /= np.linalg.norm(w, axis=-1, keepdims=True)
    q = rng.normal(size=(4, 5, 3))
    s = np.concatenate([w, -np.cross(w, q) + 0.2 * w], axis=-1)
    th = rng.uniform(-3, 3, size=(4, 5))
    T = S.exp6(s, th)
    assert T.shape == (4, 5, 4, 4)
    for i in range(4):
        for j in range(5):
            np.testing.assert_allclose(T[i, j], expm(S.twist_matrix(s[i, j]) * th[i, j]), atol=1e-9)
    # one screw, many values
    T2 = S.exp6(s[0, 0], th[0])
    assert T2.shape == (5, 4, 4)
    np.testing.assert_allclose(T2[3], expm(S.twist_matrix(s[0, 0]) * th[0, 3]), atol=1e-9)


def test_exp3_log3_adjoint_inverse_stacks():
    rng = np.random.default_rng(3)
    w = rng.uniform(-1.5, 1.5, size=(6, 3))
    R = S.exp3(w)
    assert R.shape == (6, 3, 3)
    np.testing.assert_allclose(R, Rotation.from_rotvec(w).as_matrix(), atol=1e-12)
    np.testing.assert_allclose(S.log3(R), w, atol=1e-9)
    T = np.zeros((6, 4, 4))
    T[:, :3, :3] = R
    T[:, :3, 3] = rng.normal(size=(6, 3))
    T[:, 3, 3] = 1
    A = S.adjoint(T)
    assert A.shape == (6, 6, 6)
    np.testing.assert_allclose(S.inverse(T), np.linalg.inv(T), atol=1e-12)
    tw = S.log6(T)
    assert tw.shape == (6, 6)
    for k in range(6):
        np.testing.assert_allclose(A[k], S.adjoint(T[k]))
        np.testing.assert_allclose(expm(S.twist_matrix(tw[k])), T[k], atol=1e-9)


def test_hat_vee():
    w = np.array([1.0, -2.0, 3.0])
    x = np.array([0.5, 0.25, -4.0])
    np.testing.assert_allclose(S.hat(w) @ x, np.cross(w, x))
    np.testing.assert_allclose(S.vee(S.hat(w)), w)


@pytest.mark.parametrize("angle", [0.0, 1e-7, 0.4, 2.0, 3.1])
def test_log3_derivative_inverse_matches_differences(angle):
    # d log(E exp(-[w] t)) / dt = -J_r^-1(log E) w (Chirikjian 2011, vol. 2, sec. 10.2),
    # checked by central differences at rotations up to nearly pi
    axis = np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8])
    from jointwise import spatial
    E = spatial.exp3(axis * angle)
    w = np.array([0.2, 0.7, -0.4])
    h = 1e-6
    fd = (spatial.log3(E @ spatial.exp3(-w * h)) - spatial.log3(E @ spatial.exp3(w * h))) / (2 * h)
    got = -spatial.log3_derivative_inverse(spatial.log3(E)) @ w
    assert np.allclose(got, fd, atol=1e-7)


@pytest.mark.parametrize("angle", [0.0, 1e-9, 1e-5, 0.05, 0.13, 0.15, 1.0, 3.0])
def test_log3_of_one_rotation_matches_scipy(angle):
    # one (3, 3) rotation takes the scalar series up to about 8 deg, the stacked form
    # beyond: both give scipy's rotation vector
    from jointwise import spatial
    axis = np.array([-0.2, 0.9, 0.4]) / np.linalg.norm([-0.2, 0.9, 0.4])
    R = Rotation.from_rotvec(axis * angle).as_matrix()
    assert np.allclose(spatial.log3(R), axis * angle, rtol=0, atol=1e-13)
    assert np.allclose(spatial.log3(R[None])[0], axis * angle, rtol=0, atol=1e-13)
