"""Loop closure: residuals, the analytic Jacobian, Newton steps, continuation, mobility.

Equations
---------
For a loop walked as steps ``(joint, sign)`` from its root link, the loop closes when

    F(q) = T_1 T_2 ... T_n = I,    T_k = E_k(q) if sign > 0 else E_k(q)^-1,

with ``E`` the joints' products of exponentials in the root's home-aligned frame.  The
residual is the twist ``log(F) = (w, v)`` moved to the point where the loop is cut,
``(w, v + w x p)``, so its parts read as the angular gap (rad) and the positional gap
(length unit) at the closing joint.  The Jacobian columns are the joint twists
carried to the root frame by adjoints, ``Ad(T_1 ... T_{k-1} prefix) S`` (with a minus
sign and the step's own transform included for reversed steps); this is the exact
derivative of ``dF F^-1`` and equals the derivative of ``log F`` at closure.
(Lynch & Park, *Modern Robotics*, 2017, sec. 5.1 (space Jacobian) and sec. 7.1 (closed
chains); Murray, Li & Sastry 1994, sec. 3.2.)

Solving
-------
Loops that share no coordinate (couplings join coordinates into one group) are solved
as independent blocks, so cost grows linearly with their number.  Each block takes
Gauss-Newton steps of least norm (SVD pseudo-inverse of the Jacobian scaled to
dimensionless rows and columns), so rank-deficient sets such as a planar four-bar
modelled in 3D, or redundant constraints, converge and coordinates no constraint
determines keep their previous values.  A step that raises the residual is halved.
Free spherical joints move by rotation increments, so they keep three freedoms at
every orientation.  Held values are reached by continuation: a tangent predictor
and a Newton corrector over sub-steps of at most ``MAX_STEP`` (dimensionless); the
corrector of a sub-step that moves at least ``CURVE_FROM`` starts from the second-order
prediction (the tangent's curvature from J-dot q-dot, :func:`kinematics.bias_one`), so a
short warm-started step closes in one Newton step (the tests below read the first-order
prediction, as before).  A sub-step is accepted only when its corrector contracts (it
fails within a few iterations otherwise, so an unreachable target fails fast), moves no
more than the prediction allows, and keeps the orientation of the solved block; else it
is halved.
Where halving reaches the smallest step and the orientation still changes, the path
passes a singular point and the result is flagged singular.  The argument and its
sources are under "branch continuity" in :mod:`jointwise.linalg`.
"""
from __future__ import annotations

import math

import numpy as np

from . import kinematics, spatial
from .errors import AssemblyError, LimitError, Reason
from .linalg import det_small, independent_parts, loop_groups, lstsq_small, lstsq_svd, normal_factor, normal_solve, orientation_agrees
from .units import (ASSEMBLY_TOLERANCE, CLOSE_POSITION, CONTRACT_FLOOR, CORRECTOR_ITER, CORRECTOR_RATIO,
                    CURVE_FROM, JACOBIAN_MEMORY, JUMP_SLACK, MAX_HELD_STEP, MAX_ITER, MAX_LINEAR_MOTION, MAX_MOTION,
                    MAX_SPAN, MAX_STEP, NORMAL_CERT, PLAN_MEMORY, SINGULAR_RATIO, TOLERANCE)

__all__ = ["Solver", "TOLERANCE", "SINGULAR_RATIO", "MAX_STEP"]

_EYE4 = np.eye(4)


def _log6_one(t):
    """(w, v) of one rigid transform: :func:`spatial.log6`'s scalar fast path."""
    x = spatial.log6(t)
    return x[:3], x[3:]

def _remember(cache, key, value):
    """Store ``value`` under ``key`` in a dict kept to ``PLAN_MEMORY`` entries (oldest out)."""
    while len(cache) >= PLAN_MEMORY:
        cache.pop(next(iter(cache)))
    cache[key] = value
    return value


class _Block:
    """Loops that share coordinates, solved together."""

    def __init__(self, index, loops, joints, groups):
        self.index = index
        self.loops = loops          # list of Loop
        self.joints = joints        # joint names in these loops (ordered)
        self.groups = groups        # master indices whose group touches these loops


class _Step:
    """What a continuation step of one block with one set of held masters reads, worked out
    once: unknown columns ``cols`` (``rot``: joints moved by rotation increments), ``allcols``
    (unknown then held), their scales, the loop plan of ``allcols``; ``plain`` where every
    unknown column is a coordinate (``gidx`` their masters, ``gscale`` those masters' scales,
    ``derived`` the masters with coupled members); ``curved`` where the second-order
    predictor applies (plain, no motion law in the plan: :func:`kinematics.bias_one`)."""

    def __init__(self, s, b, cols, rot, allcols):
        self.cols, self.rot, self.allcols = cols, rot, allcols
        self.nu = len(cols)
        self.cs = s._col_scale(cols)
        self.rs = s._row_scale(len(b.loops))
        self.rcs = self.rs[:, None] * self.cs[None, :]  # scales the solved Jacobian: J * rcs
        self.plan = s._plan(b, allcols, rot)
        self.plain = not rot and all(c[0] == "m" for c in cols)
        self.gidx = np.array([c[1] for c in cols], dtype=int) if self.plain else None
        self.gscale = s.cscale[self.gidx] if self.plain else None
        self.derived = [c[1] for c in cols if c[0] == "m" and len(s.m.coupling_table.members[c[1]]) > 1]
        self.curved = self.plain and not self.plan["varying"] and bool(cols)
        #: the parts the held values leave independent (the orientation test reads each)
        self.parts = independent_parts(kinematics.loop_incidence(self.plan, self.nu))


#: A closed state's scaled solved Jacobian counts as proven regular where ``det(G) / |G|_F^g``
#: (``G`` its Gram matrix on the smaller side) reaches this: then ``s_min / s_max >=
#: SINGULAR_RATIO`` (the certificate bounds ``(s_min / s_max)^2`` from below), so it has full
#: rank, is not singular, its orientation is defined and no SVD is needed.
FULL_CERT = max(NORMAL_CERT, SINGULAR_RATIO ** 2)


def _state_info(js):
    """How a closed state's scaled solved Jacobian ``js`` (m, k) is read: ``("full", js, fac)``
    where the certificate proves it regular (see ``FULL_CERT``; ``fac`` its normal equations
    solved once, :func:`jointwise.linalg.normal_factor`, for up to three columns, else None),
    else ``("svd", (u, s, vt))`` its thin SVD.  :func:`_solve_at` solves with it."""
    m, k = js.shape
    if k and m:
        if k <= min(m, 3):  # plain floats: the normal equations' factor carries the certificate
            fac = normal_factor(js)
            if fac is not None and fac[3] >= FULL_CERT:
                return "full", js, fac
        else:
            g = js.T @ js if k <= m else js @ js.T
            fro = math.sqrt(float((g * g).sum()))
            if fro > 0 and det_small(g / fro) >= FULL_CERT:
                return "full", js, None
    return "svd", np.linalg.svd(js, full_matrices=False)


def _absmax(v):
    """Largest magnitude in a short 1-D array (0.0 if empty), as a float."""
    return max(map(abs, v.tolist()), default=0.0)


def _solve_at(info, rhs):
    """``lstsq(js, rhs, rcond=1e-6)`` for the scaled Jacobian read by :func:`_state_info`."""
    if info[0] == "full":
        return normal_solve(info[2], info[1], rhs) if info[2] is not None else lstsq_small(info[1], rhs, 1e-6)
    return lstsq_svd(info[1], rhs, 1e-6)


def _agrees(frame, js, part_frames=()):
    """The orientation test of :func:`jointwise.linalg.orientation_agrees` for one state.  For
    a frame ``("full", J_a)`` (full rank proven) ``det(U^T J_b V) > 0`` equals ``det(J_a^T
    J_b) > 0`` (tall) or ``det(J_a J_b^T) > 0`` (wide), since ``J_a = U S V^T``.  Where the
    block has independent parts, whose orientations multiply to the block's, each part is
    read as well (``part_frames``: :func:`_part_frames` of the frame's state)."""
    if isinstance(frame[0], str):  # ("full", J_a)
        ja = frame[1]
        if det_small(ja.T @ js if ja.shape[1] <= ja.shape[0] else ja @ js.T) <= 0:
            return False
    elif not orientation_agrees(frame, js):
        return False
    for rows, cols, a, tall in part_frames:
        b = js[np.ix_(rows, cols)]
        if det_small(a.T @ b if tall else a @ b.T) <= 0:
            return False
    return True


def _part_frames(ja, parts):
    """Each independent part (:func:`jointwise.linalg.independent_parts`) of the scaled
    Jacobian ``ja`` whose orientation is defined (its own Gram certificate reaches
    ``FULL_CERT``; a part near its own singular point is left to the block's test and the
    singular flag), as ``(rows, cols, part of ja, tall)``: worked out once per state, read by
    every trial step from it."""
    out = []
    for rows, cols in parts if len(parts) > 1 else ():
        a = ja[np.ix_(rows, cols)]
        tall = a.shape[1] <= a.shape[0]
        g = a.T @ a if tall else a @ a.T
        fro = math.sqrt(float((g * g).sum()))
        if fro > 0 and det_small(g / fro) >= FULL_CERT:
            out.append((rows, cols, a, tall))
    return out


class Solver:
    def __init__(self, mech):
        self.m = mech
        self.L = mech.size
        n = len(mech.coordinates)
        self.n = n
        self._blocks()
        # Caches: each has a bound and a key that names everything its value depends on
        # (the model's coupling table and the geometry are fixed for a solver's life).
        #   _plans    (block, unknown columns, rotation-increment joints, coupled) -> loop
        #             plan (kinematics.loop_plan); PLAN_MEMORY, oldest out
        #   _layouts  (block, held masters) -> (unknown columns, rotation joints); PLAN_MEMORY
        #   _steps    (block, held masters in order) -> _Step (columns, scales, plan); PLAN_MEMORY
        #   _kept     (given coordinates, drive flags) -> drives kept held; PLAN_MEMORY
        #   _tangent_cols (block, held masters, moving master) -> column lists; PLAN_MEMORY
        #   _lastJ    (block, bytes of the block's state: its joints' coordinates and its
        #             masters, all its equations read) -> Jacobian, _state_info and Jacobian
        #             sources of a closed state; JACOBIAN_MEMORY per block (keyed by the
        #             block's own state, so other blocks moving after it do not miss it)
        #   _row_scales  loop count -> row scale; _rot_twists  joint -> twists (structure)
        #   _generic_rank (purpose, block, columns) -> largest rank seen (one per layout)
        #   _settled  block -> (its coordinates' bytes and held values as a pose left them,
        #             (error, singular)): a pose started there with the same held values
        #             skips the block (a value change moves one block of many); one per block
        #   _block_idx  block -> indices of its joints' coordinates (structure)
        self._generic_rank = {}
        self._plans = {}
        self._kept = {}
        self._row_scales = {}
        self._layouts = {}
        self._lastJ = {}
        self._steps = {}
        self._tangent_cols = {}
        self._settled = {}
        self._block_idx = {}
        self._home_q = None
        self._home_notes = []
        self._rot_twists = {}
        self._crossed = False
        self._near = False  # a pose's path passed an accepted state near a singular point
        #: after a failed continuation: the farthest closed state it reached (for ``reach``)
        self.last_closed = None
        self.is_length = np.array([k == "length" for k in mech.kinds], dtype=bool)
        # dimensionless scale of each coordinate
        self.cscale = np.where(self.is_length, 1.0 / self.L, 1.0)
        self.rscale = np.array([1, 1, 1, 1 / self.L, 1 / self.L, 1 / self.L])
        #: weight of a position gap in closure errors (see ``TOLERANCE``)
        self.pos_weight = TOLERANCE / (CLOSE_POSITION * self.L)
        self.escale = np.array([1, 1, 1] + [self.pos_weight] * 3)
        #: a closure error of a coordinate, scale-free (radian; length times pos_weight)
        self.qerr = np.where(self.is_length, self.pos_weight, 1.0)
        self._limit_table = None  # built on first use by _limits (limits never change)

    def _blocks(self):
        m = self.m
        ct = m.coupling_table
        used = np.zeros((len(m.loops), len(m.coordinates)), bool)  # loop -> masters it reads
        for li, loop in enumerate(m.loops):
            for jname, _ in loop.steps:
                used[li, ct.master[m.slices[jname]]] = True
        groups = loop_groups(used)
        self.blocks = []
        self.block_of_master = {}
        for bi, lis in enumerate(groups):
            loops = [m.loops[i] for i in lis]
            joints = []
            for loop in loops:
                for jname, _ in loop.steps:
                    if jname not in joints:
                        joints.append(jname)
            masters = sorted({int(ct.master[i]) for jn in joints
                              for i in range(m.slices[jn].start, m.slices[jn].stop)})
            self.blocks.append(_Block(bi, loops, joints, masters))
            for g in masters:
                self.block_of_master[g] = bi

    # -- evaluation --------------------------------------------------------------------
    def _layout(self, block, held_masters):
        """Unknown columns of a block: list of ("m", master) or ("s", joint, 0..2)."""
        key = (block.index, frozenset(held_masters))
        hit = self._layouts.get(key)
        if hit is None:
            hit = _remember(self._layouts, key, self._layout_new(block, held_masters))
        return hit

    def _layout_new(self, block, held_masters):
        m = self.m
        ct = m.coupling_table
        cols = []
        rot = set()
        for jn in block.joints:
            j = m.joints[jn]
            if j.type != "spherical":
                continue
            idx = range(m.slices[jn].start, m.slices[jn].stop)
            if all(ct.master[i] == i and len(ct.members[i]) == 1 and i not in held_masters for i in idx):
                rot.add(jn)
        for g in block.groups:
            if g in held_masters:
                continue
            if m.owner[m.coordinates[g]] in rot and len(ct.members[g]) == 1:
                continue
            cols.append(("m", g))
        for jn in block.joints:
            if jn in rot:
                cols.extend(("s", jn, k) for k in range(3))
        return cols, rot

    def _plan(self, block, cols, rot, coupled=True):
        """The block's loop plan (:func:`jointwise.kinematics.loop_plan`) for one set of
        unknown columns; key: block, columns, rotation-increment joints and whether
        couplings are eliminated; at most ``PLAN_MEMORY`` kept, oldest dropped first."""
        key = (block.index, tuple(cols), frozenset(rot), coupled)
        plan = self._plans.get(key)
        if plan is None:
            plan = _remember(self._plans, key, kinematics.loop_plan(self, block, cols, rot, coupled))
        return plan

    def _eval(self, block, q, cols, rot, jac=True, coupled=True):
        """Residual (6 per loop, at the cut), per-loop errors and the Jacobian at state ``q``
        (:func:`jointwise.kinematics.eval_one`)."""
        return kinematics.eval_one(self, self._plan(block, cols, rot, coupled), q, jac)

    def _col_scale(self, cols):
        """Size of one dimensionless unit of each column (length unit = mechanism size)."""
        return np.array([1.0 / self.cscale[c[1]] if c[0] == "m" else 1.0 for c in cols])

    def _row_scale(self, nl):
        """Row scale of ``nl`` loops (a read-only array, built once per count)."""
        rs = self._row_scales.get(nl)
        if rs is None:
            rs = self._row_scales[nl] = np.tile(self.rscale, nl)
            rs.flags.writeable = False
        return rs

    def _apply(self, q, cols, rot, du):
        """Add a step ``du`` over the unknown columns to state ``q`` (in place)."""
        m = self.m
        sph = {}
        for c, d in zip(cols, du):
            if c[0] == "m":
                g = c[1]
                q[g] += d
            else:
                sph.setdefault(c[1], np.zeros(3))[c[2]] = d
        self.m.coupling_table.derive(q, [c[1] for c in cols if c[0] == "m"])
        for jn, d in sph.items():
            # the increment turns about world axes through the joint point: its rotation is
            # exp3(d) (the rotation twists' angular parts are the unit axes); the coordinates
            # read only the rotation of the joint's new displacement
            sl = m.slices[jn]
            rn = kinematics.rotation_one(d) @ kinematics.joint_rotation_one(self._unit_screws(jn), q[sl])
            q[sl] = m.joints[jn].coordinates_from_transform(rn, near=q[sl])

    # -- Newton corrector ---------------------------------------------------------------
    def _newton(self, block, q, cols, rot, evaluated=None, nu=None):
        """Close the block's loops from ``q`` (in place).

        Returns ``(ok, err, loop_errs, J)`` with ``J`` the Jacobian at the final state.
        Only the first ``nu`` columns (default all) are unknowns; the rest are evaluated
        along (for the continuation predictor) but not moved.
        """
        nl = len(block.loops)
        rs = self._row_scale(nl)
        evalcols = cols
        if nu is not None:
            cols = cols[:nu]
        cs = self._col_scale(cols)
        r, errs, J = evaluated if evaluated is not None else self._eval(block, q, evalcols, rot)
        err = errs.max()
        best = (err, q.copy(), errs, J)
        step_scale = 1.0
        for _ in range(MAX_ITER):
            if err <= TOLERANCE:
                return True, err, errs, J
            if not cols:
                break
            Js = J[:, :len(cols)] * rs[:, None] * cs[None, :]
            du_s = lstsq_small(Js, -r * rs, 1e-10)
            big = np.abs(du_s).max() if du_s.size else 0.0
            if big > 0.5:
                du_s *= 0.5 / big
            q_old = q.copy()
            accepted = False
            norm0 = np.linalg.norm(r * rs)
            for _half in range(8):
                self._apply(q, cols, rot, du_s * cs * step_scale)
                # residual first: a converged state keeps the Jacobian of the step before,
                # which differs from its own by the (tiny) last step only
                r2, errs2, _ = self._eval(block, q, evalcols, rot, jac=False)
                if errs2.max() <= TOLERANCE:
                    return True, float(errs2.max()), errs2, J
                norm2 = np.linalg.norm(r2 * rs)
                if norm2 < norm0:
                    accepted = True
                    # converging fast: keep the Jacobian (a chord step); else evaluate it anew
                    J2 = J if norm2 < 1e-3 * norm0 else self._eval(block, q, evalcols, rot)[2]
                    break
                q[:] = q_old
                step_scale *= 0.5
            if not accepted:
                break
            step_scale = min(1.0, step_scale * 2)
            r, errs, J = r2, errs2, J2
            err = errs.max()
            if err < best[0]:
                best = (err, q.copy(), errs, J)
        if err <= TOLERANCE:
            return True, err, errs, J
        q[:] = best[1]
        return False, best[0], best[2], best[3]

    def _correct(self, block, q, st, nu):
        """Continuation corrector: undamped Newton from the predictor ``q`` (in place), over
        the columns of step record ``st`` (:class:`_Step`; the first ``nu`` unknown).

        Unlike :meth:`_newton` it never damps nor wanders: it fails as soon as an
        increment is not at most ``CORRECTOR_RATIO`` of the one before (the predictor lies
        outside the convergence region of the nearest solution, see the branch notes
        above), so a failed step costs a few evaluations.  Returns ``(ok, err, loop_errs,
        J, sources)`` with ``J`` over all columns at the final state and ``sources`` its
        Jacobian sources (:func:`jointwise.kinematics.eval_one`).
        """
        plan, rs, cs = st.plan, st.rs, st.cs
        r, errs, J, src = kinematics.eval_one(self, plan, q, True, True)
        prev = None
        for _ in range(CORRECTOR_ITER):
            err = max(errs.tolist())
            if err <= TOLERANCE:
                return True, err, errs, J, src
            if not nu:
                break
            du = lstsq_small(J[:, :nu] * st.rcs, -r * rs, 1e-10)
            size = math.sqrt(float(du @ du))
            if prev is None and size > 0.5:
                break  # the predictor is far from closure: the sub-step is too long
            if prev is not None and size > CONTRACT_FLOOR and size > CORRECTOR_RATIO * prev:
                break  # no contraction: outside the corrector's convergence region
            prev = size
            if st.plain:
                q[st.gidx] += du * cs
                self.m.coupling_table.derive(q, st.derived)
            else:
                self._apply(q, st.cols, st.rot, du * cs)
            r, errs, J, src = kinematics.eval_one(self, plan, q, True, True)
        err = max(errs.tolist())
        return err <= TOLERANCE, err, errs, J, src

    def _orientation(self, b, info, cols):
        """Orientation frame (see :func:`jointwise.linalg.orientation_frame`) of a solved block's
        Jacobian, from :func:`_state_info` of its scaled form: where full rank is proven the
        frame is the scaled Jacobian itself (:func:`_agrees`), else ``(U_r, V_r, s_r / s_1)``."""
        key = ("orient", b.index, tuple(cols))
        if info[0] == "full":
            self._generic_rank[key] = max(self._generic_rank.get(key, 0), min(info[1].shape))
            return info
        u, sv, vt = info[1]
        rank = int((sv > 1e-9 * max(sv[0], 1e-300)).sum()) if sv.size else 0
        rank = max(rank, self._generic_rank.get(key, 0))
        self._generic_rank[key] = rank
        r = max(1, min(rank, sv.shape[-1]))
        return u[:, :r], vt[:r].T, sv[r - 1] / max(sv[0], 1e-300)

    # -- public ----------------------------------------------------------------------------
    def closure(self, q):
        """(largest error, per-loop errors) of state ``q``; couplings count as loops.

        Errors are scale-free (see ``TOLERANCE``: radians, positions weighted by their
        fraction of the mechanism's size), so a drawing scaled by any factor closes to
        the same tolerance.  A coupling's error is ``|follower - (ratio * leader +
        offset)|`` in those units.
        """
        errs = []
        for b in self.blocks:
            errs.extend(self._eval(b, q, [], set(), jac=False)[1])
        m = self.m
        for name, e in self.m.coupling_table.errors(q).items():
            errs.append(e * self.qerr[m.index[m.couplings[name].follower]])
        return (max(errs) if errs else 0.0), errs

    def _loops_of(self, i):
        """Names of the loops whose walk passes the joint owning coordinate ``i``."""
        jn = self.m.owner[self.m.coordinates[i]]
        return [lp.name for lp in self.m.loops if any(j == jn for j, _ in lp.steps)]

    def home_state(self):
        """The home state, settled onto closure if within the assembly tolerance."""
        if self._home_q is not None:
            return self._home_q.copy()
        m = self.m
        ct = m.coupling_table
        q = m.home.copy()
        notes = [f"home placement settled: {n}" for n in m.settle_notes]
        for name, err in self.m.coupling_table.errors(q).items():
            if err <= TOLERANCE:
                continue
            c = m.couplings[name]
            fi = m.index[c.follower]
            tol = ASSEMBLY_TOLERANCE * (self.L if self.is_length[fi] else 1.0)
            unit = m.unit_name(fi)
            loops = self._loops_of(fi)
            gap = err / m.unit_scale(fi)
            if err > tol:
                raise AssemblyError(reason=Reason(
                    "coupling", coupling=name, joint=c.follower, value=float(gap),
                    bounds=(0.0, tol / m.unit_scale(fi)), unit=unit, loop=loops[0] if loops else None,
                    error=float(err)))
            notes.append(f"home placement settled: coupling {name!r} was off by {gap:.3g} {unit}")
        ct.derive(q, list(ct.members))
        for b in self.blocks:
            cols, rot = self._layout(b, set())
            r, errs, _ = self._eval(b, q, cols, rot, jac=False)
            if errs.max() <= TOLERANCE:
                continue
            worst = int(np.argmax(errs))
            rw = r.reshape(-1, 6)[worst]
            ang, pos = np.abs(rw[:3]).max(), np.abs(rw[3:]).max()
            loop = b.loops[worst].name
            if ang > ASSEMBLY_TOLERANCE or pos > ASSEMBLY_TOLERANCE * self.L:
                raise AssemblyError(reason=Reason(
                    "home", loop=loop, value=float(pos), bounds=(0.0, ASSEMBLY_TOLERANCE * self.L),
                    unit=m.length_unit, angle=(math.degrees(ang), math.degrees(ASSEMBLY_TOLERANCE)),
                    error=float(errs.max())))
            drives = {int(ct.master[i]) for i, c in enumerate(m.coordinates) if c in m.driven}
            held = set(drives) & set(b.groups)
            cols, rot = self._layout(b, held)
            ok, err, _, _ = self._newton(b, q, cols, rot)
            if not ok:
                raise AssemblyError(reason=Reason("home", loop=loop, error=float(err)))
            notes.append(f"home placement settled: loop closed by joint {loop!r} was off by "
                         f"{pos:.3g} {m.length_unit} and {math.degrees(ang):.3g} deg")
        self._home_q = q
        self._home_notes = notes
        return q.copy()

    def pose(self, held, q_start=None, release=False):
        """Solve with coordinates ``held`` (index -> internal value).  Returns (q, info).
        ``release``: the file's drives are not held (as ``sweep --drive``)."""
        q = self.home_state() if q_start is None else np.array(q_start, dtype=float)
        notes = list(self._home_notes) if q_start is None else []
        explicit = dict(held)
        target = {}
        source = {}
        for i, v in explicit.items():
            self.m.coupling_table.hold(target, source, i, v)
        for i in ([] if release else self.kept_drives(explicit)):
            self.m.coupling_table.hold(target, source, i, q[i])
        # coordinates outside every loop: set directly
        for g, v in target.items():
            if g not in self.block_of_master:
                q[g] = v
                self.m.coupling_table.derive(q, [g])
        singular = False
        worst = 0.0
        self._crossed = False
        self._near = False
        for b in self.blocks:
            held_b = {g: target[g] for g in b.groups if g in target}
            idx = self._block_coordinates(b)
            key = (q[idx].tobytes(), tuple(sorted(held_b.items())))
            hit = self._settled.get(b.index)
            if hit is not None and hit[0] == key:
                err, sing = hit[1]  # started where it was left, same held values: nothing to do
            else:
                err, sing = self._solve_block(b, q, held_b, source)
                self._settled[b.index] = ((q[idx].tobytes(), key[1]), (err, sing))
            worst = max(worst, err)
            singular = singular or sing
        self._check_passive_limits(q, set(target))
        if self._near and not self._crossed:
            notes.append("on the way the mechanism passed close to a singular position; past such a "
                         "point it may continue on another assembly branch: check the result")
        return q, {"converged": worst <= TOLERANCE, "residual": float(worst),
                   "singular": bool(singular), "notes": notes,
                   "crossed_singular": bool(self._crossed), "passed_near_singular": bool(self._near)}

    def _block_coordinates(self, b):
        """Indices of every coordinate block ``b``'s equations read: its joints' coordinates
        and the masters of their coupling groups (a motion law's slope reads its leader),
        kept per block."""
        idx = self._block_idx.get(b.index)
        if idx is None:
            m = self.m
            own = {i for jn in b.joints for i in range(m.slices[jn].start, m.slices[jn].stop)}
            idx = self._block_idx[b.index] = np.array(sorted(own | set(b.groups)), dtype=int)
        return idx

    def kept_drives(self, explicit):
        """The file's driven coordinates held besides ``explicit`` (coordinate indices), by
        the one holding rule, :meth:`Mechanism.held_coordinates` (coordinates outside every
        loop keep their values here anyway, so only the drives are returned)."""
        m = self.m
        # key: the given coordinates and the drive flags (a front may change a joint's flag)
        key = (tuple(explicit), tuple(j.drive for j in m.joints.values()))
        hit = self._kept.get(key)
        if hit is None:
            driven = set(m.driven)
            names = m.held_coordinates([m.coordinates[i] for i in explicit])
            hit = [m.index[c] for c in names if c in driven and m.index[c] not in explicit]
            _remember(self._kept, key, hit)
        return list(hit)

    def _step_of(self, b, hlist):
        """What a continuation step of block ``b`` with held masters ``hlist`` (in order) reads
        (:class:`_Step`); key: block and held masters in order (they decide the columns too);
        at most ``PLAN_MEMORY`` kept, oldest out."""
        key = (b.index, tuple(hlist))
        st = self._steps.get(key)
        if st is None:
            cols, rot = self._layout(b, set(hlist))
            allcols = cols + [("m", g) for g in hlist]
            st = _remember(self._steps, key, _Step(self, b, cols, rot, allcols))
        return st

    def _solve_block(self, b, q, held_b, source):
        hlist = list(held_b)
        st = self._step_of(b, hlist)
        cols, rot, cs, rs, nu, allcols = st.cols, st.rot, st.cs, st.rs, st.nu, st.allcols
        h0 = [float(q[g]) for g in hlist]
        dfull = [held_b[g] - v for g, v in zip(hlist, h0)]  # held change per unit t
        dh = [abs(d) * self.cscale[g] for g, d in zip(hlist, dfull)]
        span = max(dh) if dh else 0.0
        if span > MAX_SPAN:
            raise self._too_far(hlist[dh.index(span)], held_b, dict(zip(hlist, h0)), source)
        if span == 0.0:
            ok, err, errs, J = self._newton(b, q, cols, rot)
            if not ok:
                self._fail(b, q, held_b, source, err, errs, dict(zip(hlist, h0)))
            return err, self._singular(b, J, cols, rs, cs)
        q0 = q.copy()
        dfull = np.array(dfull)
        held_rate = span  # dimensionless held motion per unit t
        t = 0.0
        limit = MAX_STEP
        J_here = None
        err, errs, J = 0.0, np.zeros(0), None
        frame = None
        crossed = False
        svd_here = None
        src_here = None
        while t < 1.0:
            if J_here is None:
                key = (b.index, q[self._block_coordinates(b)].tobytes())
                cached = self._lastJ.pop(key, None)
                if cached is not None and cached[0] is allcols:
                    J_here, svd_here, src_here = cached[1], cached[2], cached[3]
                    self._lastJ[key] = cached  # most recently used last
                else:
                    _, _, J_here, src_here = kinematics.eval_one(self, st.plan, q, True, True)
            # tangent: d(unknown)/dt = -pinv(J_u) J_h d(held)/dt  (dimensionless columns)
            accel = None
            if cols:
                if svd_here is None:
                    svd_here = _state_info(J_here[:, :nu] * rs[:, None] * cs[None, :])
                rate = _solve_at(svd_here, -(J_here[:, nu:] @ dfull) * rs)
                rmax = _absmax(rate)
                if st.curved and min(rmax * (1.0 - t), limit) >= CURVE_FROM:
                    # second-order term: J_u u'' = -J_dot q' (kinematics.bias_one), exact at a closed
                    # state; it moves the corrector's start only (the tests below read the
                    # first-order prediction)
                    bias = kinematics.bias_one(st.plan, src_here, np.concatenate([rate * cs, dfull]))
                    accel = _solve_at(svd_here, -bias * rs)
            else:
                rate, rmax = np.zeros(0), 0.0
            if cols and frame is None:
                frame = self._orientation(b, svd_here, cols)
                part_frames = ()  # the independent parts' own orientation frames here
                if len(st.parts) > 1:
                    part_frames = _part_frames(svd_here[1] if svd_here[0] == "full" else
                                               (svd_here[1][0] * svd_here[1][1]) @ svd_here[1][2], st.parts)
                if t > 0.0 and not isinstance(frame[0], str) and frame[2] < SINGULAR_RATIO:
                    # an accepted state on the way lies as near a singular point as the
                    # singular flag reads: past it, the branch that keeps the orientation
                    # may be another assembly branch (a change point), so the pose says so
                    self._near = True
            remaining = 1.0 - t
            dt = remaining
            if rmax * dt > limit:
                dt = limit / rmax
            if held_rate * dt > MAX_HELD_STEP:
                dt = MAX_HELD_STEP / held_rate
            dt_first = dt
            while True:
                t1 = 1.0 if dt >= remaining else t + dt
                h = t1 - t
                trial = q.copy()
                for g, v, d in zip(hlist, h0, dfull):
                    trial[g] = v + t1 * d
                self.m.coupling_table.derive(trial, hlist)
                if st.plain:
                    # unknown masters only: the first-order prediction, and the start of the
                    # corrector with the second-order term where it stays small beside it
                    first = trial[st.gidx] + rate * h * cs
                    start_u = first
                    if accel is not None:
                        bend = accel * (0.5 * h * h)
                        if _absmax(bend) <= 0.25 * rmax * h:
                            start_u = first + bend * cs
                    trial[st.gidx] = start_u
                    self.m.coupling_table.derive(trial, st.derived)
                    ok, err, errs, Jall, src = self._correct(b, trial, st, nu)
                    moved = _absmax((trial[st.gidx] - first) * st.gscale) if ok else 0.0
                else:
                    if cols:
                        self._apply(trial, cols, rot, rate * h * cs)
                    before = trial.copy()
                    ok, err, errs, Jall, src = self._correct(b, trial, st, nu)
                    moved = self._dist(before, trial, cols) if ok else 0.0
                J = Jall[:, :nu]
                Jsc = J * st.rcs
                if ok and moved <= 0.5 * rmax * h + JUMP_SLACK:
                    if frame is None or _agrees(frame, Jsc, part_frames):
                        break
                    if dt * max(held_rate, 1e-12) < 1e-7:
                        crossed = self._crossed = True  # the path passes a singular point: flag it
                        break
                dt *= 0.5
                if dt * max(held_rate, 1e-12) < 1e-9:
                    if self._solve_overheld(b, q0, held_b, source):
                        q[:] = q0
                        return 0.0, False
                    self._fail(b, q, held_b, source, err, errs, dict(zip(hlist, h0)))
            q[:] = trial
            if t1 < 1.0:
                self._stop_at_limit(q, cols)
            pred = rmax * (t1 - t)
            t = t1
            J_here = Jall
            src_here = src
            svd_here = None
            frame = None
            # step control: grow while the corrector stays small against the prediction
            if dt < dt_first:  # it had to be halved: keep to what worked (no restart at full length)
                limit = max(pred, 1e-12)
                continue
            limit = max(pred, MAX_STEP) if dt < remaining else limit
            if moved < 0.01 * pred:
                limit = min(2 * limit, MAX_LINEAR_MOTION)
            elif moved < 0.1 * pred:
                limit = min(1.5 * limit, MAX_MOTION)
        if cols and J is not None and J.size:
            svd_here = _state_info(Jsc)
        if J_here is not None:
            if len(self._lastJ) >= JACOBIAN_MEMORY * len(self.blocks):  # the most recent closed states
                self._lastJ.pop(next(iter(self._lastJ)))
            # key: block and the closed state's bytes; value: its column layout, Jacobian, how
            # its scaled solved part reads (_state_info: tangent and orientation next time) and
            # its Jacobian sources (kinematics.bias_one: the second-order term next time)
            self._lastJ[(b.index, q[self._block_coordinates(b)].tobytes())] = (allcols, J_here, svd_here, src_here)
        return err, crossed or self._singular(b, J, cols, rs, cs, svd_here)

    def _solve_overheld(self, b, q, held_b, source):
        """Held values that over-determine a block (e.g. crank and rocker of a four-bar).

        Moving all of them linearly from home passes through contradictory sets, so the
        continuation fails even where the final values agree.  Continue on an
        independent subset of the held coordinates instead (greedy by rank of the
        Jacobian), then hold them all and close.  Updates ``q`` and returns True on
        success.
        """
        hlist = list(held_b)
        if len(hlist) < 2:
            return False
        cols, rot = self._layout(b, set())
        J = self._eval(b, q, cols, rot)[2]
        rs = self._row_scale(len(b.loops))
        Js = J * rs[:, None] * self._col_scale(cols)[None, :]
        index = {c[1]: k for k, c in enumerate(cols) if c[0] == "m"}
        tol = 1e-8 * max(np.abs(Js).max(), 1e-300)
        full = np.linalg.matrix_rank(Js, tol=tol)
        free = list(range(len(cols)))
        subset = {}
        for g in hlist:  # hold g only if the loops stay solvable without it
            if g not in index:
                continue
            rest = [k for k in free if k != index[g]]
            if np.linalg.matrix_rank(Js[:, rest], tol=tol) == full:
                free = rest
                subset[g] = held_b[g]
        if len(subset) == len(hlist):
            return False
        trial = q.copy()
        try:
            self._solve_block(b, trial, subset, source)
        except AssemblyError:
            return False
        for g in hlist:
            trial[g] = held_b[g]
        self.m.coupling_table.derive(trial, hlist)
        cols, rot = self._layout(b, set(held_b))
        ok, _, _, _ = self._newton(b, trial, cols, rot)
        if ok:
            q[:] = trial
        return ok

    def _dist(self, a, b, cols):
        d = 0.0
        for c in cols:
            if c[0] == "m":
                d = max(d, abs(a[c[1]] - b[c[1]]) * self.cscale[c[1]])
        for jn in {c[1] for c in cols if c[0] == "s"}:
            sl = self.m.slices[jn]
            prims = self._unit_screws(jn)
            rel = kinematics.joint_rotation_one(prims, a[sl]).T @ kinematics.joint_rotation_one(prims, b[sl])
            d = max(d, float(np.linalg.norm(spatial.log3(rel))))
        return d

    def _unit_screws(self, jn):
        """The joint's primitives as :class:`spatial.UnitScrew` (kept per joint: structure)."""
        prims = self._rot_twists.get(("prims", jn))
        if prims is None:
            j = self.m.joints[jn]
            prims = self._rot_twists[("prims", jn)] = [spatial.UnitScrew(pr.screw, h)
                                                       for pr, h in zip(j.primitives, j.home)]
        return prims

    def _fail(self, b, q, held_b, source, err, errs, h0):
        m = self.m
        ct = m.coupling_table
        self.last_closed = q.copy()  # the farthest closed state the continuation reached
        worst = int(np.argmax(errs)) if len(errs) else 0
        loop = b.loops[worst].name
        moving = [g for g in held_b if abs(held_b[g] - h0[g]) > 0]
        why = Reason("unreachable", loop=loop, error=float(err))
        if moving:
            g = max(moving, key=lambda g: abs(held_b[g] - h0[g]) * self.cscale[g])
            i = source.get(g, g)
            u = m.unit_scale(i)
            reached = float(ct.member_rates(i, q[g])[0]) / u
            why = Reason("unreachable", joint=m.coordinates[i], loop=loop, error=float(err),
                         value=float(ct.member_rates(i, held_b[g])[0]) / u, bounds=(reached, reached),
                         unit=m.unit_name(i))
        raise AssemblyError(reason=why)

    def _too_far(self, g, held_b, h0, source):
        """The failure of a held value more than ``MAX_SPAN`` from the start (master ``g``):
        the value asked and those that can be followed from the start, in the held
        coordinate's file units."""
        m = self.m
        ct = m.coupling_table
        i = source.get(g, g)
        u = m.unit_scale(i)
        reach = MAX_SPAN / self.cscale[g]
        ends = sorted(float(v) / u for v in ct.member_rates(i, np.array([h0[g] - reach, h0[g] + reach]))[0])
        asked = float(ct.member_rates(i, held_b[g])[0]) / u
        return AssemblyError(reason=Reason("span", joint=m.coordinates[i], value=asked, bounds=tuple(ends),
                                           unit=m.unit_name(i)))

    def _singular(self, b, J, cols, rs, cs, info=None):
        """Near a dead point: the generic-rank singular value of the scaled J_u is tiny
        (``info``: :func:`_state_info` of the scaled J_u, when already computed; where it
        proves full rank with ``s_min / s_max >= SINGULAR_RATIO`` there is no dead point)."""
        if not cols or J is None or not J.size:
            return False
        if info is not None and info[0] == "full":
            key = ("singular", b.index, tuple(cols))
            self._generic_rank[key] = max(self._generic_rank.get(key, 0), min(info[1].shape))
            return False
        s = np.linalg.svd(J * rs[:, None] * cs[None, :], compute_uv=False) if info is None else info[1][1]
        if s.size == 0 or s[0] == 0:
            return False
        rank = int((s > 1e-9 * s[0]).sum())
        key = ("singular", b.index, tuple(cols))
        generic = max(self._generic_rank.get(key, 0), rank)
        self._generic_rank[key] = generic
        return bool(s[generic - 1] < SINGULAR_RATIO * s[0]) if generic > 0 else False

    def tangent(self, q, held, per):
        """Rates dq/d(per) of every coordinate at state ``q`` (internal units).

        ``held`` are coordinate indices kept fixed, ``per`` the index of the coordinate
        that moves.  Found from the constraint Jacobian (least-norm solution of
        J_u du = -J_per), not by finite differences.  Coordinates outside the moving
        coordinate's loop block have rate 0, except coupled ones.
        """
        ct = self.m.coupling_table
        gper = int(ct.master[per])
        held_m = {int(ct.master[i]) for i in held} | {gper}
        if per in ct.law:
            raise AssemblyError(f"{self.m.coordinates[per]!r} follows a motion law; rates are taken per its "
                                f"leader {self.m.coordinates[gper]!r}", joint=self.m.coordinates[per])
        dq = np.zeros(self.n)
        dq[gper] = 1.0 / ct.alpha[per]
        bi = self.block_of_master.get(gper)
        if bi is not None:
            b = self.blocks[bi]
            rot = set()
            # the unknown columns and the moving one, kept per held set (one evaluation, and
            # the same column list each time, so the evaluation plan is reused)
            key = (bi, frozenset(held_m), gper)
            hit = self._tangent_cols.get(key)
            if hit is None:
                cols, _ = self._layout(b, held_m)
                cols = [c for c in cols if c[0] == "m"] + [
                    ("m", i) for jn in b.joints if self.m.joints[jn].type == "spherical"
                    for i in range(self.m.slices[jn].start, self.m.slices[jn].stop)
                    if i not in held_m and ("m", i) not in cols]
                hit = _remember(self._tangent_cols, key, (cols, cols + [("m", gper)]))
            cols, allcols = hit
            if cols:
                rs = self._row_scale(len(b.loops))
                cs = self._col_scale(cols)
                _, _, J = self._eval(b, q, allcols, rot)
                ju, jh = J[:, :-1], J[:, -1:]
                du = np.linalg.lstsq(ju * rs[:, None] * cs[None, :], -(jh[:, 0] * dq[gper]) * rs,
                                     rcond=1e-10)[0] * cs
                for c, d in zip(cols, du):
                    dq[c[1]] = d
        for g in list(np.flatnonzero(dq)):
            for i in ct.members[int(g)]:
                if i != g:
                    dq[i] = ct.member_slope(i, q[g]) * dq[g]
        return dq

    def _limits(self):
        """The coordinates that have limits, as ``(index, lo, hi, slack, name)`` in internal
        units; ``slack`` is the scale-free closure tolerance (a radian or a fraction of the
        size).  Built once per solver; both limit tests below read it."""
        table = self._limit_table
        if table is None:
            m = self.m
            table = []
            for i, c in enumerate(m.coordinates):
                j = m.joints[m.owner[c]]
                lim = j.limits[i - m.slices[j.name].start]
                if lim is not None:
                    table.append((i, lim[0], lim[1], TOLERANCE / self.qerr[i], c))
            self._limit_table = table
        return table

    def _limit_error(self, i, value, c, lo, hi, on_the_way):
        m = self.m
        u = m.unit_scale(i)
        return LimitError(reason=Reason("limit", joint=c, value=float(value / u), bounds=(lo / u, hi / u),
                                        unit=m.unit_name(i), held=False, on_path=on_the_way))

    def _stop_at_limit(self, q, cols):
        """Stop a continuation whose path has carried a solved coordinate of this block past
        its limit: a limit is a hard stop, so a target beyond it on this path cannot be
        reached without passing through it.  Failing here, at the limit, instead of at the
        end keeps an unreachable request as cheap as the stretch up to the stop (a lift
        table's screw driven past its end no longer walks tens of thousands of degrees)."""
        table = self._limits()
        if not table:
            return
        ct = self.m.coupling_table
        groups = {c[1] for c in cols if c[0] == "m"}
        for i, lo, hi, slack, c in table:
            if int(ct.master[i]) in groups and not lo - slack <= q[i] <= hi + slack:
                self.last_closed = q.copy()
                raise self._limit_error(i, lo if q[i] < lo else hi, c, lo, hi, on_the_way=True)

    def _check_passive_limits(self, q, held_groups):
        ct = self.m.coupling_table
        for i, lo, hi, slack, c in self._limits():
            if int(ct.master[i]) not in held_groups and not lo - slack <= q[i] <= hi + slack:
                raise self._limit_error(i, q[i], c, lo, hi, on_the_way=False)

    # -- mobility ----------------------------------------------------------------------
    def full_jacobian(self, q):
        """Constraint Jacobian over every coordinate (rows: 6 per loop, then couplings).

        Dimensionless (rows and columns scaled); free spherical joints use rotation
        increments, which span the same three freedoms without a gimbal lock.
        """
        m = self.m
        ct = m.coupling_table
        rows = []
        for b in self.blocks:
            cols, rot = self._layout(b, set())
            # expand masters to every member coordinate so couplings appear as rows
            full = []
            for c in cols:
                if c[0] == "m":
                    full.extend(("c", i) for i in ct.members[c[1]])
                else:
                    full.append(c)
            nl = len(b.loops)
            rs = self._row_scale(nl)
            _, _, J = self._eval_members(b, q, full, rot)
            block = np.zeros((6 * nl, self.n))
            for ci, c in enumerate(full):
                idx = c[1] if c[0] == "c" else m.slices[c[1]].start + c[2]
                block[:, idx] = J[:, ci] / (self.cscale[idx] if c[0] == "c" else 1.0)
            rows.append(block * rs[:, None])
        for row in ct.rows(q):
            row = row / self.cscale
            row /= np.abs(row).max()
            rows.append(row[None, :])
        return np.vstack(rows) if rows else np.zeros((0, self.n))

    def _eval_members(self, b, q, full, rot):
        # like _eval, but with one column per coordinate (no coupling elimination)
        cols = [("m", c[1]) if c[0] == "c" else c for c in full]
        return self._eval(b, q, cols, rot, coupled=False)

    def mobility(self, q):
        """Mobility counts at state ``q``.

        Returns a dict: ``kutzbach`` (Grubler-Kutzbach count, planar form when the
        mechanism is planar, else spatial; each coupling removes one freedom),
        ``form``, ``numeric`` (coordinates minus the rank of the constraint Jacobian),
        ``redundant`` (constraint equations of the form minus that rank), ``spatial``.

        The count: M = 6 (n - 1) - sum(6 - f_i) (spatial), M = 3 (n - 1) - sum(3 - f_i)
        (planar), n links including ground, f_i the freedoms of joint i (Kutzbach 1929;
        any mechanism text, e.g. Uicker, Pennock & Shigley, *Theory of Machines and
        Mechanisms*, sec. 1.7).
        """
        m = self.m
        nlinks = len(m.links)
        fs = [len(j.kinds) for j in m.joints.values()]
        spatial_k = 6 * (nlinks - 1) - sum(6 - f for f in fs) - len(m.couplings)
        planar = self._is_planar()
        form = "planar" if planar else "spatial"
        if planar:
            k = 3 * (nlinks - 1) - sum(3 - f for f in fs) - len(m.couplings)
        else:
            k = spatial_k
        J = self.full_jacobian(q)
        if J.size:
            s = np.linalg.svd(J, compute_uv=False)
            rank = int((s > 1e-8 * max(s[0], 1e-300)).sum()) if s.size else 0
        else:
            rank = 0
        per_loop = 3 if planar else 6
        equations = per_loop * len(m.loops) + len(m.couplings)
        numeric = self.n - rank
        return {"kutzbach": int(k), "form": form, "numeric": int(numeric),
                "redundant": int(equations - rank), "spatial": int(spatial_k)}

    def _is_planar(self):
        m = self.m
        js = [j for j in m.joints.values() if j.type != "fixed"]
        if not js or any(j.type not in ("revolute", "prismatic", "planar") for j in js):
            return False
        normals = [j.axis for j in js if j.type in ("revolute", "planar")]
        slides = [j.axis for j in js if j.type == "prismatic"]
        if normals:
            n = normals[0]
        else:
            if len(slides) < 2:
                return True
            sv = np.linalg.svd(np.array(slides), compute_uv=False)
            return bool(sv[2] < 1e-9 * sv[0]) if len(slides) >= 3 else True
        par = all(np.linalg.norm(np.cross(n, a)) < 1e-9 for a in normals)
        perp = all(abs(np.dot(n, a)) < 1e-9 for a in slides)
        return par and perp
