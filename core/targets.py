"""Posing by target: bring points and links as close as the closed loops allow.

A target is either a point measure's name with a world position ``[x, y, z]`` (file
length unit), or a link's name with a 4x4 displacement from home (the form of
``Pose.links``).  Every coordinate that is not held may move, the file's drives
included; every loop stays closed; joint limits hold.

Method
------
The free coordinates ``u`` (coupled coordinates by their leader, free spherical joints by
rotation increments, as in :mod:`jointwise.solver`) move in steps of damped least
squares restricted to the loops' null space.  With ``A`` the constraint Jacobian and ``r``
the loop residual, ``J`` the targets' Jacobian and ``e`` their error, all made
dimensionless (lengths divided by the mechanism's size ``L``, angles in radians)::

    du_c = -A^+ r                         (closure part, least norm)
    N    = basis of null(A)               (motions that keep the loops closed)
    du   = du_c + N (JN)^T (JN (JN)^T + lambda^2 I)^-1 (e - J du_c)

(damped least squares: Y. Nakamura and H. Hanafusa, "Inverse kinematic solutions with
singularity robustness for robot manipulator control", J. Dyn. Syst. Meas. Control 108,
1986; C. W. Wampler, "Manipulator inverse kinematic solutions based on vector
formulations and damped least-squares methods", IEEE Trans. SMC 16, 1986).  Each step is
capped in size, corrected back onto closure by the solver's Newton corrector, and refused
(then halved) where that correction moves much more than the step itself, so the pose
moves continuously from the start on its assembly branch.  ``lambda`` grows when a step
does not lower the targets' error and shrinks when it does (Levenberg-Marquardt style).
Coordinates at a limit whose step would pass it are held (an active set); a step that
crosses a limit is clamped there.

Target Jacobians
----------------
A link's twist in the world frame is the sum over the tree joints from ground to it of
``+-Ad(D_parent) X_k dq_k``, ``X_k = Ad(prefix_k) S_k`` the joint's primitive screws
(space Jacobian: Lynch & Park, *Modern Robotics*, 2017, sec. 5.1.1), from
:func:`jointwise.kinematics.link_motion`; the velocity of a point ``p`` of the link is
``v + w x p`` (ibid. sec. 3.3.2); a link's turn error ``log(G D^T)`` changes by
``J_r^-1`` of it times the link's angular velocity
(:func:`jointwise.spatial.log3_derivative_inverse`).

Weights: point targets in length units; a link target as the displacement of a point
of the link (the centroid of its joint points) plus its rotation times ``L`` (the
mechanism's size), so a radian of turn weighs as much as ``L`` of travel.
"""
from __future__ import annotations

import difflib
import math
import weakref

import numpy as np

from . import kinematics, spatial
from .errors import AssemblyError, SpecError
from .results import Pose
from .units import LIMITS

__all__ = ["pose_to_targets", "REACHED", "parse_targets"]

#: A target is reached when its error is at most this fraction of the mechanism's size.
REACHED = 1e-6
#: Iterations stop once every target is this close (fraction of the size) ...
CLOSE = 1e-10
#: ... or the step has shrunk below this (dimensionless: radians or sizes).
STALL = 1e-11
#: A refused step this small (dimensionless), or one that promised to lower the squared
#: error by less than this fraction, is rounding noise: the nearest placement is found.
NOISE = 1e-8
#: ... and a step that promises less than this fraction is not taken at all.
FLAT = 1e-10
MAX_ITER = 400
#: Stop once the next step, extrapolated from the last two (their ratio), would move less
#: than this (dimensionless): it could not change a placement anyone reads.
NEXT = 1e-10
#: Closure error of a start (dimensionless: radian, or length / size) above which it is
#: closed before the first step.
START_GAP = 1e-6
#: First step cap (dimensionless); grows while the closure correction stays tiny.
FIRST_STEP = 2.0
MAX_STEP = 2 * math.pi
JUMP_SLACK = 0.01
LAMBDA0 = 1e-4
LAMBDA_MIN = 1e-9
LAMBDA_MAX = 1e3


# -- reading targets ---------------------------------------------------------------------------
def parse_targets(mech, targets, measures=None):
    """Validate ``targets``: list of ``(name, kind, data)`` with kind "point" or "link".

    Point targets: ``data = (link, at (3,), goal (3,))``; link targets:
    ``data = (link, goal 4x4)`` with the rotation made orthonormal.  ``measures``: the
    measures a name is looked up in (default the mechanism's own; a front that keeps its
    own list of measures, like the Blender extension, passes it)."""
    measures = mech.measures if measures is None else measures
    out = []
    if not isinstance(targets, dict):
        raise SpecError(f"targets must map names to positions or 4x4 displacements, got {type(targets).__name__}",
                        source=mech.source)
    for name, value in targets.items():
        meas = measures.get(name)
        is_point = meas is not None and meas.type == "point"
        try:
            arr = np.asarray(value, dtype=float)
        except (TypeError, ValueError):
            raise SpecError(f"target {name!r}: expected numbers, got {value!r}", source=mech.source) from None
        if is_point and arr.shape == (3,):
            kind = "point"
        elif name in mech.links and arr.shape == (4, 4):
            kind = "link"
        elif is_point or name in mech.links:
            want = "[x, y, z]" if is_point else "a 4x4 displacement from home"
            raise SpecError(f"target {name!r}: expected {want}, got shape {arr.shape}", source=mech.source)
        elif meas is not None:
            raise SpecError(f"target {name!r} is a {meas.type} measure; a target must name a point "
                            f"measure or a link", source=mech.source)
        else:
            names = [n for n, m in measures.items() if m.type == "point"] + list(mech.links)
            close = difflib.get_close_matches(str(name), names, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else f"; point measures and links are: {', '.join(names)}"
            raise SpecError(f"target {name!r} names no point measure or link{hint}", source=mech.source)
        if not np.all(np.isfinite(arr)):
            raise SpecError(f"target {name!r} must be finite, got {value!r}", source=mech.source)
        if np.abs(arr).max() > LIMITS["magnitude"]:
            raise SpecError(f"target {name!r}: {np.abs(arr).max():g} is beyond the limit of "
                            f"{LIMITS['magnitude']:g} in magnitude", source=mech.source)
        if kind == "point":
            out.append((name, "point", (meas.a[0], np.asarray(meas.a[1], float), arr)))
        else:
            if np.abs(arr[3] - [0, 0, 0, 1]).max() > 1e-9:
                raise SpecError(f"target {name!r}: the last row of a displacement must be [0, 0, 0, 1]",
                                source=mech.source)
            u, s, vt = np.linalg.svd(arr[:3, :3])
            if abs(np.linalg.det(u @ vt) - 1) > 1e-6 or abs(s - 1).max() > 1e-3:
                raise SpecError(f"target {name!r}: the displacement must be a rigid motion (rotation and "
                                f"translation), got singular values {np.round(s, 6).tolist()}", source=mech.source)
            goal = arr.copy()
            goal[:3, :3] = u @ vt
            out.append((name, "link", (name, goal)))
    return out


# -- what a mechanism keeps between target solves ----------------------------------------------
class _Layout:
    """Free columns for one set of fixed masters: global and per loop block, and the map
    from coordinate rates to them (twist columns of :func:`kinematics.link_motion` times
    ``lin``; a motion law's follower adds its slope at the leader's value)."""

    def __init__(self, solver, fixed):
        m = solver.m
        ct = m.coupling_table
        self.fixed = fixed
        rot = set()
        for jn, j in m.joints.items():
            if j.type != "spherical":
                continue
            idx = range(m.slices[jn].start, m.slices[jn].stop)
            # a limited ball joint keeps its coordinates as columns, so limits hold on them
            if all(ct.master[i] == i and len(ct.members[i]) == 1 and i not in fixed
                   and j.limits[i - m.slices[jn].start] is None for i in idx):
                rot.add(jn)
        cols = []
        for g in sorted(ct.members):
            if g in fixed or m.owner[m.coordinates[g]] in rot:
                continue
            cols.append(("m", g))
        for jn in m.joints:
            if jn in rot:
                cols.extend(("s", jn, k) for k in range(3))
        self.cols, self.rot = cols, rot
        self.cs = np.array([1.0 / solver.cscale[c[1]] if c[0] == "m" else 1.0 for c in cols])
        self.blocks = []
        for b in solver.blocks:
            groups = set(b.groups)
            idx = [k for k, c in enumerate(cols)
                   if (c[0] == "m" and c[1] in groups) or (c[0] == "s" and c[1] in b.joints)]
            self.blocks.append((b, [cols[k] for k in idx], np.array(idx, dtype=int),
                                rot & set(b.joints)))
        self.col_of = {c: k for k, c in enumerate(cols)}
        self.lin = np.zeros((len(m.coordinates), len(cols)))
        self.laws = []  # (member, master, column): slope of a motion law at q
        for k, c in enumerate(cols):
            if c[0] == "s":
                self.lin[m.slices[c[1]].start + c[2], k] = 1.0
                continue
            for i in ct.members[c[1]]:
                if i in ct.law:
                    self.laws.append((i, c[1], k))
                else:
                    self.lin[i, k] = ct.alpha[i]

    def rates(self, solver, q):
        """Coordinate rates per unit of each column at state ``q``, (n, ncols)."""
        if not self.laws:
            return self.lin
        out = self.lin.copy()
        for i, g, k in self.laws:
            out[i, k] = float(solver.m.coupling_table.member_slope(i, q[g]))
        return out


class _Shared:
    """Kept per solver between target solves (a drag asks many in a row): each master's
    limits, layouts per fixed set, a link target's joint
    points, and the last closed state with its corrector Jacobians and link poses (a
    solve starting exactly there needs no evaluation before its first step)."""

    def __init__(self, mech):
        ct = mech.coupling_table
        self.layouts = {}
        self.refs = {}
        self.last = None  # (q bytes, layout, corrector Jacobians, residual, link poses)
        self.bounds = {}
        for g, members in ct.members.items():
            lo, hi = -math.inf, math.inf
            for i in members:
                j = mech.joints[mech.owner[mech.coordinates[i]]]
                lim = j.limits[mech.local_index(i)]
                if lim is None or i in ct.law:  # a motion law's follower: checked after solving
                    continue
                a, b = (lim[0] - ct.beta[i]) / ct.alpha[i], (lim[1] - ct.beta[i]) / ct.alpha[i]
                lo, hi = max(lo, min(a, b)), min(hi, max(a, b))
            if lo > -math.inf or hi < math.inf:
                self.bounds[g] = (lo, hi)

    def ref(self, mech, link):
        """Joint points of ``link`` at home and their centroid (a link target's reference)."""
        hit = self.refs.get(link)
        if hit is None:
            pts = np.array([j.point for j in mech.joints.values() if link in (j.parent, j.child)])
            hit = self.refs[link] = (pts, pts.mean(axis=0))
        return hit


_SHARED = weakref.WeakKeyDictionary()  # solver -> _Shared


def _shared(mech):
    s = mech.solver
    hit = _SHARED.get(s)
    if hit is None:
        hit = _SHARED[s] = _Shared(mech)
    return hit


# -- the solve -------------------------------------------------------------------------------
class _Targets:
    def __init__(self, mech, held, parsed):
        self.m = mech
        self.s = mech.solver
        self.L = mech.size
        self.parsed = parsed
        self.held = frozenset(int(mech.coupling_table.master[i]) for i in held)
        self.sh = _shared(mech)
        self.bounds = self.sh.bounds
        self._closed = None
        self.residual = None
        self.refs = {name: self.sh.ref(mech, data[0]) for name, kind, data in parsed if kind == "link"}
        self._turn = (None, {})  # (links of the last errors() call, link target -> its turn error)

    def layout(self, fixed):
        key = frozenset(fixed) | self.held
        lay = self.sh.layouts.get(key)
        if lay is None:
            lay = self.sh.layouts[key] = _Layout(self.s, key)
        return lay

    def warm(self, q):
        """Link poses at ``q`` and, when ``q`` is exactly the last closed state of a solve
        with the same held set, that solve's corrector Jacobians (no evaluation needed)."""
        last = self.sh.last
        if last is not None and last[0] == q.tobytes():
            lay = self.layout(set())
            if last[1] is lay:
                self._closed = (lay, last[0], last[2])
                self.residual = last[3]
            return {k: v.copy() for k, v in last[4].items()}
        return self.m.link_poses(q)

    # -- evaluation ----------------------------------------------------------------------------
    def errors(self, links):
        """Target error vector (dimensionless) and each target's distance left (length unit)."""
        e, dist = [], {}
        L = self.L
        turns = {}
        self._turn = (links, turns)
        for name, kind, data in self.parsed:
            if kind == "point":
                link, at, goal = data
                D = links[link]
                p = D[:3, :3] @ at + D[:3, 3]
                d = goal - p
                e.append(d / L)
                dist[name] = float(np.linalg.norm(d))
            else:
                link, goal = data
                D = links[link]
                pts, c0 = self.refs[name]
                w = turns[name] = spatial.log3(goal[:3, :3] @ D[:3, :3].T)
                dp = (goal[:3, :3] @ c0 + goal[:3, 3]) - (D[:3, :3] @ c0 + D[:3, 3])
                e.append(w)
                e.append(dp / L)
                miss = (pts @ goal[:3, :3].T + goal[:3, 3]) - (pts @ D[:3, :3].T + D[:3, 3])
                dist[name] = float(np.linalg.norm(miss, axis=1).max())
        return np.concatenate(e), dist

    def twists(self, q, links, link, lay):
        """World twist of ``link`` per unit of each free column, (6, ncols), physical units."""
        cols = kinematics.link_motion(self.m, q[None], None, link, rot=lay.rot, links=links)[1]
        return cols[0] @ lay.rates(self.s, q)

    def jacobian(self, q, links, lay):
        """Targets' Jacobian over the free columns, dimensionless."""
        rows = []
        cache = {}
        for name, kind, data in self.parsed:
            link = data[0]
            tw = cache.get(link)
            if tw is None:
                tw = cache[link] = self.twists(q, links, link, lay)
            D = links[link]
            if kind == "point":
                p = D[:3, :3] @ data[1] + D[:3, 3]
                rows.append((tw[3:] - spatial.hat(p) @ tw[:3]) / self.L)
            else:
                c = D[:3, :3] @ self.refs[name][1] + D[:3, 3]
                w = self._turn[1].get(name) if self._turn[0] is links else None  # errors() of these links
                if w is None:
                    w = spatial.log3(data[1][:3, :3] @ D[:3, :3].T)
                rows.append(spatial.log3_derivative_inverse(w) @ tw[:3])
                rows.append((tw[3:] - spatial.hat(c) @ tw[:3]) / self.L)
        return np.vstack(rows) * lay.cs[None, :]

    def constraints(self, q, lay):
        """Loop residual and constraint Jacobian over the free columns, dimensionless."""
        rs_all, A_all = [], []
        n = len(lay.cols)
        known = self._closed if self._closed is not None and self._closed[0] is lay \
            and self._closed[1] == q.tobytes() else None
        for k, (b, cols_b, idx, rot_b) in enumerate(lay.blocks):
            if known is not None:  # just closed: the corrector's Jacobian, residual below tolerance
                r, J = np.zeros(6 * len(b.loops)), known[2][k]
            else:
                r, _, J = self.s._eval(b, q, cols_b, rot_b)
            rs = self.s._row_scale(len(b.loops))
            A = np.zeros((len(r), n))
            if len(idx):
                A[:, idx] = J * rs[:, None] * lay.cs[idx][None, :]
            rs_all.append(r * rs)
            A_all.append(A)
        if not A_all:
            return np.zeros(0), np.zeros((0, n))
        return np.concatenate(rs_all), np.vstack(A_all)

    def close(self, q, lay):
        """Close every loop block from ``q`` (in place); True on success.  The corrector's
        Jacobians are kept for the next step from the closed state."""
        Js = []
        worst = 0.0
        for b, cols_b, idx, rot_b in lay.blocks:
            ok, err, _, J = self.s._newton(b, q, cols_b, rot_b)
            if not ok:
                return False
            Js.append(J)
            worst = max(worst, float(err))
        self._closed = (lay, q.tobytes(), Js)
        self.residual = worst
        return True

    # -- one step -------------------------------------------------------------------------------
    def step(self, q, links, lay, lam, e, ra=None):
        """Damped least-squares step over ``lay``'s columns (dimensionless), and the size of
        its part towards the targets (the rest only closes the loops)."""
        r, A = self.constraints(q, lay) if ra is None else ra
        J = self.jacobian(q, links, lay)
        n = len(lay.cols)
        if n == 0:
            return np.zeros(0), 0.0, 0.0
        if A.shape[0]:
            U, sv, Vt = np.linalg.svd(A, full_matrices=True)
            tol = 1e-9 * max(sv[0] if sv.size else 0.0, 1.0)
            rank = int((sv > tol).sum())
            du_c = -Vt[:rank].T @ ((U[:, :rank].T @ r) / sv[:rank])
            N = Vt[rank:].T
        else:
            du_c = np.zeros(n)
            N = np.eye(n)
        if N.shape[1] == 0:
            return du_c, 0.0, 0.0
        JN = J @ N
        res = e - J @ du_c
        U2, s2, Vt2 = np.linalg.svd(JN, full_matrices=False)
        z = Vt2.T @ ((s2 / (s2 * s2 + lam * lam)) * (U2.T @ res))
        dt = N @ z
        after = res - JN @ z
        gain = (float(res @ res) - float(after @ after)) / max(float(e @ e), 1e-300)
        return du_c + dt, float(np.abs(dt).max()), gain

    def apply(self, q, lay, du):
        self.s._apply(q, lay.cols, lay.rot, du * lay.cs)

    def motion(self, a, b, lay):
        """Largest change between states (dimensionless) over the layout's master columns."""
        d = 0.0
        for c in lay.cols:
            if c[0] == "m":
                d = max(d, abs(a[c[1]] - b[c[1]]) * self.s.cscale[c[1]])
        return d

    def at_limit(self, q, du, lay):
        """Masters at a limit that ``du`` would push past it."""
        out = set()
        for k, c in enumerate(lay.cols):
            if c[0] != "m" or c[1] not in self.bounds:
                continue
            g = c[1]
            lo, hi = self.bounds[g]
            eps = 1e-12 * (1.0 / self.s.cscale[g])
            if (q[g] <= lo + eps and du[k] < 0) or (q[g] >= hi - eps and du[k] > 0):
                out.add(g)
        return out

    def clamp(self, q, lay):
        """Clamp coordinates past their limits; returns the clamped masters."""
        out = set()
        for c in lay.cols:
            if c[0] != "m" or c[1] not in self.bounds:
                continue
            g = c[1]
            lo, hi = self.bounds[g]
            if q[g] < lo or q[g] > hi:
                q[g] = min(max(q[g], lo), hi)
                self.m.coupling_table.derive(q, [g])
                out.add(g)
        return out

    def within_limits(self, q, lay):
        for c in lay.cols:
            if c[0] == "m" and c[1] in self.bounds:
                lo, hi = self.bounds[c[1]]
                tol = 1e-9 / self.s.cscale[c[1]]
                if not lo - tol <= q[c[1]] <= hi + tol:
                    return False
        return True

    def solve(self, q):
        """Move ``q`` (closed) towards the targets (in place); returns the number of steps."""
        links = self.warm(q)
        e, dist = self.errors(links)
        merit = float(e @ e)
        lam = LAMBDA0
        cap = FIRST_STEP
        steps = 0
        last_towards = None
        for it in range(MAX_ITER):
            # every row, so a link's turn about the line of its joint points counts too
            if float(np.abs(e).max()) <= CLOSE:
                break
            fixed = set()
            lay = self.layout(fixed)
            ra = None
            if it == 0 and self._closed is None:
                # a start closed up to stored-value noise (float32) is closed by the first
                # step's own closure part; one farther off is closed first
                ra = self.constraints(q, lay)
                if ra[0].size and float(np.abs(ra[0]).max()) > START_GAP:
                    if not self.close(q, lay):
                        raise AssemblyError(f"cannot assemble the start placement: loops stay open by "
                                            f"{self.s.closure(q)[0]:.3g}", error=float(self.s.closure(q)[0]))
                    links = self.m.link_poses(q)
                    e, dist = self.errors(links)
                    merit = float(e @ e)
                    ra = None
            du, towards, gain = self.step(q, links, lay, lam, e, ra)
            for _active in range(len(lay.cols) + 1):
                push = self.at_limit(q, du, lay)
                if not push:
                    break
                fixed |= push
                lay = self.layout(fixed)
                du, towards, gain = self.step(q, links, lay, lam, e)
            if towards < STALL or gain < FLAT:
                break
            size = float(np.abs(du).max())
            capped = size > cap
            if capped:
                du = du * (cap / size)
                size = cap
            trial = q.copy()
            self.apply(trial, lay, du)
            clamped = self.clamp(trial, lay)
            lay_c = self.layout(fixed | clamped) if clamped else lay
            before = trial.copy()
            ok = self.close(trial, lay_c) and self.within_limits(trial, lay)
            moved = self.motion(before, trial, lay) if ok else math.inf
            new_merit = math.inf
            if ok and moved <= 0.5 * size + JUMP_SLACK:
                links_t = self.m.link_poses(trial)
                e_t, dist_t = self.errors(links_t)
                new_merit = float(e_t @ e_t)
            if new_merit < merit:
                q[:] = trial
                links, e, dist, merit = links_t, e_t, dist_t, new_merit
                steps += 1
                lam = max(lam / 10.0, LAMBDA_MIN)
                if last_towards is not None and not capped and towards * towards < NEXT * last_towards:
                    # the steps contract (linearly or faster): the next one, about
                    # towards^2 / last_towards, would move less than NEXT: found
                    break
                last_towards = towards
                if moved < 0.01 * size:
                    cap = min(2 * cap, MAX_STEP)
                elif moved < 0.1 * size:
                    cap = min(1.5 * cap, MAX_STEP)
            else:
                if moved > 0.5 * size + JUMP_SLACK or not ok:
                    cap = 0.5 * min(cap, size)
                else:
                    lam = min(lam * 4.0, LAMBDA_MAX)
                    cap = 0.5 * min(cap, size) if lam >= LAMBDA_MAX else cap
                if cap < STALL or size < NOISE or gain < NOISE:
                    break
        self.dist, self.links = dist, links
        return steps


def pose_to_targets(mech, values, start, targets, measures=None):
    """:meth:`Mechanism.pose` with targets (see the module docstring); ``measures``: the
    point measures target names are looked up in, as for :func:`parse_targets`."""
    parsed = parse_targets(mech, targets, measures)
    held = mech._held_from(values)
    mech.check_limits(held)
    if isinstance(start, dict):
        start = mech.state(start)
    s = mech.solver
    q = s.home_state() if start is None else np.array(start.q, dtype=float)
    notes = list(s._home_notes) if start is None else []
    if held and any(abs(q[i] - v) > 0 for i, v in held.items()):
        # first the held values, by the ordinary pose (continuation from the start)
        q, info = s.pose(held, q)
        notes.extend(info.get("notes", []))
    else:
        for i, v in held.items():
            q[i] = v
    t = _Targets(mech, held, parsed)
    t.solve(q)
    links = t.links
    if t._closed is None or t._closed[1] != q.tobytes():  # no step taken: close where it is
        t.close(q, t.layout(set()))
        links = mech.link_poses(q)
        t.dist = t.errors(links)[1]
    closed_here = t._closed is not None and t._closed[1] == q.tobytes()
    err = t.residual if closed_here else s.closure(q)[0]
    if closed_here and t._closed[0] is t.layout(set()):
        t.sh.last = (t._closed[1], t._closed[0], t._closed[2], t.residual,
                     {k: v.copy() for k, v in links.items()})
    pose = Pose(joints=mech._values_out(q), links=links, converged=err <= 1e-9,
                residual=float(err), q=q, notes=notes)
    for name, v in (values or {}).items():
        pose.joints[name] = float(v)
    pose.target_error = {name: float(d) for name, d in t.dist.items()}
    pose.reached = all(d <= REACHED * mech.size for d in pose.target_error.values())
    return pose
