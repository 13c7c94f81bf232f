"""Host-free helpers of the clearance check (numpy only; no bpy, no mathutils).

Everything here works on plain arrays so it is tested without Blender:

- contact intervals of integer frames and their text (``"12-18, 40"``);
- closest points between segments, stacked (Ericson, *Real-Time Collision Detection*,
  2005, §5.1.9, ``ClosestPtSegmentSegment``);
- closest points on triangles, stacked (same book, §5.1.5, ``ClosestPtPointTriangle``);
- edges of a triangle list and whether the surface is closed (every edge on exactly two
  triangles), and whether a point is inside a closed surface (parity of a ray's
  crossings, Möller and Trumbore's ray-triangle test, 1997), for a mesh wholly inside
  another;
- a CSV file written atomically (a temporary name in the same folder, then a move).

Conventions: points are rows, shape ``(..., 3)``; lengths are in whatever unit the
caller uses (scene units in the extension).
"""
from __future__ import annotations

import csv
import io
import os

import numpy as np


# -- frames ------------------------------------------------------------------------------------

def contact_intervals(frames):
    """Runs of consecutive integers in ``frames`` as a list of ``(first, last)``.

    >>> contact_intervals([12, 13, 14, 40])
    [(12, 14), (40, 40)]
    """
    fs = sorted({int(f) for f in frames})
    out = []
    for f in fs:
        if out and f == out[-1][1] + 1:
            out[-1] = (out[-1][0], f)
        else:
            out.append((f, f))
    return out


def contact_text(frames):
    """``"12-18, 40"`` for the frames 12..18 and 40; ``""`` for none."""
    return ", ".join(f"{a}" if a == b else f"{a}-{b}" for a, b in contact_intervals(frames))


def frames_from_text(text):
    """The frames listed by :func:`contact_text` (the inverse), as a sorted list."""
    out = []
    for part in (p.strip() for p in str(text).split(",")):
        if not part:
            continue
        a, sep, b = part.partition("-")
        if sep:
            out.extend(range(int(a), int(b) + 1))
        else:
            out.append(int(a))
    return out


# -- closest points ------------------------------------------------------------------------------

def segment_closest_points(p1, q1, p2, q2, eps=1e-300):
    """Closest points between segments ``p1 q1`` and ``p2 q2`` (stacks broadcast).

    Returns ``(distance, c1, c2)`` with shapes ``(...)``, ``(..., 3)``, ``(..., 3)``.
    Ericson, Real-Time Collision Detection (2005), §5.1.9: minimise
    ``|p1 + s d1 - (p2 + t d2)|`` over ``s, t`` in [0, 1], clamping ``s`` and then
    recomputing ``t`` (and ``s`` once more) so the result lies on both segments;
    degenerate (zero-length) segments are handled as points.
    """
    p1, q1, p2, q2 = (np.asarray(x, dtype=float) for x in (p1, q1, p2, q2))
    p1, q1, p2, q2 = np.broadcast_arrays(p1, q1, p2, q2)
    d1 = q1 - p1
    d2 = q2 - p2
    r = p1 - p2
    a = np.einsum("...i,...i->...", d1, d1)
    e = np.einsum("...i,...i->...", d2, d2)
    f = np.einsum("...i,...i->...", d2, r)
    c = np.einsum("...i,...i->...", d1, r)
    b = np.einsum("...i,...i->...", d1, d2)
    denom = a * e - b * b
    pa = a > eps  # first segment is not a point
    pe = e > eps  # second segment is not a point
    safe_a = np.where(pa, a, 1.0)
    safe_e = np.where(pe, e, 1.0)
    # general case: s from the unclamped solution (0 when parallel), clamped
    general = denom > 1e-12 * a * e  # not parallel (parallel: any s works, the book takes 0)
    s = np.where(general, (b * f - c * e) / np.where(general, denom, 1.0), 0.0)
    s = np.clip(s, 0.0, 1.0)
    t = (b * s + f) / safe_e
    # t outside [0, 1]: clamp it and recompute s
    s = np.where(t < 0.0, np.clip(-c / safe_a, 0.0, 1.0), np.where(t > 1.0, np.clip((b - c) / safe_a, 0.0, 1.0), s))
    t = np.clip(t, 0.0, 1.0)
    # degenerate segments
    s = np.where(~pa, 0.0, s)
    t = np.where(~pa & pe, np.clip(f / safe_e, 0.0, 1.0), t)
    s = np.where(pa & ~pe, np.clip(-c / safe_a, 0.0, 1.0), s)
    t = np.where(~pe, 0.0, t)
    c1 = p1 + d1 * s[..., None]
    c2 = p2 + d2 * t[..., None]
    return np.linalg.norm(c1 - c2, axis=-1), c1, c2


def triangle_closest_points(p, a, b, c):
    """Closest point on triangle ``a b c`` to ``p`` (stacks broadcast), shape ``(..., 3)``.

    Ericson, Real-Time Collision Detection (2005), §5.1.5: the Voronoi regions of the
    vertices, then of the edges, else the face (barycentric coordinates)."""
    p, a, b, c = (np.asarray(x, dtype=float) for x in (p, a, b, c))
    p, a, b, c = np.broadcast_arrays(p, a, b, c)

    def dot(u, v):
        return np.einsum("...i,...i->...", u, v)

    ab, ac, ap = b - a, c - a, p - a
    d1, d2 = dot(ab, ap), dot(ac, ap)
    bp = p - b
    d3, d4 = dot(ab, bp), dot(ac, bp)
    cp = p - c
    d5, d6 = dot(ab, cp), dot(ac, cp)
    vc = d1 * d4 - d3 * d2
    vb = d5 * d2 - d1 * d6
    va = d3 * d6 - d5 * d4

    def ratio(n, d):
        return n / np.where(d != 0, d, 1.0)

    # face region by default
    denom = va + vb + vc
    v = ratio(vb, denom)
    w = ratio(vc, denom)
    out = a + ab * v[..., None] + ac * w[..., None]
    # regions in the book's order reversed (later assignments win where their region holds)
    bc_region = (va <= 0) & ((d4 - d3) >= 0) & ((d5 - d6) >= 0)
    wbc = ratio(d4 - d3, (d4 - d3) + (d5 - d6))
    out = np.where(bc_region[..., None], b + (c - b) * wbc[..., None], out)
    ac_region = (vb <= 0) & (d2 >= 0) & (d6 <= 0)
    out = np.where(ac_region[..., None], a + ac * ratio(d2, d2 - d6)[..., None], out)
    out = np.where(((d6 >= 0) & (d5 <= d6))[..., None], c, out)  # vertex c
    ab_region = (vc <= 0) & (d1 >= 0) & (d3 <= 0)
    out = np.where(ab_region[..., None], a + ab * ratio(d1, d1 - d3)[..., None], out)
    # vertex regions b, a (the book's first tests: applied last, so they win)
    out = np.where(((d3 >= 0) & (d4 <= d3))[..., None], b, out)
    out = np.where(((d1 <= 0) & (d2 <= 0))[..., None], a, out)
    return out


# -- meshes --------------------------------------------------------------------------------------

def triangle_edges(tris):
    """Unique edges ``(E, 2)`` (smaller index first) and how many triangles use each."""
    tris = np.asarray(tris, dtype=np.int64).reshape(-1, 3)
    e = np.concatenate([tris[:, [0, 1]], tris[:, [1, 2]], tris[:, [2, 0]]])
    e.sort(axis=1)
    edges, counts = np.unique(e, axis=0, return_counts=True)
    return edges, counts


def is_closed(tris):
    """True when every edge of the triangles is shared by exactly two of them (a closed
    surface, so "inside" is defined)."""
    tris = np.asarray(tris).reshape(-1, 3)
    if len(tris) == 0:
        return False
    _, counts = triangle_edges(tris)
    return bool(np.all(counts == 2))


# ray directions for the inside test: fixed, far from the axes and from each other, so
# a ray along one rarely grazes an edge of a modelled part (when it does, the next is used)
_RAYS = np.array([[0.5773502, 0.5773503, 0.5773504], [-0.2672612, 0.8017837, -0.5345225],
                  [0.8728716, -0.2182179, 0.4364358], [-0.4082483, -0.4082482, 0.8164966],
                  [0.1961161, -0.9805807, 0.0000001]])
_RAYS /= np.linalg.norm(_RAYS, axis=1)[:, None]


def ray_crossings(origin, direction, a, b, c, tol=1e-9):
    """How many of the triangles ``a b c`` (stacks ``(T, 3)``) the ray ``origin +
    t direction``, ``t > 0``, crosses, or None when it passes within ``tol`` (in
    barycentric terms, or in ``t`` relative to the triangles' size) of an edge, a
    vertex, its own origin or a triangle's plane it runs along, where crossings cannot
    be counted safely. Möller and Trumbore, "Fast, minimum storage ray-triangle
    intersection", Journal of Graphics Tools 2(1), 1997 (in double precision)."""
    o = np.asarray(origin, dtype=float)
    d = np.asarray(direction, dtype=float)
    e1, e2 = b - a, c - a
    pvec = np.cross(d, e2)
    det = np.einsum("ij,ij->i", e1, pvec)
    tvec = o - a
    qvec = np.cross(tvec, e1)
    size = max(float(np.abs(e1).max(initial=0.0)), float(np.abs(e2).max(initial=0.0)), 1e-300)
    area = np.linalg.norm(np.cross(e1, e2), axis=1)
    flat = np.abs(det) <= tol * area
    safe = np.where(flat, 1.0, det)
    u = np.einsum("ij,ij->i", tvec, pvec) / safe
    v = (qvec @ d) / safe
    t = np.einsum("ij,ij->i", e2, qvec) / safe
    w = 1.0 - u - v
    # a ray along a triangle's plane: unsafe only when it runs in that plane
    in_plane = flat & (np.abs(np.einsum("ij,ij->i", tvec, np.cross(e1, e2))) <= tol * size * np.maximum(area, 1e-300))
    ok = ~flat
    hit = ok & (u > tol) & (v > tol) & (w > tol) & (t > tol * size)
    miss = ~ok | (u < -tol) | (v < -tol) | (w < -tol) | (t < -tol * size)
    if np.any(in_plane) or not np.all(hit | miss):
        return None
    return int(hit.sum())


def inside_closed(point, verts, tris):
    """Is ``point`` inside the closed triangle surface ``verts``, ``tris``? (odd number
    of crossings of a ray from it, :func:`ray_crossings`; a ray that grazes an edge is
    replaced by the next direction). A point on the surface, where every ray grazes,
    counts as outside (touching, not overlapping)."""
    verts = np.asarray(verts, dtype=float)
    p = np.asarray(point, dtype=float)
    if len(verts) == 0 or np.any(p < verts.min(axis=0)) or np.any(p > verts.max(axis=0)):
        return False  # outside the bounding box
    tris = np.asarray(tris, dtype=np.int64).reshape(-1, 3)
    a, b, c = verts[tris[:, 0]], verts[tris[:, 1]], verts[tris[:, 2]]
    for d in _RAYS:
        n = ray_crossings(point, d, a, b, c)
        if n is not None:
            return n % 2 == 1
    return False


def bounding_sphere(points):
    """Centre (of the bounding box) and radius enclosing all ``points`` ``(N, 3)``."""
    pts = np.asarray(points, dtype=float).reshape(-1, 3)
    centre = 0.5 * (pts.min(axis=0) + pts.max(axis=0))
    return centre, float(np.sqrt(((pts - centre) ** 2).sum(axis=1).max()))


def transform_points(m, points):
    """``m`` (4, 4) applied to ``points`` (N, 3)."""
    m = np.asarray(m, dtype=float)
    return np.asarray(points, dtype=float) @ m[:3, :3].T + m[:3, 3]


# -- files ---------------------------------------------------------------------------------------

def write_csv_atomic(path, header, rows):
    """Write ``rows`` under ``header`` to ``path`` whole or not at all (``jointwise.outputs``:
    a failure leaves any earlier file as it was; a link or device is written in place)."""
    from jointwise.outputs import write_text  # late: the core's wheel is on the path once enabled
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(header)
    for row in rows:
        w.writerow(row)
    write_text(os.path.abspath(path), buf.getvalue(), option="filepath")


# -- bounds ---------------------------------------------------------------------------------------

def sphere_clusters(verts, tris, leaf=None, max_leaves=16):
    """Split a triangle mesh into up to ``max_leaves`` groups of nearby triangles (median
    cuts of the triangles' centroids along the widest axis) and bound each group by a
    sphere. Every triangle lies in its group's sphere, so ``min |c_i - c_j| - r_i - r_j``
    over two meshes' groups is a lower bound of the distance between the meshes
    (negative: they may touch).

    Returns ``(centres (K, 3), radii (K,), group of each triangle (T,), a group holding
    each vertex (V,))`` (vertices used by no triangle get group 0)."""
    verts = np.asarray(verts, dtype=float)
    tris = np.asarray(tris, dtype=np.int64).reshape(-1, 3)
    cent = verts[tris].mean(axis=1)
    leaf = leaf or max(1, -(-len(tris) // max_leaves))
    groups = [np.arange(len(tris))]
    while True:
        k = max(range(len(groups)), key=lambda i: len(groups[i]))
        if len(groups[k]) <= leaf or len(groups) >= max_leaves:
            break
        g = groups.pop(k)
        c = cent[g]
        axis = int(np.argmax(c.max(axis=0) - c.min(axis=0)))
        order = g[np.argsort(c[:, axis], kind="stable")]
        half = len(order) // 2
        groups += [order[:half], order[half:]]
    centres, radii = [], []
    tri_group = np.zeros(len(tris), dtype=np.int64)
    vert_group = np.zeros(len(verts), dtype=np.int64)
    for k, g in enumerate(groups):
        used = np.unique(tris[g])
        c, r = bounding_sphere(verts[used])
        centres.append(c)
        radii.append(r)
        tri_group[g] = k
        vert_group[used] = k
    return np.array(centres), np.array(radii), tri_group, vert_group


def group_gaps(ca, ra, cb, rb):
    """Gaps between the groups' spheres of two meshes, ``(..., Ka, Kb)``: ``ca``
    ``(..., Ka, 3)`` (may carry a leading stack of placements), ``cb`` ``(Kb, 3)``.
    Their minimum is a lower bound of the distance between the meshes."""
    diff = np.asarray(ca)[..., :, None, :] - cb
    return np.sqrt(np.einsum("...i,...i->...", diff, diff)) - ra[:, None] - rb[None, :]


def point_gaps(points, centres, radii):
    """Lower bound of each point's distance to a mesh from its groups' spheres, ``(N,)``."""
    p = np.asarray(points, dtype=float)
    sq = (p * p).sum(axis=1)[:, None] - 2.0 * p @ centres.T + (centres * centres).sum(axis=1)[None]
    return (np.sqrt(np.maximum(sq, 0.0)) - radii[None]).min(axis=1)
