"""Clearance along the motion: which link objects touch, and how close the others come.

``jointwise.clearance(frame_start, frame_end, drive, value_from, value_to, gap,
include_jointed, filepath)`` solves the frames exactly as the bake does (the animated
joint values, or a ramp of one coordinate; the scene's frame range when none is given)
without writing keys, then checks every pair of link objects that carry a mesh.

How a pair is checked (all lengths in scene units):

1. Each object's mesh is taken as evaluated (modifiers applied) and placed where it is
   now; one BVH tree of the host (``mathutils.bvhtree``) is built from it once. At frame
   ``f`` the object sits at ``Rel(f) = W(f) @ W_now^-1`` (``W``: its world matrix from
   the solved link displacement, a rigid motion), so the pair's relative placement is
   ``T(f) = Rel_B(f)^-1 @ Rel_A(f)``: A's points are carried into B's frame and B's tree
   is reused at every frame.
2. Bounds first. Each mesh is split into groups of nearby triangles (16, and 64 finer
   ones), each in a sphere; the smallest gap between two meshes' spheres is a lower
   bound of their distance, at every frame at once. Frames where no spheres meet
   cannot touch.
3. Overlap at each frame where the finer spheres meet: a tree of A's triangles in
   those groups at ``T(f)`` against B's own tree (``BVHTree.overlap``: triangle pairs
   that intersect), and, for closed surfaces, one point of each inside the other
   (parity of a ray's crossings, in double precision, another ray where one grazes an
   edge), so a part wholly inside another counts. This is exact for the meshes as
   modelled (up to the trees' single precision).
4. Smallest distance (branch and bound over the frames): frames are visited lowest
   bound first, and the search stops when every frame left has a bound at or above the
   best distance found (and above 0: it cannot touch). A visited frame's own distance
   (or a lower bound of it) raises the bounds of the others by how far the parts can
   move in between (the placements of every frame are known from the solve):
   displacements of the bodies and their groups, and, per pair of groups, how much
   their separation can shrink (a move sideways to it barely counts). At a visited
   frame the distance is found exactly up to the best so far plus half the two meshes'
   longest edges: each vertex of one mesh to the nearest point of the other's surface
   (``BVHTree.find_nearest``, both ways, for vertices whose groups can be that near,
   recomputed in double precision on the triangle it returns, Ericson 2005 §5.1.5).
   That vertex-to-face distance alone may miss an edge-to-edge minimum by less than the
   longest edge's length, so it is refined: edges of each mesh that can be that near
   (from their ends' distances) are paired and their closest points computed (Ericson,
   Real-Time Collision Detection, 2005, §5.1.9). With both, the distance is the exact
   distance between the triangle meshes at the solved frames (the minimum over frames
   is taken at the frames themselves, not between them), and the pruned search gives
   the same as measuring every frame (tested against a brute-force pass).

Results (``scene.jointwise.clearance``) are written only when the whole check is done:
a failure or a cancel leaves the earlier results, markers and CSV file as they were.
"""
from __future__ import annotations

import itertools
import math
import time

import bpy
import numpy as np
from bpy.props import (BoolProperty, CollectionProperty, FloatProperty, FloatVectorProperty,
                       IntProperty, StringProperty)
from mathutils.bvhtree import BVHTree

from . import bake as bk
from . import properties
from . import proximity as px
from . import scene as sc
from .reporting import Base, errors

MARKER_PREFIX = "contact "
CSV_HEADER = ("object_a", "object_b", "min_gap", "min_frame", "contact_frames",
              "point_a_x", "point_a_y", "point_a_z", "point_b_x", "point_b_y", "point_b_z",
              "flagged")


class Cancelled(Exception):
    """The user stopped the check; nothing was written."""


# -- solving: the one call into the bake's solving ------------------------------------------------

def solve_motion(scene, frames, ramp=None):
    """Link displacements ``{link: (N, 4, 4)}`` at ``frames``, solved exactly as the bake
    solves them, without writing keys. The only call into the bake's solving."""
    solved = bk.solve_at(scene, frames, ramp)
    fail = solved.first_failure()
    if fail is not None:
        raise sc.SceneError(f"frame {fail[0]}: {fail[1]}; no clearance results were written")
    return solved.links


# -- the parts --------------------------------------------------------------------------------

class Body:
    """One link object's mesh, placed where it is now, with its BVH tree and its groups
    of nearby triangles (each bounded by a sphere)."""

    def __init__(self, link, obj, verts, tris, rel):
        self.link = link
        self.obj = obj
        self.name = obj.name
        self.verts = verts                      # (V, 3) float64, world now
        self.tris = tris                        # (T, 3)
        self.rel = rel                          # (N, 4, 4): world at frame = rel @ world now
        self.rel_inv = np.linalg.inv(rel)
        self.edges, _ = px.triangle_edges(tris)
        self.closed = px.is_closed(tris)
        self.centre, self.radius = px.bounding_sphere(verts)
        self.box = verts.min(axis=0), verts.max(axis=0)
        lengths = np.linalg.norm(verts[self.edges[:, 0]] - verts[self.edges[:, 1]], axis=1)
        self.half_edge = 0.5 * lengths
        self.longest_edge = float(lengths.max()) if len(lengths) else 0.0
        # the longest edge at each vertex: how far past a limit its distance must be known
        self.vert_edge = np.zeros(len(verts))
        np.maximum.at(self.vert_edge, self.edges[:, 0], lengths)
        np.maximum.at(self.vert_edge, self.edges[:, 1], lengths)
        self.group_centres, self.group_radii, _, _ = px.sphere_clusters(verts, tris)
        # finer groups, for a second, tighter bound at the frames that pass the first
        (self.fine_centres, self.fine_radii, fine_tri,
         self.fine_vert_group) = px.sphere_clusters(verts, tris, max_leaves=64)
        self.fine_group_tris = [np.flatnonzero(fine_tri == k) for k in range(len(self.fine_radii))]
        # placements in the world per frame, for bounds on how far the body moves
        self.world_rot = rel[:, :3, :3]
        self.world_flat = self.world_rot.reshape(-1, 9)
        self.world_centre = np.einsum("nij,j->ni", self.world_rot, self.centre) + rel[:, :3, 3]
        self.world_groups = np.einsum("nij,kj->nki", self.world_rot, self.group_centres) + rel[:, None, :3, 3]
        self.tree = BVHTree.FromPolygons(verts.tolist(), tris.tolist(), all_triangles=True)


def mesh_arrays(obj, depsgraph):
    """(vertices (V, 3) world now, triangles (T, 3)) of the evaluated mesh, else None."""
    if obj.type != 'MESH':
        return None
    ev = obj.evaluated_get(depsgraph)
    me = ev.to_mesh()
    if me is None:
        return None
    try:
        me.calc_loop_triangles()
        nv, nt = len(me.vertices), len(me.loop_triangles)
        if nv == 0 or nt == 0:
            return None
        co = np.empty(3 * nv, dtype=np.float32)
        me.vertices.foreach_get("co", co)
        tri = np.empty(3 * nt, dtype=np.int32)
        me.loop_triangles.foreach_get("vertices", tri)
        world = sc.matrix_host_to_core(ev.matrix_world)
    finally:
        ev.to_mesh_clear()
    return px.transform_points(world, co.reshape(-1, 3).astype(float)), tri.reshape(-1, 3)


def jointed_pairs(scene):
    """Link name pairs joined directly by a joint (frozensets)."""
    return {frozenset((it.parent, it.child)) for it in scene.jointwise.joints
            if it.parent and it.child and it.parent != it.child}


# -- one pair ---------------------------------------------------------------------------------

def _norms(x):
    return np.sqrt(np.einsum("...i,...i->...", x, x))


def _vertex_distances(points, body, reach, candidates, groups):
    """Distance of each of ``points`` (in ``body``'s frame now) to ``body``'s surface
    where it is below its ``reach`` (one per point), else inf; with the nearest surface
    points. Only the ``candidates`` (indices) can be that near, and only to ``body``'s
    finer ``groups`` (indices; the others are out of reach of every candidate).
    Recomputed in double precision on the triangle the tree returns (Ericson 2005,
    §5.1.5)."""
    n = len(points)
    dist = np.full(n, math.inf)
    near = np.zeros((n, 3))
    if not len(candidates) or not len(groups):
        return dist, near
    keep = candidates[px.point_gaps(points[candidates], body.fine_centres[groups],
                                    body.fine_radii[groups]) < reach[candidates]]
    if not len(keep):
        return dist, near
    find = body.tree.find_nearest
    lims = (reach[keep] * (1 + 1e-6) + 1e-9).tolist()
    # the triangle index, or None (nan here) when nothing is that near
    ids = np.array([find(p, lim)[2] for p, lim in zip(points[keep].tolist(), lims)], dtype=float)
    hit = ~np.isnan(ids)
    if hit.any():
        ks = keep[hit]
        t = body.tris[ids[hit].astype(np.int64)]
        v = body.verts
        p = points[ks]
        q = px.triangle_closest_points(p, v[t[:, 0]], v[t[:, 1]], v[t[:, 2]])
        d = np.sqrt(np.einsum("ij,ij->i", p - q, p - q))
        ok = d < reach[ks]
        dist[ks[ok]] = d[ok]
        near[ks[ok]] = q[ok]
    return dist, near


def _edge_edge(a_pts, a_edges, b_pts, b_edges, limit, chunk=250_000):
    """Smallest distance below ``limit`` between an edge of ``a_edges`` and one of
    ``b_edges`` (points ``a_pts``, ``b_pts`` in one frame): (d, point on A, point on B)
    or None. Pairs whose midpoints are farther apart than the limit plus both
    half-lengths are left out first; closest points between segments: Ericson,
    Real-Time Collision Detection (2005), §5.1.9."""
    if not len(a_edges) or not len(b_edges):
        return None
    pa, qa = a_pts[a_edges[:, 0]], a_pts[a_edges[:, 1]]
    pb, qb = b_pts[b_edges[:, 0]], b_pts[b_edges[:, 1]]
    ma, ha = 0.5 * (pa + qa), 0.5 * _norms(qa - pa)
    mb, hb = 0.5 * (pb + qb), 0.5 * _norms(qb - pb)
    best = None
    rows = max(1, chunk // len(b_edges))
    for s in range(0, len(a_edges), rows):
        sl = slice(s, s + rows)
        gap = _norms(ma[sl, None] - mb[None]) - ha[sl, None] - hb[None]
        i, j = np.nonzero(gap < limit)
        if not len(i):
            continue
        i = i + s
        d, c1, c2 = px.segment_closest_points(pa[i], qa[i], pb[j], qb[j])
        k = int(np.argmin(d))
        if d[k] < limit and (best is None or d[k] < best[0]):
            best = (float(d[k]), c1[k], c2[k])
    return best


def _edge_bounds(body, low, near, limit):
    """A lower bound of the distance between ``body``'s edges and the other mesh when no
    pair of near edges came closer than ``limit``: ``limit`` for the near edges, and
    ``(d1 + d2 - L) / 2`` for the others (``low``: its vertices' distances or lower
    bounds; a point on the edge is within ``s L`` of one end and ``(1 - s) L`` of the
    other)."""
    if not len(body.edges):
        return math.inf
    d = 0.5 * (low[body.edges[:, 0]] + low[body.edges[:, 1]]) - body.half_edge
    return float(np.where(near, limit, d).min())


def _near_edges(body, dist, limit):
    """Edges of ``body`` (a mask) that may come closer than ``limit`` to the other mesh, from its
    vertices' distances ``dist`` (each known up to ``limit`` + its longest edge). Distance to
    a mesh changes no faster than one moves along the edge, so an edge of length ``L``
    whose nearest point is at ``d`` has ends at ``d1``, ``d2`` with ``d1 + d2 <= 2 d + L``
    and each at most ``d + L``."""
    d1, d2 = dist[body.edges[:, 0]], dist[body.edges[:, 1]]
    length = 2 * body.half_edge
    return (d1 < limit + length) & (d2 < limit + length) & (d1 + d2 - length < 2 * limit)


class PairResult:
    def __init__(self, a, b):
        self.a, self.b = a, b
        self.contact = []           # frames where the pair overlaps
        self.min_gap = math.inf
        self.min_frame = None
        self.point_a = self.point_b = (0.0, 0.0, 0.0)
        self.visited = 0            # frames looked at
        self.pruned = 0             # of those, frames the finer groups' bound settled


class Timer:
    """Seconds spent solving, building trees and querying, by ``clock`` (elapsed time;
    the benchmark passes ``time.process_time`` for CPU time on a shared machine)."""

    def __init__(self, clock=time.perf_counter):
        self.clock = clock
        self.solve = self.trees = self.queries = 0.0


def _upper(b, point):
    """An upper bound of the distance from ``point`` (in b's frame) to B's surface: the
    tree's own distance, with room for its single precision."""
    dist = b.tree.find_nearest(point.tolist())[3]
    return dist + 1e-5 * (1.0 + float(np.abs(point).max()) + dist)


def _distance(a, b, va, vb, gaps, limit, hint=None):
    """Distance between ``a`` (points ``va``, in b's frame) and ``b`` (``vb``: b's points
    in a's frame) when below ``limit`` (may be inf), found exactly.

    Returns ``(found, low, hint)``: ``found`` is (d, point on A, point on B, frame) with
    the frame 'b' or 'a' the points are in, or None when the distance is not below the
    limit used; ``low`` is a lower bound of the distance (the distance itself when
    found); ``hint`` is the vertex of A nearest to B, to start from at the next frame.
    ``gaps``: the finer groups' gaps (Ka, Kb) at this frame. The limit used is at most the
    distance from A's vertex ``hint`` (else one in the nearest group) to B, so a
    distance is always found when that is below ``limit``.

    Vertex-to-face both ways, for vertices whose group can be that near (distances
    taken up to the limit + the vertex's longest edge), then edge to edge between the
    edges of each mesh that can still be closer (:func:`_near_edges`)."""
    ga = gaps.min(axis=1)[a.fine_vert_group]               # each vertex of A to B, at least
    gb = gaps.min(axis=0)[b.fine_vert_group]
    if hint is None:
        hint = int(np.argmin(ga))
    limit = min(limit, _upper(b, va[hint]))
    reach_a, reach_b = limit + a.vert_edge, limit + b.vert_edge
    # B's groups within reach of A's and the other way round
    groups_b = np.flatnonzero(gaps.min(axis=0) < reach_a.max(initial=0.0))
    groups_a = np.flatnonzero(gaps.min(axis=1) < reach_b.max(initial=0.0))
    da, qa = _vertex_distances(va, b, reach_a, np.flatnonzero(ga < reach_a), groups_b)
    db, qb = _vertex_distances(vb, a, reach_b, np.flatnonzero(gb < reach_b), groups_a)
    found = None
    ka, kb = int(np.argmin(da)), int(np.argmin(db))
    if da[ka] < limit and da[ka] <= db[kb]:
        found = (float(da[ka]), va[ka], qa[ka], "b")
    elif db[kb] < limit:
        found = (float(db[kb]), qb[kb], vb[kb], "a")
    lim = found[0] if found else limit
    near_a, near_b = _near_edges(a, da, lim), _near_edges(b, db, lim)
    if near_a.any() and near_b.any():
        r = _edge_edge(va, a.edges[near_a], b.verts, b.edges[near_b], lim)
        if r is not None:
            found = (r[0], r[1], r[2], "b")
    if math.isfinite(da[ka]):
        hint = ka
    if found is not None:
        return found, found[0], hint
    # nothing below the limit: the distance is at least the limit, and more where every
    # vertex and the edges of one mesh are farther (their bounds, :func:`_edge_bounds`)
    low_a, low_b = np.where(np.isfinite(da), da, reach_a), np.where(np.isfinite(db), db, reach_b)
    edges = max(_edge_bounds(a, low_a, near_a, limit), _edge_bounds(b, low_b, near_b, limit))
    return None, max(limit, min(float(low_a.min()), float(low_b.min()), edges)), hint


def _within(points, box):
    return bool(np.all(points >= box[0]) and np.all(points <= box[1]))


def _overlap(a, b, va, b_in_a, gaps, clock):
    """Do ``a`` (points ``va`` in b's frame) and ``b`` overlap? Only triangles in groups
    whose spheres meet can cross, so a tree of A's triangles in the finer groups that
    meet B's (``gaps``, (Ka, Kb)) alone is built and compared with B's own tree; for
    closed surfaces, one wholly inside the other counts too (``b_in_a``: the placement
    of b in a's frame). Returns (touching, (point on A, point on B) in b's frame or None,
    seconds spent building the tree)."""
    t0 = clock()
    ka = np.flatnonzero((gaps <= 0.0).any(axis=1))
    tris = a.tris[np.concatenate([a.fine_group_tris[k] for k in ka])]
    used = np.zeros(len(va), dtype=bool)
    used[tris] = True
    local = (np.cumsum(used) - 1)[tris]
    tree_a = BVHTree.FromPolygons(va[used].tolist(), local.tolist(), all_triangles=True)
    built = clock() - t0
    pairs = tree_a.overlap(b.tree)
    if pairs:
        ia, ib = pairs[0]
        return True, (va[tris[ia]].mean(axis=0), b.verts[b.tris[ib]].mean(axis=0)), built
    # wholly inside: every vertex of A within B's box, then one inside B (or the same
    # the other way round)
    if a.closed and b.closed:
        if _within(va, b.box) and px.inside_closed(va[0], b.verts, b.tris):
            return True, (va[0], va[0]), built
        vb = px.transform_points(b_in_a, b.verts)
        if _within(vb, a.box) and px.inside_closed(vb[0], a.verts, a.tris):
            return True, (va[0], va[0]), built
    return False, None, built


# ||R_f - R_g||_2 = ||R_f - R_g||_F / sqrt(2) for rotations (R_f R_g^T - I has singular
# values 2 sin(angle / 2) twice and 0); taken a hair above, as placements come from
# single-precision matrices
_SPECTRAL = 0.7072
# how far past the best distance so far a visited frame's own distance is found: the
# farther, the more frames around it its distance rules out, at more queries per frame
MARGIN = 0.5


class _Motion:
    """Lower bounds of the distance at every frame from a lower bound ``d`` at frame
    ``i``, by how far points of A may move relative to B in between.

    1. Displacement: of A relative to B (centre and rotation of A in B's frame), of B
       relative to A, or of each in the world, the two added; the smallest counts. The
       same for each group of A with its own centre and radius.
    2. Per pair of groups ``k`` of A, ``l`` of B (centres ``c``, radii ``r``), in B's
       frame: a point pair is ``s + e`` with ``s = c_k - c_l`` and ``|e| <= r_k + r_l``;
       from frame ``i`` to ``f`` the pair's distance falls by at most
       ``|s_f - s_i|``'s part along ``s`` (``||s_f| - |s_i||``), plus the turn of ``s``
       acting on ``e`` (the chord ``|s_f/|s_f| - s_i/|s_i||`` times ``r_k + r_l``), plus
       A's turn acting on its offset (``|R_f - R_i|_2 r_k``). Parts that move sideways
       to their separation, as two far arms turning together, barely change it.
    The frame's bound is the smallest over the groups (or group pairs), and never below
    the groups' sphere gaps there."""

    def __init__(self, a, b, t, tinv, groups, gaps):
        self.a, self.b = a, b
        self.rot = t[:, :3, :3].reshape(-1, 9)
        self.ca = np.einsum("nij,j->ni", t[:, :3, :3], a.centre) + t[:, :3, 3]
        self.cb = np.einsum("nij,j->ni", tinv[:, :3, :3], b.centre) + tinv[:, :3, 3]
        self.groups = groups
        self.gaps = gaps
        sep = groups[:, :, None, :] - b.group_centres[None, None]          # (N, Ka, Kb, 3)
        self.sep_len = _norms(sep)
        with np.errstate(invalid="ignore", divide="ignore"):
            self.sep_dir = sep / self.sep_len[..., None]                   # nan where 0
        self.reach = a.group_radii[:, None] + b.group_radii[None, :]

    def turn(self, i):
        return _SPECTRAL * _norms(self.rot - self.rot[i])

    def __call__(self, i):
        a, b = self.a, self.b
        turn = self.turn(i)
        turn_a = _SPECTRAL * _norms(a.world_flat - a.world_flat[i])
        move_b = (_norms(b.world_centre - b.world_centre[i])
                  + _SPECTRAL * _norms(b.world_flat - b.world_flat[i]) * b.radius)
        move = np.minimum(np.minimum(_norms(self.ca - self.ca[i]) + turn * a.radius,
                                     _norms(self.cb - self.cb[i]) + turn * b.radius),
                          _norms(a.world_centre - a.world_centre[i]) + turn_a * a.radius + move_b)
        move_groups = np.minimum(
            _norms(self.groups - self.groups[i]) + turn[:, None] * a.group_radii,
            _norms(a.world_groups - a.world_groups[i]) + turn_a[:, None] * a.group_radii
            + move_b[:, None])
        return move, move_groups

    def pairs(self, i, d, frames):
        """Bound 2 at ``frames`` (indices) from ``d`` at frame ``i``."""
        chord = _norms(self.sep_dir[frames] - self.sep_dir[i])
        fall = (chord * self.reach + np.abs(self.sep_len[frames] - self.sep_len[i])
                + self.turn(i)[frames, None, None] * self.a.group_radii[None, :, None])
        return np.fmax(d - fall, self.gaps[frames]).min(axis=(1, 2))   # nan (no direction): gaps


def check_pair(a, b, frames, timer):
    """Overlap at every frame and smallest distance over the frames for bodies ``a``, ``b``.

    Frames are visited lowest lower bound first. The bound of a frame starts as the
    smallest gap between the two meshes' groups of triangles (their bounding spheres)
    and is raised by every frame ``g`` where a lower bound ``d_g`` of the distance is
    known, by how far the parts can move in between (:class:`_Motion`: displacements
    of the bodies and their groups, and, per pair of groups, how much their separation
    can shrink). At a visited frame the distance is found exactly up to the best so far
    plus a margin (:data:`MARGIN` times the two meshes' longest edges), so its bound
    rules out the frames around it; a frame that the finer groups' spheres already keep
    above the best needs no mesh query, and its sphere bound does the same. Frames
    whose bound is above zero cannot touch; frames whose bound is above the best
    distance cannot hold the minimum; once the pair touches, only frames that may touch
    are visited. So every frame is decided without querying most of them."""
    res = PairResult(a, b)
    clock = timer.clock
    t0 = clock()
    t = b.rel_inv @ a.rel                                   # a (world now) -> b's frame now
    tinv = a.rel_inv @ b.rel                                # b (world now) -> a's frame now
    groups = np.einsum("nij,kj->nki", t[:, :3, :3], a.group_centres) + t[:, None, :3, 3]
    gaps = px.group_gaps(groups, a.group_radii, b.group_centres, b.group_radii)   # (N, Ka, Kb)
    low_groups = gaps.min(axis=2)                          # (N, Ka): each group of A to B
    low = low_groups.min(axis=1)
    motion = _Motion(a, b, t, tinv, groups, gaps)
    margin = MARGIN * (a.longest_edge + b.longest_edge)
    n = len(frames)
    undecided = np.ones(n, dtype=bool)
    best = math.inf
    hint = None
    timer.queries += clock() - t0  # the bounds at every frame count as queries

    def raise_bounds(i, d):
        nonlocal low, low_groups
        move, move_groups = motion(i)
        low_groups = np.maximum(low_groups, d - move_groups)
        low = np.maximum(low, np.maximum(low_groups.min(axis=1), d - move))
        open_ = np.flatnonzero(undecided & ((low <= 0.0) | (low < best)))
        if len(open_):
            low[open_] = np.maximum(low[open_], motion.pairs(i, d, open_))

    while True:
        need = undecided & ((low <= 0.0) | (low < best))
        if not need.any():
            break
        i = int(np.argmin(np.where(need, low, np.inf)))
        undecided[i] = False
        res.visited += 1
        t0 = clock()
        # the finer groups' bound at this frame: frames it clears need no mesh queries
        fine_gaps = px.group_gaps(px.transform_points(t[i], a.fine_centres), a.fine_radii,
                                  b.fine_centres, b.fine_radii)
        fine = fine_gaps.min()
        if fine > 0.0 and fine >= best:
            res.pruned += 1
            raise_bounds(i, fine)
            timer.queries += clock() - t0
            continue
        va = px.transform_points(t[i], a.verts)              # a in b's frame
        built = 0.0
        if low[i] <= 0.0 and fine <= 0.0:
            touch, pts, built = _overlap(a, b, va, tinv[i], fine_gaps, timer.clock)
            timer.trees += built
            if touch:
                res.contact.append(int(frames[i]))
                if best > 0.0 or int(frames[i]) < res.min_frame:
                    best = 0.0
                    res.min_gap, res.min_frame = 0.0, int(frames[i])
                    res.point_a = tuple(px.transform_points(b.rel[i], pts[0][None])[0])
                    res.point_b = tuple(px.transform_points(b.rel[i], pts[1][None])[0])
                timer.queries += clock() - t0 - built
                continue
            if best == 0.0:  # touching elsewhere: the smallest gap is known
                timer.queries += clock() - t0 - built
                continue
        vb = px.transform_points(tinv[i], b.verts)           # b in a's frame
        found, d, hint = _distance(a, b, va, vb, fine_gaps, best + margin, hint)
        if found is not None and found[0] < best:
            best = found[0]
            rel = b.rel[i] if found[3] == "b" else a.rel[i]
            res.min_gap, res.min_frame = found[0], int(frames[i])
            res.point_a = tuple(px.transform_points(rel, found[1][None])[0])
            res.point_b = tuple(px.transform_points(rel, found[2][None])[0])
        raise_bounds(i, d)
        timer.queries += clock() - t0 - built
    res.contact.sort()
    if res.min_frame is None:  # cannot happen with finite meshes; keep the result defined
        res.min_frame = int(frames[int(np.argmin(low))])
    return res


# -- the whole check --------------------------------------------------------------------------

class Check:
    """The clearance check as a sequence of steps (one per pair), so a modal operator can
    run it in slices and stop it; nothing is written to the scene until :meth:`apply`."""

    def __init__(self, scene, frames, ramp=None, gap=0.0, include_jointed=False):
        self.scene = scene
        self.frames = np.asarray(frames)
        self.ramp = ramp
        self.gap = float(gap)
        self.include_jointed = include_jointed
        self.timer = Timer()
        self.notes = []
        self.results = []
        self.bodies = []
        self.pairs = []
        self.skipped_jointed = 0

    def prepare(self):
        scene = self.scene
        jw = scene.jointwise
        if not jw.links:
            raise sc.SceneError("the scene has no mechanism: import a mechanism file first")
        t0 = self.timer.clock()
        links = solve_motion(scene, self.frames, self.ramp)
        worlds = sc.world_matrices(scene, links)
        self.timer.solve += self.timer.clock() - t0
        t0 = self.timer.clock()
        depsgraph = bpy.context.evaluated_depsgraph_get()
        n = len(self.frames)
        for link in jw.links:
            obj = sc.link_object(scene, link, required=False)
            if obj is None:
                continue  # the world as ground, or an object that is gone (noted below)
            arrays = mesh_arrays(obj, depsgraph)
            if arrays is None:
                self.notes.append(f"link {link.name!r} ({obj.name}) has no mesh: skipped")
                continue
            if link.name in worlds:
                w = worlds[link.name][1]
                now = sc.matrix_host_to_core(obj.matrix_world)
                rel = w @ np.linalg.inv(now)
            else:  # the ground stays where it is
                rel = np.tile(np.eye(4), (n, 1, 1))
            if not np.all(np.isfinite(rel)):
                raise sc.SceneError(f"link {link.name!r}: non-finite placement; no clearance results were written")
            self.bodies.append(Body(link.name, obj, arrays[0], arrays[1], rel))
        self.timer.trees += self.timer.clock() - t0
        joined = jointed_pairs(scene)
        for a, b in itertools.combinations(self.bodies, 2):
            if not self.include_jointed and frozenset((a.link, b.link)) in joined:
                self.skipped_jointed += 1
                continue
            self.pairs.append((a, b))

    def steps(self):
        """Generator: prepares, then checks one pair per step, yielding (done, total)."""
        self.prepare()
        total = len(self.pairs)
        yield 0, total
        for k, (a, b) in enumerate(self.pairs):
            # carry the one with fewer vertices (its tree is rebuilt at touching frames)
            if len(a.verts) > len(b.verts):
                r = check_pair(b, a, self.frames, self.timer)
                r.a, r.b = a, b
                r.point_a, r.point_b = r.point_b, r.point_a
            else:
                r = check_pair(a, b, self.frames, self.timer)
            self.results.append(r)
            yield k + 1, total

    def run(self, progress=None, stop=None):
        for done, total in self.steps():
            if progress is not None:
                progress(done, total)
            if stop is not None and stop():
                raise Cancelled()
        return self

    def rows(self):
        """Results worst first: touching pairs (earliest first), then by smallest gap."""
        out = []
        for r in self.results:
            flagged = bool(r.contact) or r.min_gap < self.gap
            gap = 0.0 if r.contact else r.min_gap
            out.append(dict(object_a=r.a.name, object_b=r.b.name, link_a=r.a.link, link_b=r.b.link,
                            min_gap=gap, min_frame=int(r.min_frame), contact=bool(r.contact),
                            contact_frames=px.contact_text(r.contact),
                            first_frames=[s for s, _ in px.contact_intervals(r.contact)],
                            point_a=tuple(float(x) for x in r.point_a),
                            point_b=tuple(float(x) for x in r.point_b), flagged=flagged))
        out.sort(key=lambda d: (not d["contact"], d["min_gap"], d["min_frame"], d["object_a"], d["object_b"]))
        for d in out:
            if not (math.isfinite(d["min_gap"]) and all(map(math.isfinite, d["point_a"] + d["point_b"]))):
                raise sc.SceneError(f"pair {d['object_a']} / {d['object_b']}: non-finite distance; "
                                    f"no clearance results were written")
        return out

    def summary(self, rows):
        touching = sum(d["contact"] for d in rows)
        close = sum(d["flagged"] and not d["contact"] for d in rows)
        parts = [f"{len(rows)} pairs checked over frames {int(self.frames[0])}-{int(self.frames[-1])}",
                 f"{touching} touching"]
        if self.gap > 0:
            parts.append(f"{close} closer than the gap")
        if self.skipped_jointed:
            parts.append(f"{self.skipped_jointed} jointed pairs skipped")
        return ", ".join(parts)


# -- results into the scene ---------------------------------------------------------------------

def write_csv(path, rows):
    """The results as CSV (scene units), written atomically."""
    px.write_csv_atomic(path, CSV_HEADER, (
        [d["object_a"], d["object_b"], repr(d["min_gap"]), d["min_frame"], d["contact_frames"],
         *(repr(x) for x in d["point_a"]), *(repr(x) for x in d["point_b"]), int(d["flagged"])]
        for d in rows))


def apply(scene, rows, note=""):
    """Replace the scene's clearance results and contact markers by ``rows``."""
    jw = scene.jointwise
    jw.clearance.clear()
    for d in rows:
        it = jw.clearance.add()
        it.name = f"{d['object_a']} / {d['object_b']}"
        it.object_a, it.object_b = d["object_a"], d["object_b"]
        it.link_a, it.link_b = d["link_a"], d["link_b"]
        it.min_gap = d["min_gap"]
        it.min_frame = d["min_frame"]
        it.contact_frames = d["contact_frames"]
        it.point_a, it.point_b = d["point_a"], d["point_b"]
        it.contact, it.flagged = d["contact"], d["flagged"]
    remove_markers(scene)
    for d in rows:
        for f in d["first_frames"]:
            scene.timeline_markers.new(f"{MARKER_PREFIX}{d['object_a']} / {d['object_b']}", frame=f)
    jw.clearance_note = note
    jw.clearance_index = -1


def remove_markers(scene):
    for m in [m for m in scene.timeline_markers if m.name.startswith(MARKER_PREFIX)]:
        scene.timeline_markers.remove(m)


def show_pair(scene, item, context=None):
    """Jump to the item's frame and select its two objects (A active)."""
    scene.frame_set(int(item.min_frame))
    objs = [scene.objects.get(item.object_a), scene.objects.get(item.object_b)]
    if not all(objs):
        return False
    view_layer = context.view_layer if context is not None else bpy.context.view_layer
    for o in view_layer.objects:
        if o.select_get(view_layer=view_layer):
            o.select_set(False, view_layer=view_layer)
    for o in objs:
        if o.name in view_layer.objects:
            o.select_set(True, view_layer=view_layer)
    if objs[0].name in view_layer.objects:
        view_layer.objects.active = objs[0]
    return True


def _index_update(self, context):
    jw = self
    if 0 <= jw.clearance_index < len(jw.clearance):
        show_pair(context.scene, jw.clearance[jw.clearance_index], context)


def length_text(scene, value):
    """A scene length in the scene's display unit (as the status messages show lengths)."""
    label, k = sc.display_length_of(scene)
    return f"{value * k:.5g} {label}"


# -- properties ------------------------------------------------------------------------------

class JointwiseClearancePair(bpy.types.PropertyGroup):
    """One checked pair of link objects (lengths in scene units)."""
    object_a: StringProperty(name="Object A")
    object_b: StringProperty(name="Object B")
    link_a: StringProperty(name="Link A")
    link_b: StringProperty(name="Link B")
    min_gap: FloatProperty(name="Smallest gap", subtype='DISTANCE', unit='LENGTH', precision=6,
                           description="Smallest distance over the frames (0 while overlapping)")
    min_frame: IntProperty(name="Frame", description="Frame of the smallest gap (first contact if touching)")
    contact_frames: StringProperty(name="Contact frames", description="Frames where the two overlap, e.g. 12-18, 40")
    point_a: FloatVectorProperty(name="Point on A", size=3, subtype='XYZ', unit='LENGTH',
                                 description="World point on A at the frame of the smallest gap")
    point_b: FloatVectorProperty(name="Point on B", size=3, subtype='XYZ', unit='LENGTH',
                                 description="World point on B at the frame of the smallest gap")
    contact: BoolProperty(name="Touching")
    flagged: BoolProperty(name="Flagged", description="Touching, or closer than the gap asked for")


SETTINGS = {
    "clearance": lambda: CollectionProperty(type=JointwiseClearancePair),
    "clearance_index": lambda: IntProperty(name="Active pair", default=-1, update=_index_update),
    "clearance_note": lambda: StringProperty(name="Clearance note", default=""),
}


# -- operators and panel -------------------------------------------------------------------------

class JOINTWISE_OT_clearance(Base, bpy.types.Operator):
    """Solve the motion over a frame range (no keys written) and check every pair of link
    meshes for overlap and smallest distance"""
    bl_idname = "jointwise.clearance"
    bl_label = "Check Clearance"
    frame_start: IntProperty(name="Start", default=1)
    frame_end: IntProperty(name="End", default=250)
    drive: StringProperty(name="Ramp coordinate", default="",
                          description="Optional: run this coordinate linearly from a value to a value")
    value_from: FloatProperty(name="From", default=0.0)
    value_to: FloatProperty(name="To", default=0.0)
    gap: FloatProperty(name="Gap", default=0.0, min=0.0, subtype='DISTANCE', unit='LENGTH',
                       description="Also flag pairs that come closer than this (scene units)")
    include_jointed: BoolProperty(name="Include jointed pairs", default=False,
                                  description="Also check pairs joined directly by a joint (they touch by design)")
    filepath: StringProperty(name="CSV file", default="", subtype='FILE_PATH',
                             description="Optional: also write the results to this CSV file")

    _timer = None
    _job = None

    def _check(self, context):
        scene = context.scene
        p = self.properties
        start = self.frame_start if p.is_property_set("frame_start") else scene.frame_start
        end = self.frame_end if p.is_property_set("frame_end") else scene.frame_end
        self.frame_start, self.frame_end = start, end
        if end < start:
            raise sc.SceneError(f"frame range {start}..{end} is empty")
        if not (math.isfinite(self.gap) and self.gap >= 0):
            raise sc.SceneError("gap must be a finite length of 0 or more")
        ramp = None
        if self.drive:
            if self.drive not in scene.jointwise.joints:
                raise sc.SceneError(f"ramp coordinate {self.drive!r} is not a joint coordinate")
            if not (math.isfinite(self.value_from) and math.isfinite(self.value_to)):
                raise sc.SceneError("ramp values must be finite")
            ramp = (self.drive, self.value_from, self.value_to)
        return Check(scene, np.arange(start, end + 1), ramp, self.gap, self.include_jointed)

    def _finish(self, context, check):
        scene = context.scene
        rows = check.rows()
        if self.filepath:
            path = bpy.path.abspath(self.filepath)
            try:
                write_csv(path, rows)
            except (OSError, ValueError) as exc:
                return self.fail(f"cannot write {path}: {exc}; no clearance results were written")
        note = "; ".join(check.notes)
        apply(scene, rows, note)
        t = check.timer
        msg = (f"{check.summary(rows)} (solve {t.solve:.2f} s, trees {t.trees:.2f} s, "
               f"queries {t.queries:.2f} s)")
        self.report({'INFO'}, msg)
        for n in check.notes:
            self.report({'WARNING'}, n)
        return {'FINISHED'}

    def run(self, context):
        wm = context.window_manager
        try:
            check = self._check(context)
            wm.progress_begin(0, 1)
            try:
                check.run(progress=lambda d, t: wm.progress_update(d / max(t, 1)))
            finally:
                wm.progress_end()
        except errors() as exc:
            return self.fail_on(context, "clearance check failed", exc)
        return self._finish(context, check)

    def invoke(self, context, event):
        if context.window is None or bpy.app.background:
            return self.execute(context)
        try:
            self._job_check = self._check(context)
            self._job = self._job_check.steps()
        except errors() as exc:
            return self.fail_on(context, "clearance check failed", exc)
        wm = context.window_manager
        wm.progress_begin(0, 1)
        self._timer = wm.event_timer_add(0.01, window=context.window)
        wm.modal_handler_add(self)
        context.workspace.status_text_set("Checking clearance: Esc to stop")
        return {'RUNNING_MODAL'}

    def _end(self, context):
        wm = context.window_manager
        if self._timer is not None:
            wm.event_timer_remove(self._timer)
            self._timer = None
        wm.progress_end()
        context.workspace.status_text_set(None)
        if self._job is not None:
            self._job.close()
            self._job = None

    def modal(self, context, event):
        if event.type == 'ESC':
            self._end(context)
            self.report({'WARNING'}, "clearance check stopped; earlier results kept")
            return {'CANCELLED'}
        if event.type != 'TIMER':
            return {'PASS_THROUGH'}
        wm = context.window_manager
        t_end = time.perf_counter() + 0.1
        try:
            while time.perf_counter() < t_end:
                done, total = next(self._job)
                wm.progress_update(done / max(total, 1))
        except StopIteration:
            check = self._job_check
            self._end(context)
            return self._finish(context, check)
        except Exception as exc:  # noqa: BLE001 - reported, nothing written
            self._end(context)
            if not isinstance(exc, errors()):
                import traceback
                traceback.print_exc()
                return self.fail(f"clearance check failed: {exc}")
            return self.fail_on(context, "clearance check failed", exc)
        return {'RUNNING_MODAL'}

    def cancel(self, context):
        self._end(context)


class JOINTWISE_OT_clearance_show(Base, bpy.types.Operator):
    """Go to the frame of this pair's smallest gap and select the two objects"""
    bl_idname = "jointwise.clearance_show"
    bl_label = "Show Pair"
    index: IntProperty(name="Index", default=0)

    def run(self, context):
        jw = context.scene.jointwise
        if not 0 <= self.index < len(jw.clearance):
            return self.fail(f"no clearance result number {self.index}")
        if not show_pair(context.scene, jw.clearance[self.index], context):
            return self.fail("one of the pair's objects is no longer in the scene")
        return {'FINISHED'}


class JOINTWISE_OT_clearance_clear(Base, bpy.types.Operator):
    """Remove the clearance results and their timeline markers"""
    bl_idname = "jointwise.clearance_clear"
    bl_label = "Clear Clearance Results"

    def run(self, context):
        scene = context.scene
        scene.jointwise.clearance.clear()
        scene.jointwise.clearance_note = ""
        remove_markers(scene)
        return {'FINISHED'}


def item_text(scene, it):
    if it.contact:
        return f"{it.object_a} / {it.object_b}: touching at {it.contact_frames}"
    return f"{it.object_a} / {it.object_b}: {length_text(scene, it.min_gap)} at frame {it.min_frame}"


class JOINTWISE_UL_clearance(bpy.types.UIList):
    """One row per checked pair, worst first (the collection is kept in that order)."""

    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index):
        row = layout.row(align=True)
        icon = 'ERROR' if item.contact else ('INFO' if item.flagged else 'CHECKMARK')
        row.label(text=item_text(context.scene, item), icon=icon)
        row.operator("jointwise.clearance_show", text="", icon='RESTRICT_SELECT_OFF', emboss=False).index = index


class JOINTWISE_PT_clearance(bpy.types.Panel):
    """Checked pairs, worst first; click one to go to its frame and select the pair."""
    bl_space_type = 'VIEW_3D'
    bl_region_type = 'UI'
    bl_category = "Jointwise"
    bl_label = "Clearance"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        layout = self.layout
        scene = context.scene
        jw = scene.jointwise
        row = layout.row(align=True)
        row.operator("jointwise.clearance", text="Check Clearance", icon='MOD_PHYSICS')
        row.operator("jointwise.clearance_clear", text="", icon='X')
        if not len(jw.clearance):
            layout.label(text="No results yet")
        else:
            layout.template_list("JOINTWISE_UL_clearance", "", jw, "clearance", jw, "clearance_index", rows=4)
            if 0 <= jw.clearance_index < len(jw.clearance):
                it = jw.clearance[jw.clearance_index]
                box = layout.box()
                box.label(text=item_text(scene, it))
                a = ", ".join(length_text(scene, v) for v in it.point_a)
                b = ", ".join(length_text(scene, v) for v in it.point_b)
                box.label(text=f"on {it.object_a}: {a}")
                box.label(text=f"on {it.object_b}: {b}")
        if jw.clearance_note:
            layout.label(text=jw.clearance_note, icon='INFO')


CLASSES = (JointwiseClearancePair, JOINTWISE_OT_clearance, JOINTWISE_OT_clearance_show,
           JOINTWISE_OT_clearance_clear, JOINTWISE_UL_clearance, JOINTWISE_PT_clearance)


def register():
    """After the classes: the results on the scene's mechanism settings."""
    properties.add_settings({k: make() for k, make in SETTINGS.items()})


def unregister():
    properties.remove_settings(SETTINGS)
