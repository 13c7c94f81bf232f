"""Axis fits of addon/fit.py (host-free: numpy only), against known generated geometry
and against scipy.optimize.least_squares on the geometric circle fit."""
from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import least_squares
from scipy.spatial.transform import Rotation

_spec = importlib.util.spec_from_file_location(
    "jointwise_addon_fit", Path(__file__).resolve().parents[1] / "addon" / "fit.py")
fit = importlib.util.module_from_spec(_spec)
sys.modules[_spec.name] = fit  # dataclasses look their module up there
_spec.loader.exec_module(fit)


def _pose(rng):
    """A random rigid pose: rotation (scipy, uniform) and a translation."""
    return Rotation.random(random_state=rng).as_matrix(), rng.uniform(-50, 50, 3)


def _ring(rng, n=24, radius=7.5, noise=0.0, arc=2 * np.pi):
    R, t = _pose(rng)
    a = np.linspace(0, arc, n, endpoint=arc < 2 * np.pi)
    local = np.column_stack([radius * np.cos(a), radius * np.sin(a), np.zeros(n)])
    local += rng.normal(0, noise, local.shape) if noise else 0
    return local @ R.T + t, t, R[:, 2]


def _side_faces(rng, sides=16, rows=3, radius=4.0, height=10.0, noise_deg=0.0):
    """Quad side faces of a generated cylinder at a random pose: centres and normals."""
    R, t = _pose(rng)
    half = np.pi / sides
    a = np.arange(sides) * 2 * half + half
    z = (np.arange(rows) + 0.5) * height / rows
    aa, zz = np.meshgrid(a, z)
    apothem = radius * np.cos(half)
    centres = np.column_stack([apothem * np.cos(aa.ravel()), apothem * np.sin(aa.ravel()), zz.ravel()])
    normals = np.column_stack([np.cos(aa.ravel()), np.sin(aa.ravel()), np.zeros(aa.size)])
    if noise_deg:
        tilt = Rotation.from_rotvec(rng.normal(0, np.radians(noise_deg), normals.shape))
        normals = tilt.apply(normals)
    return centres @ R.T + t, normals @ R.T, t, R[:, 2], apothem


def _angle(a, b):
    return np.degrees(np.arccos(min(1.0, abs(float(np.dot(a, b)) / np.linalg.norm(a) / np.linalg.norm(b)))))


def _line_distance(p, point, axis):
    d = p - point
    return float(np.linalg.norm(d - np.dot(d, axis) * axis))


def test_fit_circle_algebraic_three_points_define_the_circle():
    # worked example: (1, 0), (0, 1), (-1, 0) lie on the unit circle about the origin
    c, r = fit.fit_circle_algebraic([[1, 0], [0, 1], [-1, 0]])
    assert np.allclose(c, [0, 0], atol=1e-12) and abs(r - 1) < 1e-12


def test_axis_from_ring_exact_at_random_poses():
    rng = np.random.default_rng(10)
    for _ in range(20):
        pts, centre, axis = _ring(rng, n=int(rng.integers(3, 40)), radius=float(rng.uniform(0.5, 30)))
        f = fit.axis_from_ring(pts, hint=axis)
        assert np.linalg.norm(f.point - centre) < 1e-9 * 50
        assert np.dot(f.axis, axis) > 1 - 1e-12
        assert f.residual < 1e-9


@pytest.mark.parametrize("arc_deg", [360, 120])
def test_axis_from_ring_with_noise_at_random_poses(arc_deg):
    rng = np.random.default_rng(1976)
    sigma, radius = 0.01, 7.5
    for _ in range(20):
        pts, centre, axis = _ring(rng, n=48, radius=radius, noise=sigma, arc=np.radians(arc_deg))
        f = fit.axis_from_ring(pts)
        # the centre should sit within a few standard errors (sigma * sqrt(2 / n) for a
        # full ring; a 120 deg arc is worse conditioned, so the bound is looser there)
        bound = 6 * sigma * np.sqrt(2 / 48) * (1 if arc_deg == 360 else 8)
        assert _line_distance(f.point, centre, axis) < bound
        assert _angle(f.axis, axis) < (0.1 if arc_deg == 360 else 0.5)
        assert 0.5 * sigma < f.residual < 2 * sigma
        assert abs(f.radius - radius) < 6 * sigma * (1 if arc_deg == 360 else 8)


def test_fit_circle_matches_scipy_least_squares_geometric_fit():
    # reference: scipy.optimize.least_squares on the orthogonal distances |p - c| - r
    rng = np.random.default_rng(1991)
    for arc in (2 * np.pi, np.radians(90), np.radians(45)):
        a = rng.uniform(0, arc, 30)
        xy = np.column_stack([3 + 12 * np.cos(a), -4 + 12 * np.sin(a)]) + rng.normal(0, 0.05, (30, 2))
        c, r, rms = fit.fit_circle(xy)
        c0, r0 = fit.fit_circle_algebraic(xy)
        ref = least_squares(lambda x: np.linalg.norm(xy - x[:2], axis=1) - x[2], [*c0, r0],
                            xtol=1e-15, ftol=1e-15, gtol=1e-15)
        assert np.allclose(c, ref.x[:2], atol=1e-7 * 12) and abs(r - ref.x[2]) < 1e-7 * 12
        assert abs(rms - np.sqrt(2 * ref.cost / 30)) < 1e-9


def test_geometric_fit_improves_on_kasa_for_a_short_noisy_arc():
    # Kåsa's fit is known to pull the radius in on short arcs (Chernov 2010, sec. 5.3);
    # the geometric refinement lowers the sum of squared orthogonal distances.
    rng = np.random.default_rng(3)
    a = rng.uniform(0, np.radians(60), 40)
    xy = np.column_stack([10 * np.cos(a), 10 * np.sin(a)]) + rng.normal(0, 0.1, (40, 2))
    c0, r0 = fit.fit_circle_algebraic(xy)
    c, r, rms = fit.fit_circle(xy)
    rms0 = np.sqrt(np.mean((np.linalg.norm(xy - c0, axis=1) - r0) ** 2))
    assert rms < rms0


def test_axis_from_faces_of_cylinders_at_random_poses():
    rng = np.random.default_rng(1987)
    for noise in (0.0, 0.5):
        for _ in range(10):
            centres, normals, base, axis, apothem = _side_faces(rng, sides=int(rng.integers(6, 33)),
                                                               noise_deg=noise)
            f = fit.axis_from_faces(centres, normals, hint=axis)
            assert np.dot(f.axis, axis) > 0
            # out-of-plane normal noise of sigma degrees moves the axis by about
            # sigma * sqrt(2 / n) (n normals spread round the axis): allow four times that
            assert _angle(f.axis, axis) < (1e-9 if noise == 0 else 4 * noise * np.sqrt(2 / len(normals)))
            assert _line_distance(f.point, base, axis) < (1e-9 if noise == 0 else 0.05)
            if noise == 0:
                assert abs(f.radius - apothem) < 1e-9 and f.residual < 1e-9


def test_hint_sets_the_sign_of_the_axis():
    rng = np.random.default_rng(5)
    pts, _, axis = _ring(rng)
    assert np.dot(fit.axis_from_ring(pts, hint=axis).axis, axis) > 0.999
    assert np.dot(fit.axis_from_ring(pts, hint=-axis).axis, axis) < -0.999


def test_refuses_fewer_than_three_points():
    with pytest.raises(fit.FitError, match="at least three points.*got 2"):
        fit.axis_from_ring([[0, 0, 0], [1, 0, 0]])
    with pytest.raises(fit.FitError, match="at least three faces"):
        fit.axis_from_faces([[0, 0, 0], [1, 0, 0]], [[1, 0, 0], [0, 1, 0]])


def test_refuses_collinear_or_coincident_points():
    with pytest.raises(fit.FitError, match="lie on a line"):
        fit.axis_from_ring([[0, 0, 0], [1, 1, 1], [2, 2, 2], [5, 5, 5]])
    with pytest.raises(fit.FitError, match="one place"):
        fit.axis_from_ring([[1, 2, 3]] * 4)


def test_refuses_normals_that_do_not_share_an_axis():
    rng = np.random.default_rng(7)
    centres, normals, base, axis, _ = _side_faces(rng)
    # add the two caps: their normals lie along the axis
    caps_c = np.array([base, base + 10 * axis])
    caps_n = np.array([-axis, axis])
    with pytest.raises(fit.FitError, match="do not share an axis"):
        fit.axis_from_faces(np.vstack([centres[:6], caps_c]), np.vstack([normals[:6], caps_n]))
    with pytest.raises(fit.FitError, match="flat patch"):
        fit.axis_from_faces(centres[:3], np.tile(normals[0], (3, 1)))
