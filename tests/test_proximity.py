"""The clearance check's host-free helpers (addon/proximity.py), without Blender.

References: closest points between segments and on triangles from Ericson, Real-Time
Collision Detection (2005), §5.1.9 and §5.1.5, checked here against scipy's bounded
minimiser and against dense sampling; the contact text against hand-written cases."""
from __future__ import annotations

import importlib.util
import os
import pathlib

import numpy as np
import pytest
from scipy.optimize import minimize

PATH = pathlib.Path(__file__).resolve().parent.parent / "addon" / "proximity.py"
_spec = importlib.util.spec_from_file_location("jointwise_addon_proximity", PATH)
px = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(px)


def test_module_is_host_free():
    text = PATH.read_text(encoding="utf-8")
    for mod in ("bpy", "mathutils", "bmesh"):
        assert f"import {mod}" not in text


@pytest.mark.parametrize("frames, text", [
    ([12, 13, 14, 15, 16, 17, 18, 40], "12-18, 40"),
    ([], ""),
    ([5], "5"),
    ([3, 1, 2, 2], "1-3"),
    ([1, 3, 5, 6], "1, 3, 5-6"),
])
def test_contact_text_hand_cases(frames, text):
    assert px.contact_text(frames) == text
    assert px.frames_from_text(text) == sorted(set(frames))


def test_contact_intervals_first_frames():
    assert [a for a, _ in px.contact_intervals([40, 12, 13, 18, 19])] == [12, 18, 40]


def _seg_min_scipy(p1, q1, p2, q2):
    def f(x):
        return float(np.sum((p1 + x[0] * (q1 - p1) - p2 - x[1] * (q2 - p2)) ** 2))
    best = np.inf
    for x0 in ([0.5, 0.5], [0, 0], [1, 1], [0, 1], [1, 0]):
        r = minimize(f, x0, bounds=[(0, 1), (0, 1)], method="L-BFGS-B",
                     options={"ftol": 1e-15, "gtol": 1e-12})
        best = min(best, r.fun)
    return np.sqrt(max(best, 0.0))


def test_segment_closest_points_against_scipy():
    rng = np.random.default_rng(7)
    p1, q1, p2, q2 = (rng.normal(size=(60, 3)) for _ in range(4))
    d, c1, c2 = px.segment_closest_points(p1, q1, p2, q2)
    ref = np.array([_seg_min_scipy(*x) for x in zip(p1, q1, p2, q2)])
    np.testing.assert_allclose(d, ref, atol=1e-6)
    np.testing.assert_allclose(np.linalg.norm(c1 - c2, axis=1), d, atol=1e-12)


def test_segment_closest_points_hand_cases():
    # crossing at right angles 1 apart: distance 1 at the middles (by hand)
    d, c1, c2 = px.segment_closest_points([-1, 0, 0], [1, 0, 0], [0, -1, 1], [0, 1, 1])
    assert d == pytest.approx(1.0)
    np.testing.assert_allclose(c1, [0, 0, 0], atol=1e-15)
    np.testing.assert_allclose(c2, [0, 0, 1], atol=1e-15)
    # parallel, overlapping in x, 2 apart
    d, _, _ = px.segment_closest_points([0, 0, 0], [2, 0, 0], [1, 2, 0], [3, 2, 0])
    assert d == pytest.approx(2.0)
    # collinear, end to end with a gap of 0.5
    d, _, _ = px.segment_closest_points([0, 0, 0], [1, 0, 0], [1.5, 0, 0], [3, 0, 0])
    assert d == pytest.approx(0.5)
    # point against segment, both orders, and point against point
    d, _, _ = px.segment_closest_points([0, 1, 0], [0, 1, 0], [-1, 0, 0], [1, 0, 0])
    assert d == pytest.approx(1.0)
    d, _, _ = px.segment_closest_points([-1, 0, 0], [1, 0, 0], [3, 0, 0], [3, 0, 0])
    assert d == pytest.approx(2.0)
    d, _, _ = px.segment_closest_points([0, 0, 0], [0, 0, 0], [0, 3, 4], [0, 3, 4])
    assert d == pytest.approx(5.0)


def test_triangle_closest_points_against_sampling():
    rng = np.random.default_rng(11)
    for _ in range(60):
        a, b, c = rng.normal(size=(3, 3))
        p = rng.normal(size=3) * 2
        q = px.triangle_closest_points(p, a, b, c)
        # dense barycentric sampling: the closest point is no farther than any sample
        u, v = np.meshgrid(np.linspace(0, 1, 121), np.linspace(0, 1, 121))
        m = u + v <= 1
        pts = a + np.outer(u[m], b - a) + np.outer(v[m], c - a)
        dmin = np.linalg.norm(pts - p, axis=1).min()
        dq = np.linalg.norm(q - p)
        assert dq <= dmin + 1e-12
        # ... and it lies on the triangle: scipy's bounded minimiser over (u, v) agrees
        r = minimize(lambda x: float(np.sum((a + x[0] * (b - a) + x[1] * (c - a) - p) ** 2)),
                     [1 / 3, 1 / 3], method="SLSQP", bounds=[(0, 1), (0, 1)],
                     constraints=[{"type": "ineq", "fun": lambda x: 1 - x[0] - x[1]}],
                     options={"ftol": 1e-14})
        assert dq == pytest.approx(np.sqrt(r.fun), abs=1e-6)


def test_triangle_closest_points_hand_cases():
    a, b, c = np.array([0, 0, 0.]), np.array([1, 0, 0.]), np.array([0, 1, 0.])
    np.testing.assert_allclose(px.triangle_closest_points([0.2, 0.2, 3], a, b, c), [0.2, 0.2, 0])
    np.testing.assert_allclose(px.triangle_closest_points([-1, -1, 0], a, b, c), a)
    np.testing.assert_allclose(px.triangle_closest_points([2, -1, 0], a, b, c), b)
    np.testing.assert_allclose(px.triangle_closest_points([1, 1, 0], a, b, c), [0.5, 0.5, 0])
    np.testing.assert_allclose(px.triangle_closest_points([0.5, -2, 1], a, b, c), [0.5, 0, 0])


def test_closed_surface():
    tet = [[0, 1, 2], [0, 3, 1], [1, 3, 2], [2, 3, 0]]
    assert px.is_closed(tet)
    assert not px.is_closed(tet[:3])
    assert not px.is_closed([])
    edges, counts = px.triangle_edges(tet)
    assert len(edges) == 6 and set(counts) == {2}


def _box(lo, hi, start=0):
    """A closed box of 12 triangles, outward faces (each face split on a diagonal)."""
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    v = np.array([[(hi if i & 1 else lo)[0], (hi if i & 2 else lo)[1], (hi if i & 4 else lo)[2]]
                  for i in range(8)])
    quads = [(0, 2, 3, 1), (4, 5, 7, 6), (0, 1, 5, 4), (2, 6, 7, 3), (0, 4, 6, 2), (1, 3, 7, 5)]
    tris = [(a, b, c) for a, b, c, d in quads] + [(a, c, d) for a, b, c, d in quads]
    return v, np.array(tris) + start


def test_inside_closed_against_half_spaces_and_a_hollow_shell():
    """Inside a box: against the box's half-spaces from scipy's convex hull (Qhull);
    inside a hollow shell (a box within a box, as one closed mesh): in the outer box
    and not in the inner one (parity counts both surfaces)."""
    from scipy.spatial import ConvexHull
    v, t = _box((-1, -1, -1), (1, 1, 1))
    assert px.is_closed(t)
    eq = ConvexHull(v).equations
    rng = np.random.default_rng(11)
    for p in rng.uniform(-1.6, 1.6, size=(300, 3)):
        want = bool(np.all(eq[:, :3] @ p + eq[:, 3] < 0))
        assert px.inside_closed(p, v, t) == want, p
    vi, ti = _box((-0.5, -0.5, -0.5), (0.5, 0.5, 0.5), start=8)
    shell_v, shell_t = np.vstack([v, vi]), np.vstack([t, ti])
    for p in rng.uniform(-1.6, 1.6, size=(300, 3)):
        want = bool(np.all(np.abs(p) < 1) and not np.all(np.abs(p) < 0.5))
        assert px.inside_closed(p, shell_v, shell_t) == want, p


def test_inside_closed_when_the_first_ray_grazes_an_edge():
    v, t = _box((-1, -1, -1), (1, 1, 1))
    d = px._RAYS[0]
    a, b, c = v[t[:, 0]], v[t[:, 1]], v[t[:, 2]]
    # rays along the first direction through a box edge and through a face's diagonal
    # (the edge two triangles share) cannot be counted: the next direction decides
    cases = [((1, 1, 0.3), 0.5, True), ((1, 1, 0.3), 3.0, False), ((-1, 0.2, 1), 3.0, False),
             ((0, 0, 1), 0.5, True), ((0, 0, -1), 0.5, False)]
    for through, back, inside in cases:
        origin = np.array(through) - back * d
        assert bool(np.all(np.abs(origin) < 1)) == inside  # the case is what it says
        assert px.ray_crossings(origin, d, a, b, c) is None
        assert px.inside_closed(origin, v, t) == inside
    # a point on the surface counts as outside (touching is not overlapping)
    assert not px.inside_closed((1.0, 0.2, 0.3), v, t)
    # a clean ray is counted: from the centre one crossing, from outside none or two
    assert px.ray_crossings((0, 0, 0), d, a, b, c) == 1
    assert px.ray_crossings((0.1, -0.2, -3), d, a, b, c) in (0, 2)


def test_bounding_sphere_holds_all_points():
    pts = np.random.default_rng(3).normal(size=(500, 3))
    c, r = px.bounding_sphere(pts)
    assert np.linalg.norm(pts - c, axis=1).max() == pytest.approx(r)


def test_write_csv_atomic(tmp_path):
    path = tmp_path / "gaps.csv"
    path.write_text("old\n")
    px.write_csv_atomic(path, ["a", "b"], [[1, 2.5], ["x", "y"]])
    assert path.read_text().splitlines() == ["a,b", "1,2.5", "x,y"]

    class Boom:
        def __iter__(self):
            yield [1, 2]
            raise RuntimeError("stop")

    with pytest.raises(RuntimeError):
        px.write_csv_atomic(path, ["a", "b"], Boom())
    assert path.read_text().splitlines() == ["a,b", "1,2.5", "x,y"]  # earlier file kept
    assert sorted(os.listdir(tmp_path)) == ["gaps.csv"]  # no temporary left behind


def test_sphere_clusters_bound_every_triangle_and_the_distance():
    rng = np.random.default_rng(5)
    va = rng.normal(size=(300, 3))
    ta = rng.integers(0, 300, size=(500, 3))
    vb = rng.normal(size=(200, 3)) + [6.0, 0, 0]
    tb = rng.integers(0, 200, size=(300, 3))
    ca, ra, tga, vga = px.sphere_clusters(va, ta)
    cb, rb, tgb, vgb = px.sphere_clusters(vb, tb)
    assert len(ca) <= 16 and len(cb) <= 16
    # every triangle lies in its own group's sphere, every used vertex in the group named
    for t, g in zip(ta, tga):
        assert (np.linalg.norm(va[t] - ca[g], axis=1) <= ra[g] + 1e-12).all()
    used = np.unique(ta)
    assert (np.linalg.norm(va[used] - ca[vga[used]], axis=1) <= ra[vga[used]] + 1e-12).all()
    # the groups' bound is below a distance between points of the two meshes
    low = px.group_gaps(ca, ra, cb, rb).min()
    assert low <= np.linalg.norm(va[used][:, None] - vb[np.unique(tb)][None], axis=2).min()
    # stacked placements give the same as one at a time
    stack = np.stack([ca, ca + 1.0])
    np.testing.assert_allclose(px.group_gaps(stack, ra, cb, rb),
                               [px.group_gaps(ca, ra, cb, rb), px.group_gaps(ca + 1.0, ra, cb, rb)])
    pg = px.point_gaps(va[:5], cb, rb)
    np.testing.assert_allclose(pg, (np.linalg.norm(va[:5, None] - cb[None], axis=2) - rb).min(axis=1),
                               atol=1e-9)
