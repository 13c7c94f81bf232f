"""The kinematic evaluator: loop residuals, constraint Jacobians, J-dot q-dot, point Jacobians.

:class:`Evaluator` evaluates one solver block's loop equations over a stack of states
``Q`` (B, n): residuals at the cut points, the Jacobian of any set of columns (coupled
groups with their slopes, free spherical joints by rotation increments), steps applied
back to the states; :func:`tangent` gives dq/dheld from it.

For states ``Q`` (B, n) of a mechanism, :func:`loop_bias` gives the acceleration term
``J_dot q_dot`` of every loop of a loop group (exact, from Lie brackets of the joint
twists, not finite differences), and :func:`point_motion` a point's position, Jacobian
and acceleration term.  Stacked over states; B = 1 for a single pose.  The residual
rows and Jacobian columns are those of the loop equations of :mod:`jointwise.solver`
(Lynch & Park, *Modern Robotics*, 2017, sec. 5.1 and 7.1; Murray, Li & Sastry, 1994,
sec. 3.2): a loop walked as steps ``(joint, sign)`` closes when ``F = T_1 ... T_n = I``;
its Jacobian columns are the joint twists carried to the root frame by adjoints.

A coupling ``follower = f(leader)`` (linear or a motion law) enters the acceleration
equation as ``J q_ddot + bias = 0`` with ``q_ddot_follower = f' q_ddot_leader + f''
q_dot_leader^2``: the ``f''`` term joins the right-hand side beside :func:`loop_bias`.
"""
from __future__ import annotations

import math
import threading
import weakref

import numpy as np

from . import spatial
from .linalg import least_norm
from .units import CHUNK

__all__ = ["Evaluator", "tangent", "loop_bias", "loop_columns", "walk_terms", "at_site",
           "point_motion", "axis_motion", "link_motion", "joint_motion"]


def loop_bias(mech, block, Q, Qd):
    """The acceleration term ``J_dot q_dot`` of every loop at its cut point, (B, 6 nl).

    ``Qd`` (B, n) are coordinate rates (internal units per unit time).  The loop product
    is a product of exponentials of constant home screws; the column of factor ``f`` is
    ``J_f = Ad(factors left of f) Y_f`` and ``dJ_f/dq_g = ad(J_g) J_f`` for ``g`` left of
    ``f`` (0 otherwise), so ``J_dot q_dot = sum_f [V_<f, J_f qd_f]`` with ``V_<f`` the
    twist of the factors left of ``f`` (Lynch & Park, *Modern Robotics*, 2017, sec. 5.1.1
    and exercise 8.x on the derivative of the space Jacobian; Murray, Li & Sastry 1994,
    sec. 3.2).  Exact, no finite differences.  A reversed step ``E^-1`` contributes its
    primitives in reverse order.  On the constraint manifold (``J q_dot = 0``) the
    acceleration constraint at the cut point is ``J q_ddot + bias = 0``.

    Couplings: ``Qd`` holds every coordinate's rate; a coupling ``follower = f(leader)``
    adds ``f''(leader) leader_dot^2`` to the follower's acceleration, which a caller puts
    on the right-hand side as ``J[:, follower] f'' leader_dot^2`` (zero for a linear
    coupling, ``f'' = 0``).
    """
    Qd = np.asarray(Qd, dtype=float)
    return np.concatenate([at_site(walk_terms(cols, Qd)[1], site)
                           for cols, site in loop_columns(mech, block, Q)], axis=1)


def loop_columns(mech, block, Q):
    """The spatial columns of every loop of ``block`` in product order, and its cut point.

    Returns one ``(cols, site)`` per loop: ``cols`` a list of ``(coordinate index, (B, 6)
    column J_f)`` in the order of the loop's product (a coordinate appears once per time
    its joint is walked), ``site`` (B, 3) the cut joint's point where the loop's residual
    rows are taken (:func:`at_site`)."""
    m = mech
    Q = np.asarray(Q, dtype=float)
    B = Q.shape[0]
    if B > SMALL_STACK:
        return walk_columns(m.solver, _walk_plan(m.solver, block), Q)
    joints = {jn for lp in block.loops for jn, _ in lp.steps}
    data = {jn: joint_motion(m, jn, Q) for jn in joints}
    out = []
    for loop in block.loops:
        R = np.broadcast_to(np.eye(3), (B, 3, 3))
        p = np.zeros((B, 3))
        site = None
        cols = []
        for jn, sign in loop.steps:
            T, X = data[jn]
            if jn == loop.name:
                site = (R @ m.joints[loop.name].point) + p
            R, p, tw, order = _step(R, p, T, X, sign)
            if tw is not None:
                start = m.slices[jn].start
                cols.extend((start + k, tw[:, k]) for k in order)
        out.append((cols, site))
    return out


_WALK_PLANS = weakref.WeakKeyDictionary()  # solver -> {block index: loop plan without columns}


def _walk_plan(s, block):
    """The loop plan :func:`walk_columns` reads for ``block`` (no columns, no couplings),
    kept per solver and block (at most one per block)."""
    plans = _WALK_PLANS.get(s)
    if plans is None:
        plans = _WALK_PLANS[s] = {}
    plan = plans.get(block.index)
    if plan is None:
        plan = plans[block.index] = loop_plan(s, block, [], set(), coupled=False)
    return plan


def walk_terms(cols, Qd, Qdd=None):
    """Running sums over a walk's columns ``c_f`` (product order) at rates ``Qd`` (B, n).

    Returns ``(V, bias)`` and, with ``Qdd`` (B, n), ``(V, bias, jerk)``:

    - ``V = sum_f c_f qd_f``, the twist of the product;
    - ``bias = sum_f [V_<f, c_f qd_f]``, the part of the twist's rate that does not depend
      on ``q_ddot`` (``J_dot q_dot``; ``V_dot = sum c_f qdd_f + bias``), from
      ``dc_f/dt = [V_<f, c_f]`` with ``V_<f`` the twist of the factors left of ``f``
      (Lynch & Park, *Modern Robotics*, 2017, sec. 5.1.1; Murray, Li & Sastry 1994,
      sec. 3.2);
    - ``jerk``, the part of the twist's second rate that does not depend on the third
      derivatives (``V_ddot = sum c_f qddd_f + jerk``): differentiating ``V_dot`` once more
      with the same rule, ``jerk = sum_f (2 [V_<f, c_f qdd_f] + [A_<f, c_f qd_f] +
      [V_<f, [V_<f, c_f qd_f]])``, ``A_<f = sum_{g<f} (c_g qdd_g + [V_<g, c_g qd_g])`` the
      rate of ``V_<f``.  On a closed loop ``V = V_dot = V_ddot = 0``, so
      ``J q_dddot = -jerk`` gives third derivatives exactly.
    """
    B = Qd.shape[0]
    if Qdd is None:  # component-first (rows over the stack): the same sums, fewer strided steps
        V = np.zeros((6, B))
        bias = np.zeros((6, B))
        for i, col in cols:
            vk = col.T * Qd[:, i]
            w1, v1, w2, v2 = V[:3], V[3:], vk[:3], vk[3:]
            bias[:3] += _cross_rows(w1, w2)
            bias[3:] += _cross_rows(w1, v2) + _cross_rows(v1, w2)
            V = V + vk
        return V.T, bias.T
    V = np.zeros((B, 6))
    bias = np.zeros((B, 6))
    A = np.zeros((B, 6))
    jerk = np.zeros((B, 6))
    for i, col in cols:
        vk = col * Qd[:, i, None]
        ak = col * Qdd[:, i, None]
        bv = spatial.ad(V, vk)
        jerk += 2.0 * spatial.ad(V, ak) + spatial.ad(A, vk) + spatial.ad(V, bv)
        A = A + ak + bv
        bias += bv
        V = V + vk
    return V, bias, jerk


def _cross_rows(a, b):
    """Cross products of 3-vectors held as rows (3, B)."""
    return np.stack([a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]])


def at_site(v, site):
    """Twists or columns (B, 6) in the solver's row form: moved to the cut point ``site``
    (the angular part kept, the linear part ``v - site x w``)."""
    return np.concatenate([v[:, :3], v[:, 3:] - spatial.cross(site, v[:, :3])], axis=1)


def _step(R, p, T, X, sign, twists=True):
    """Advance the running product (R, p) by one loop or tree step.

    ``T``: the joint's (R, p) displacement, ``X``: its primitive twists in the frame before
    it; ``sign`` -1 walks the joint backwards (``T^-1``).  Returns the new (R, p), the
    step's columns ``tw`` (B, k, 6) (None without twists) and the order of its factors in
    the product (a reversed step's primitives come last-first)."""
    k = X.shape[-2]
    if sign > 0:
        tw = spatial.adjoint_apply(R, p, X) if twists and k else None
        R, p = spatial.compose_rp((R, p), T)
        return R, p, tw, range(k)
    R, p = spatial.compose_rp((R, p), spatial.inverse_rp(T))
    tw = -spatial.adjoint_apply(R, p, X) if twists and k else None
    return R, p, tw, reversed(range(k))


def _path_from_ground(model, link):
    """Steps (joint, sign) from ground to ``link`` along the spanning tree."""
    return [(jn, sign) for _, jn, sign in reversed(model._path_up(link))]


def link_motion(model, Q, Qd, link, *, rot=(), links=None):
    """Displacement, twist columns, twist and acceleration term of ``link``.

    Walks the spanning tree from ground to ``link`` over states ``Q`` with rates ``Qd``
    (B, n).  Returns ``((R, p), cols (B, 6, n), V (B, 6), bias (B, 6))``: the link's
    displacement from home, its spatial twist per coordinate rate (``V = cols q_dot``),
    the twist and its rate's part that does not depend on ``q_ddot`` (``V_dot = cols
    q_ddot + bias``, :func:`walk_terms`); ``Qd`` None gives the columns only (V and bias
    None).  A joint on the path walked forwards adds ``Ad(D_parent) X_k``, one walked
    backwards ``-Ad(D_parent) X_k``, ``D_parent`` the displacement of the joint's parent
    link (Lynch & Park 2017, sec. 5.1.1).  ``links``: the link displacements at ``Q``
    ({name: (B, 4, 4) or (4, 4)}) when the caller has them: the frames are read from them
    instead of composed along the walk.  Joints named in ``rot`` (free spherical joints
    moved by rotation increments, as in :mod:`jointwise.solver`) give the twists of those
    increments (``Joint.rotation_twists``) in their three columns."""
    Q = np.asarray(Q, dtype=float)
    B, n = Q.shape
    if links is not None:
        (R, p), cols, walk = _framed_columns(model, Q, link, rot, links, Qd is not None)
    else:
        R = np.broadcast_to(np.eye(3), (B, 3, 3))
        p = np.zeros((B, 3))
        cols = np.zeros((B, 6, n))
        walk = []
        for jn, sign in _path_from_ground(model, link):
            T, X = joint_motion(model, jn, Q)
            if jn in rot:
                X = model.joints[jn].rotation_twists()
            R, p, tw, order = _step(R, p, T, X, sign)
            if tw is None:
                continue
            start = model.slices[jn].start
            for k in order:
                cols[:, :, start + k] += tw[:, k]
                walk.append((start + k, tw[:, k]))
    if Qd is None:
        return (R, p), cols, None, None
    V, bias = walk_terms(walk, np.asarray(Qd, dtype=float))
    return (R, p), cols, V, bias


_FRAMED = weakref.WeakKeyDictionary()  # model -> {(link, rot joints on its path): plan}


def _framed_plan(model, link, rot):
    """What :func:`_framed_columns` reads for ``link``: per primitive of its tree path (in
    product order) the joint's parent link, its screw (None for a compound joint's, which
    depends on the state), the walking sign and the coordinate."""
    path = _path_from_ground(model, link)
    key = (link, frozenset(jn for jn, _ in path if jn in rot))
    plans = _FRAMED.get(model)
    if plans is None:
        plans = _FRAMED[model] = {}
    plan = plans.get(key)
    if plan is None:
        parents, xs, signs, idx, compound = [], [], [], [], []
        for jn, sign in path:
            j = model.joints[jn]
            k = len(j.primitives)
            if not k:
                continue
            fixed = j.rotation_twists() if jn in key[1] else (j.screws if k == 1 else None)
            if fixed is None:
                compound.append((jn, len(idx), k, sign))
            start = model.slices[jn].start
            for i in (range(k) if sign > 0 else reversed(range(k))):
                parents.append(j.parent)
                xs.append(np.zeros(6) if fixed is None else fixed[i])
                signs.append(float(sign))
                idx.append(start + i)
        plan = plans[key] = (parents, np.array(xs).reshape(-1, 6), np.array(signs)[None, :, None],
                             np.array(idx, dtype=int), compound)
    return plan


def _framed_columns(model, Q, link, rot, links, want_walk=True):
    """:func:`link_motion`'s columns with the frames read from link displacements: every
    primitive of the path carried by its joint's parent frame in one stacked adjoint."""
    B, n = Q.shape
    parents, X0, signs, idx, compound = _framed_plan(model, link, rot)
    D = np.asarray(links[link]).reshape(-1, 4, 4)
    cols = np.zeros((B, 6, n))
    if not len(idx):
        return (D[:, :3, :3], D[:, :3, 3]), cols, []
    X = np.broadcast_to(X0, (B,) + X0.shape)
    if compound:
        X = X.copy()
        for jn, at, k, sign in compound:
            Xj = np.broadcast_to(joint_motion(model, jn, Q)[1], (B, k, 6))
            X[:, at:at + k] = Xj if sign > 0 else Xj[:, ::-1]
    F = [links[name] for name in parents]
    F = np.stack(F)[None] if np.ndim(F[0]) == 2 else np.stack(F, axis=1)  # (B, M, 4, 4)
    Rf = F[..., :3, :3]
    w = (Rf @ X[..., :3, None])[..., 0]
    v = (Rf @ X[..., 3:, None])[..., 0] + spatial.cross(F[..., :3, 3], w)
    tw = np.concatenate([w, v], axis=-1) * signs  # Ad(F) X (ref. eq. 2.58)
    cols[:, :, idx] = np.swapaxes(tw, 1, 2)
    walk = [(i, tw[:, m]) for m, i in enumerate(idx)] if want_walk else []
    return (D[:, :3, :3], D[:, :3, 3]), cols, walk


def _cross_cols(w_cols, x):
    """``w_k x x`` for stacked columns ``w_cols`` (B, 3, n) and vectors ``x`` (B, 3): (B, 3, n)."""
    xc = np.broadcast_to(x[:, None, :], (x.shape[0], w_cols.shape[2], 3))
    return spatial.cross(np.swapaxes(w_cols, 1, 2), xc).swapaxes(1, 2)


def point_motion(model, Q, Qd, link, at):
    """Position, Jacobian and acceleration term of a point fixed to ``link``.

    ``at``: the point at home (world); ``Q``, ``Qd`` (B, n): states and coordinate rates.
    Returns ``(x (B, 3), Jp (B, 3, n), a0 (B, 3))``: the point's position, its velocity per
    coordinate rate (``x_dot = Jp q_dot``) and the part of its acceleration that does not
    depend on ``q_ddot`` (``x_ddot = Jp q_ddot + a0``).  With the link's spatial twist
    ``V = (w, v) = sum J_f qd_f`` (:func:`link_motion`), ``x_dot = w x x + v`` and
    ``x_ddot = Vdot_w x x + Vdot_v + w x x_dot`` (Murray, Li & Sastry 1994, sec. 2.4;
    Lynch & Park 2017, sec. 8.2)."""
    (R, p), cols, V, acc = link_motion(model, Q, Qd, link)
    x = (R @ np.asarray(at, dtype=float)) + p
    Jp = _cross_cols(cols[:, :3], x) + cols[:, 3:]
    w = V[:, :3]
    xdot = spatial.cross(w, x) + V[:, 3:]
    a0 = spatial.cross(acc[:, :3], x) + acc[:, 3:] + spatial.cross(w, xdot)
    return x, Jp, a0


def axis_motion(model, Q, Qd, link, axis):
    """Direction, Jacobian and acceleration term of a unit axis fixed to ``link``.

    ``axis``: the direction at home (world, any length).  Returns ``(u (B, 3), Ju (B, 3, n),
    a0 (B, 3))`` with ``u_dot = w x u = Ju q_dot`` and ``u_ddot = w_dot x u + w x u_dot =
    Ju q_ddot + a0`` (a free vector turns with the link's angular velocity ``w``; Murray,
    Li & Sastry 1994, sec. 2.2)."""
    (R, _), cols, V, acc = link_motion(model, Q, Qd, link)
    a = np.asarray(axis, dtype=float)
    u = R @ (a / np.linalg.norm(a))
    Ju = _cross_cols(cols[:, :3], u)
    w = V[:, :3]
    udot = spatial.cross(w, u)
    a0 = spatial.cross(acc[:, :3], u) + spatial.cross(w, udot)
    return u, Ju, a0


def joint_motion(model, jn, Q, prims=None):
    """(R, p) stacks of joint ``jn``'s displacement and its primitive twists in the frame
    before the joint, ``X[k] = Ad(prefix_k) S_k`` ((k, 6), or (B, k, 6) for compound joints).
    ``prims``: the joint's :class:`spatial.UnitScrew` list, if kept by the caller."""
    j = model.joints[jn]
    sl = model.slices[jn]
    B = Q.shape[0]
    if not j.primitives:
        return (np.broadcast_to(np.eye(3), (B, 3, 3)), np.zeros((B, 3))), np.zeros((0, 6))
    prs = prims if prims is not None else [spatial.UnitScrew(pr.screw, h) for pr, h in zip(j.primitives, j.home)]
    screws = j.screws
    T = prs[0].exp(Q[:, sl.start])
    if len(prs) == 1:
        return T, screws
    cols = [np.broadcast_to(screws[0], (B, 6))]
    for k in range(1, len(prs)):
        cols.append(spatial.adjoint_apply(T[0], T[1], screws[k:k + 1])[:, 0])
        T = spatial.compose_rp(T, prs[k].exp(Q[:, sl.start + k]))
    return T, np.stack(cols, axis=1)


# ---------------------------------------------------------------------------------------
# the batched evaluator of one solver block's loop equations
# ---------------------------------------------------------------------------------------

class Evaluator:
    """Loop equations of one solver block, evaluated over stacks of states ``Q`` (B, n)."""

    def __init__(self, mech, block, held_masters):
        s = mech.solver
        ct = mech.coupling_table
        self.m, self.s, self.block = mech, s, block
        self.held = sorted(g for g in block.groups if g in held_masters)
        self.joints = list(block.joints)
        self.prims = {}
        self.rotj = set()
        for jn in self.joints:
            j = mech.joints[jn]
            self.prims[jn] = [spatial.UnitScrew(pr.screw, h) for pr, h in zip(j.primitives, j.home)]
            if j.type == "spherical":
                idx = range(mech.slices[jn].start, mech.slices[jn].stop)
                if all(ct.master[i] == i and len(ct.members[i]) == 1 and i not in held_masters for i in idx):
                    self.rotj.add(jn)
        # unknown columns, Newton mode (free spherical joints by rotation increments)
        self.cols_rot = []
        for g in block.groups:
            if g in held_masters:
                continue
            if mech.owner[mech.coordinates[g]] in self.rotj:
                continue
            self.cols_rot.append(("m", g))
        for jn in self.joints:
            if jn in self.rotj:
                self.cols_rot.extend(("s", jn, k) for k in range(3))
        # unknown columns, coordinate mode (tangents, rates)
        self.cols_coord = [("m", g) for g in block.groups if g not in held_masters]
        self.cols_held = [("m", g) for g in self.held]
        self.nl = len(block.loops)
        self.rs = np.tile(s.rscale, self.nl)
        self.es = np.tile(s.escale, self.nl)
        self.sites = [mech.joints[lp.name].point for lp in block.loops]

    def _cscale(self, cols):
        """Column scale making the Jacobian dimensionless: a length column is multiplied by
        the mechanism size (du = scale * du_dimensionless)."""
        return np.array([1.0 / self.s.cscale[c[1]] if c[0] == "m" else 1.0 for c in cols])

    def _joint(self, jn, Q, rotmode):
        prs = self.prims[jn]
        if rotmode and jn in self.rotj:
            sl = self.m.slices[jn]
            T = prs[0].exp(Q[:, sl.start])
            for k in range(1, len(prs)):
                T = spatial.compose_rp(T, prs[k].exp(Q[:, sl.start + k]))
            return T, self.m.joints[jn].rotation_twists()
        return joint_motion(self.m, jn, Q, prs)

    def eval(self, Q, cols=None, rotmode=True):
        """Residual (B, 6 nl), per-step largest loop error (B,), and J (B, 6 nl, len(cols))."""
        B = Q.shape[0]
        plan = self.s._plan(self.block, cols or [], self.rotj if rotmode else set())
        if B > CHUNK:  # bound the memory of the stacked transforms: chunks written in place
            m = 6 * self.nl
            r, errs = np.empty((B, m)), np.empty(B)
            J = None if cols is None else np.empty((B, m, len(cols)))
            for k in range(0, B, CHUNK):
                sl = slice(k, min(B, k + CHUNK))
                if sl.stop - sl.start > SMALL_STACK:
                    eval_stack(self.s, plan, Q[sl], cols is not None, (r[sl], errs[sl], None if J is None else J[sl]))
                else:
                    part = self.eval(Q[sl], cols, rotmode)
                    r[sl], errs[sl] = part[0], part[1]
                    if J is not None:
                        J[sl] = part[2]
            return r, errs, J
        if B > SMALL_STACK or B == 0:
            return eval_stack(self.s, plan, Q, cols is not None)
        # a few states: one at a time (the stacked form's fixed cost is larger)
        parts = [eval_one(self.s, plan, q, cols is not None) for q in Q]
        r = np.array([p[0] for p in parts]).reshape(B, -1)
        errs = np.array([p[1].max() for p in parts])
        return r, errs, None if cols is None else np.array([p[2] for p in parts]).reshape(B, r.shape[1], len(cols))

    def apply(self, Q, du, cols):
        """Add steps du (B, len(cols)) (internal units) to states Q (B, n), in place."""
        m = self.m
        sph = {}
        masters = []
        for ci, c in enumerate(cols):
            if c[0] == "m":
                Q[:, c[1]] += du[:, ci]
                masters.append(c[1])
            else:
                sph.setdefault(c[1], [None] * 3)[c[2]] = du[:, ci]
        m.coupling_table.derive(Q, masters)
        for jn, parts in sph.items():
            j = m.joints[jn]
            sl = m.slices[jn]
            d = np.stack(parts, axis=-1)
            if Q.shape[0] == 1:  # one state (an anchor's corrector): plain floats
                Rn = (rotation_one(d[0]) @ joint_rotation_one(self.prims[jn], Q[0, sl]))[None]
            else:
                Rn = joint_rotations(self.prims[jn], Q[:, sl], turn=d)
            Q[:, sl] = j.coordinates_from_transform(Rn, near=Q[:, sl])


def joint_rotations(prims, Qj, turn=None):
    """Rotation parts (B, 3, 3) of a joint's displacement at its coordinates ``Qj`` (B, k),
    from its primitives (:class:`spatial.UnitScrew`: ``R = I + sin t [w] + (1 - cos t)
    [w]^2``), composed component-first (entries as rows over the stack).  ``turn`` (B, 3):
    rotation vectors whose rotations ``exp3(turn)`` (Rodrigues, :func:`spatial.exp3`'s
    coefficients and series) are applied on the left."""
    R = None
    for k, pr in enumerate(prims):
        if not pr.rot:
            continue
        t = Qj[:, k] - pr.h
        Rk = np.eye(3)[:, :, None] + np.sin(t) * pr.K[:, :, None] + (1.0 - np.cos(t)) * pr.K2[:, :, None]
        R = Rk if R is None else R[:, 0, None] * Rk[0] + R[:, 1, None] * Rk[1] + R[:, 2, None] * Rk[2]
    if R is None:
        R = np.broadcast_to(np.eye(3)[:, :, None], (3, 3, Qj.shape[0]))
    if turn is not None:
        x, y, z = np.asarray(turn, dtype=float).T
        th2 = x * x + y * y + z * z
        th = np.sqrt(th2)
        small = th < 1e-4
        ts = np.where(small, 1.0, th)
        a = np.where(small, 1 - th2 / 6, np.sin(ts) / ts)
        b = np.where(small, 0.5 - th2 / 24, (1 - np.cos(ts)) / (ts * ts))
        bx, by, bz = b * x, b * y, b * z
        ax, ay, az = a * x, a * y, a * z
        T = np.array([[1 - by * y - bz * z, bx * y - az, bx * z + ay],
                      [bx * y + az, 1 - bx * x - bz * z, by * z - ax],
                      [bx * z - ay, by * z + ax, 1 - bx * x - by * y]])
        R = T[:, 0, None] * R[0] + T[:, 1, None] * R[1] + T[:, 2, None] * R[2]
    return np.moveaxis(R, -1, 0).copy()


def joint_rotation_one(prims, qj):
    """Rotation part (3, 3) of one joint's displacement at its coordinates ``qj`` (k,): the
    single-state form of :func:`joint_rotations` (``R = I + sin t [w] + (1 - cos t) [w]^2``
    per primitive, in order)."""
    R = None
    for pr, t in zip(prims, np.asarray(qj, dtype=float).tolist()):
        if not pr.rot:
            continue
        t -= pr.h
        Rk = _EYE3 + math.sin(t) * pr.K + (1.0 - math.cos(t)) * pr.K2
        R = Rk if R is None else R @ Rk
    return _EYE3.copy() if R is None else R


def rotation_one(w):
    """exp([w]) of one rotation vector (Rodrigues' formula with :func:`spatial.exp3`'s
    coefficients and small-angle series), in plain floats."""
    x, y, z = np.asarray(w, dtype=float).tolist()
    th2 = x * x + y * y + z * z
    th = math.sqrt(th2)
    if th < 1e-4:
        a, b = 1 - th2 / 6, 0.5 - th2 / 24
    else:
        a, b = math.sin(th) / th, (1 - math.cos(th)) / th2
    return np.array([[1 - b * (y * y + z * z), b * x * y - a * z, b * x * z + a * y],
                     [b * x * y + a * z, 1 - b * (x * x + z * z), b * y * z - a * x],
                     [b * x * z - a * y, b * y * z + a * x, 1 - b * (x * x + y * y)]])


def tangent(ev, Q):
    """dq/dheld (B, n_coordcols, n_held) in coordinate mode and the coord columns."""
    if Q.shape[0] > CHUNK:
        return np.concatenate([tangent(ev, Q[k:k + CHUNK]) for k in range(0, Q.shape[0], CHUNK)])
    cols = ev.cols_coord + ev.cols_held
    _, _, J = ev.eval(Q, cols, rotmode=False)
    nu = len(ev.cols_coord)
    cs = ev._cscale(cols)
    Js = J * ev.rs[None, :, None] * cs[None, None, :]
    Ju, Jh = Js[:, :, :nu], Js[:, :, nu:]
    if nu == 0:
        return np.zeros((Q.shape[0], 0, len(ev.held)))
    x, _ = least_norm(Ju, -Jh)
    return x * cs[None, :nu, None] / cs[None, None, nu:]


# ---------------------------------------------------------------------------------------
# loop plans: the loop equations of one block for one column layout, one state or a stack
# ---------------------------------------------------------------------------------------

_EYE4 = np.eye(4)
_EYE3 = np.eye(3)
#: Stacks of at most this many states are evaluated one state at a time (:func:`eval_one`).
SMALL_STACK = 8


def loop_plan(s, block, cols, rot, coupled=True):
    """Index arrays of ``block``'s loop equations for unknown columns ``cols`` (a dict).

    Every loop is written as one flat product of signed primitive exponentials (a reversed
    step ``E^-1`` is ``e_n(-t_n) ... e_1(-t_1)``), so that one stacked exponential gives
    every factor; loops are padded with the identity to a common length and their prefix
    products are formed side by side.  A Jacobian column is ``sign Ad(prefix) S`` of each
    factor (``S`` is invariant under its own exponential, so the prefix before or after
    the factor gives the same column), or for a free spherical joint in ``rot`` its three
    rotation twists carried by the prefix before (forward) or after (reversed) the joint;
    ``W`` maps these sources to the columns (coupling ratios; motion-law slopes are added
    at each evaluation).  ``s``: the solver (couplings: its model's coupling table).  With
    ``coupled=False`` couplings are not eliminated: column ``("m", i)`` is coordinate i."""
    m = s.m
    ct = m.coupling_table
    colidx = {c: k for k, c in enumerate(cols)}
    screws, pidx, phome, psign = [], [], [], []
    loops_f = []           # per loop: factor indices (into the stacked exponentials)
    src_loop, src_pos, src_tw, src_sign, src_w = [], [], [], [], []  # Jacobian sources
    varying = []           # (source, column, member, master): motion-law slopes
    cut_pos = []
    for li, loop in enumerate(block.loops):
        fl = []
        for jn, sign in loop.steps:
            j = m.joints[jn]
            sl = m.slices[jn]
            if jn == loop.name:
                cut_pos.append(len(fl))
            start = len(fl)
            order = range(len(j.primitives)) if sign > 0 else range(len(j.primitives) - 1, -1, -1)
            for k in order:
                fl.append(len(pidx))
                screws.append(j.primitives[k].screw)
                pidx.append(sl.start + k)
                phome.append(j.home[k])
                psign.append(float(sign))
                if jn in rot:
                    continue
                i = sl.start + k
                g = int(ct.master[i]) if coupled else i
                weights = {}
                c = colidx.get(("m", g))
                if c is not None:
                    if coupled and i in ct.law:
                        varying.append((len(src_loop), c, i, g))
                    else:
                        weights[c] = ct.alpha[i] if coupled else 1.0
                src_loop.append(li)
                src_pos.append(len(fl) - 1)
                src_tw.append(j.primitives[k].screw)
                src_sign.append(float(sign))
                src_w.append(weights)
            if jn in rot:
                pos = start if sign > 0 else len(fl)
                for k, x in enumerate(j.rotation_twists()):
                    c = colidx.get(("s", jn, k))
                    src_loop.append(li)
                    src_pos.append(pos)
                    src_tw.append(x)
                    src_sign.append(float(sign))
                    src_w.append({} if c is None else {c: 1.0})
        loops_f.append(fl)
    nl = len(block.loops)
    npr = len(pidx)
    kmax = max((len(fl) for fl in loops_f), default=0)
    fidx = np.full((nl, kmax), npr, dtype=int)  # padding: the extra identity factor
    for li, fl in enumerate(loops_f):
        fidx[li, :len(fl)] = fl
    screws.append(np.zeros(6))
    ns = len(src_loop)
    W = np.zeros((ns, len(cols)))
    for k, weights in enumerate(src_w):
        for c, a in weights.items():
            W[k, c] += a
    weights, seen = [], set()  # (source, loop, column, weight, first term of that entry)
    for k, ws in enumerate(src_w):
        for c, a in ws.items():
            if a != 0:
                weights.append((k, src_loop[k], c, a, (src_loop[k], c) not in seen))
                seen.add((src_loop[k], c))
    src_loop = np.array(src_loop, dtype=int)
    src_pos = np.array(src_pos, dtype=int)
    tw = np.array(src_tw, dtype=float).reshape(-1, 6)
    powers = spatial.screw_powers(np.array(screws).reshape(-1, 6))  # (P + 1, 3, 4, 4)
    points = np.array([np.append(m.joints[lp.name].point, 1.0) for lp in block.loops]).reshape(nl, 4)
    return {
        "p12": np.ascontiguousarray(powers[:, :, :3, :].reshape(-1, 3, 12).transpose(0, 2, 1)),
        "pidx": np.array(pidx + [0], dtype=int), "phome": np.array(phome + [0.0]),
        "psign": np.array(psign + [0.0]), "fidx": fidx, "kmax": kmax, "nl": nl,
        "cut": (np.array(cut_pos, dtype=int), np.arange(nl)), "cut_pos": cut_pos,
        "points": points,
        "src_loop": src_loop, "src_pos": src_pos,
        "src_tw": tw,
        "src_sign": np.array(src_sign)[:, None], "W": W, "weights": weights, "varying": varying,
        "scatter": ((6 * src_loop[:, None] + np.arange(6)[None, :]).ravel(), np.repeat(np.arange(ns), 6)),
        "ncols": len(cols),
        "one": _one_state_plan(fidx, pidx, phome, psign, powers, nl, kmax, tw, np.array(src_sign), W,
                               src_loop, src_pos, points),
    }


#: (d, 1) x (w_r, v_r) outer products -> the twist (w, v + d x w) of a Jacobian source:
#: row ``(i, j, part)`` of the flattened (4, 3, 2) outer product feeds column ``part * 3 + j``
#: when ``i`` = 3 (the 1: ``w`` and ``v`` themselves) and ``3 + k`` with the Levi-Civita
#: sign ``e_kij`` otherwise (``(d x w)_k = e_kij d_i w_j``).
_TWIST_OF_OUTER = np.zeros((4, 3, 2, 6))
for _j in range(3):
    _TWIST_OF_OUTER[3, _j, 0, _j] = 1.0
    _TWIST_OF_OUTER[3, _j, 1, 3 + _j] = 1.0
    _TWIST_OF_OUTER[(_j + 1) % 3, (_j + 2) % 3, 0, 3 + _j] = 1.0
    _TWIST_OF_OUTER[(_j + 2) % 3, (_j + 1) % 3, 0, 3 + _j] = -1.0
_TWIST_OF_OUTER = _TWIST_OF_OUTER.reshape(24, 6)

#: x (6) outer y (6) -> the Lie bracket ``[x, y] = (w1 x w2, w1 x v2 + v1 x w2)``
#: (:func:`spatial.ad`) as one contraction: entry ``(a, b)`` feeds ``out + k`` with the sign
#: of the cross product ``(u x z)_k = u_{k+1} z_{k+2} - u_{k+2} z_{k+1}``.
_BRACKET_OF_OUTER = np.zeros((6, 6, 6))
for _k in range(3):
    _i, _j = (_k + 1) % 3, (_k + 2) % 3
    for _a, _b, _out in ((0, 0, 0), (0, 3, 3), (3, 0, 3)):
        _BRACKET_OF_OUTER[_a + _i, _b + _j, _out + _k] += 1.0
        _BRACKET_OF_OUTER[_a + _j, _b + _i, _out + _k] -= 1.0
_BRACKET_OF_OUTER = _BRACKET_OF_OUTER.reshape(36, 6)


def _one_state_plan(fidx, pidx, phome, psign, powers, nl, kmax, tw, sign, W, src_loop, src_pos, points):
    """What :func:`eval_one` reads: the factors in product slots (loop, position), padding
    slots the zero screw; each slot's powers with the identity after them, so that one product
    of the rows ``(t, 1 - cos t, t - sin t, 1)`` with them gives the slot's exponential; per
    Jacobian source ``Y`` with ``P Y = (R w, R v, p)`` for a prefix ``P = (R, p)``; and the
    source-to-column weights with the walking signs folded in."""
    f = fidx.ravel()
    P = powers.shape[0]
    p16 = np.concatenate([powers.reshape(P, 3, 16),
                          np.broadcast_to(_EYE4.reshape(1, 1, 16), (P, 1, 16))], axis=1)[f]
    ns = tw.shape[0]
    Y = np.zeros((ns, 4, 3))
    Y[:, :3, 0] = tw[:, :3]
    Y[:, :3, 1] = tw[:, 3:]
    Y[:, 3, 2] = 1.0
    pidx = np.array(pidx + [0], dtype=int)[f]
    same = src_loop[:, None] == src_loop[None, :]
    return {"pidx": pidx, "phome": np.array(phome + [0.0])[f], "psign": np.array(psign + [0.0])[f],
            "p16": p16, "Y": Y, "sW": sign[:, None] * W, "sign": sign, "points": points.tolist(),
            # one loop whose sources are its factors in order: their prefixes are pre[:ns, 0]
            "in_order": nl == 1 and np.array_equal(src_pos, np.arange(ns)),
            # source a's twist left of source b (same loop, earlier in the product)
            "before": (same & (src_pos[None, :] < src_pos[:, None])).astype(float),
            "loop_sum": (src_loop[None, :] == np.arange(nl)[:, None]).astype(float)}


def bias_one(plan, sources, rates):
    """The acceleration term ``J_dot q_dot`` of every loop at one closed state, (6 nl,) in
    the residual's rows (at the cut points): :func:`loop_bias` from the Jacobian sources of
    :func:`eval_one` (``sources=True``) at that state, without evaluating anything again.

    ``rates``: the rate of every column of the plan (internal units).  Each source moves
    at ``c_k = x_k (sW_k . rates)`` and ``J_dot q_dot = sum_k [V_<k, c_k]``, ``V_<k`` the
    sum of the sources left of ``k`` in its loop's product (Lynch & Park, *Modern
    Robotics*, 2017, sec. 5.1.1; the brackets commute with the move to the cut point,
    ``Ad [x, y] = [Ad x, Ad y]``).  Valid for plans of plain coordinate columns: no
    rotation increments (their rates are not coordinate rates) and no motion laws (their
    ``f''`` term is the caller's, see :func:`loop_bias`)."""
    tw, sW = sources
    one = plan["one"]
    c = tw * (sW @ rates)[:, None]  # (ns, 6)
    left = one["before"] @ c
    if plan["nl"] == 1:  # sum over the sources of left_k outer c_k: one product
        return (left.T @ c).reshape(36) @ _BRACKET_OF_OUTER
    outer = (one["loop_sum"][:, :, None] * left[None]).transpose(0, 2, 1) @ c  # (nl, 6, 6)
    return (outer.reshape(-1, 36) @ _BRACKET_OF_OUTER).ravel()


def loop_incidence(plan, ncols=None):
    """Which loops read which of a plan's first ``ncols`` columns (default all): a bool array
    (loops, columns), from the plan's structure (coupling weights and motion-law slopes), not
    from values, so a slope that is zero at some state (a dwell) still joins its loops."""
    ncols = plan["ncols"] if ncols is None else ncols
    used = np.zeros((plan["nl"], ncols), bool)
    src_loop, W = plan["src_loop"], plan["W"]
    for k in range(len(src_loop)):
        used[src_loop[k]] |= W[k, :ncols] != 0
    for k, c, _i, _g in plan["varying"]:
        if c < ncols:
            used[src_loop[k], c] = True
    return used


def eval_one(s, plan, q, jac=True, sources=False):
    """Residual (6 nl), per-loop errors (nl) and Jacobian (6 nl, ncols) at one state ``q``.

    Residual rows per loop: ``(w, v + w x site)`` of ``log`` of the loop product, at the
    cut joint's point; errors scale-free (radians; positions times ``s.pos_weight``).
    Jacobian column of a source (a factor's screw ``S = (w, v)`` after the prefix ``P = (R,
    p)`` of its loop's product): ``(R w, R v + (p - site) x R w)``, the adjoint ``Ad(P) S``
    moved to the cut point; all sources in one product ``P Y`` and one contraction of the
    outer products ``(p - site, 1) (R w, R v)`` (:data:`_TWIST_OF_OUTER`)."""
    one = plan["one"]
    nl = plan["nl"]
    kmax = plan["kmax"]
    th = (q[one["pidx"]] - one["phome"]) * one["psign"]
    # exp([S] t) = I + t [S] + (1 - cos t) [S]^2 + (t - sin t) [S]^3 (spatial.exp_unit) as one
    # product of the coefficient rows with the stacked powers (the identity among them)
    coef = np.empty((th.shape[0], 1, 4))
    coef[:, 0, 0] = th
    coef[:, 0, 1] = 1.0 - np.cos(th)
    coef[:, 0, 2] = th - np.sin(th)
    coef[:, 0, 3] = 1.0
    ex = (coef @ one["p16"]).reshape(nl, kmax, 4, 4)
    pre = np.empty((kmax + 1, nl, 4, 4))
    pre[0] = _EYE4
    if kmax:
        pre[1] = ex[:, 0]
    for k in range(1, kmax):
        np.matmul(pre[k], ex[:, k], out=pre[k + 1])
    # every loop near closure: plain floats, loop by loop (spatial.log_rows); else stacked
    lws = [spatial.log_rows(t) for t in pre[kmax].tolist()]
    if None not in lws:
        cuts = [pre[plan["cut_pos"][0], 0].tolist()] if nl == 1 else pre[plan["cut"]].tolist()
        r, errs, sites = [], [], []
        pw = s.pos_weight
        for (w0, w1, w2, v0, v1, v2), (c0, c1, c2, _), (x, y, z, _) in zip(lws, cuts, one["points"]):
            s0, s1, s2 = (c0[0] * x + c0[1] * y + c0[2] * z + c0[3], c1[0] * x + c1[1] * y + c1[2] * z + c1[3],
                          c2[0] * x + c2[1] * y + c2[2] * z + c2[3])
            v0, v1, v2 = v0 + w1 * s2 - w2 * s1, v1 + w2 * s0 - w0 * s2, v2 + w0 * s1 - w1 * s0
            r += (w0, w1, w2, v0, v1, v2)
            errs.append(max(abs(w0), abs(w1), abs(w2), max(abs(v0), abs(v1), abs(v2)) * pw))
            sites.append((s0, s1, s2, 0.0))
        r, errs = np.array(r), np.array(errs)
        site4 = np.array(sites[0] if nl == 1 else sites)
    else:
        site = pre[plan["cut"]] @ plan["points"][:, :, None]  # (nl, 4, 1)
        site = site[:, :3, 0]
        w, v = spatial.log_rp(pre[kmax, :, :3, :3], pre[kmax, :, :3, 3])
        v = v + spatial.cross(w, site)
        r = np.concatenate([w, v], axis=1).ravel()
        errs = np.maximum(np.abs(w).max(axis=1), np.abs(v).max(axis=1) * s.pos_weight)  # scale-free
        site4 = np.zeros((nl, 4))
        site4[:, :3] = site
    if not jac:
        return r, errs, None
    ncol = plan["ncols"]
    ns = len(plan["src_loop"])
    if not ncol or not ns:
        return r, errs, np.zeros((6 * nl, ncol))
    P = pre[:ns, 0] if one["in_order"] else pre[plan["src_pos"], plan["src_loop"]]  # (ns, 4, 4)
    A = P @ one["Y"]  # (ns, 4, 3): R w, R v, (p, 1)
    d = A[:, :, 2] - (site4 if nl == 1 else site4[plan["src_loop"]])  # (p - site, 1)
    tw = (d[:, :, None, None] * A[:, None, :3, :2]).reshape(ns, 24) @ _TWIST_OF_OUTER  # (ns, 6)
    sW = one["sW"]
    if plan["varying"]:
        sW = sW.copy()
        for k, c, i, g in plan["varying"]:
            sW[k, c] += one["sign"][k] * s.m.coupling_table.member_slope(i, q[g])
    if nl == 1:
        J = tw.T @ sW
    else:
        big = np.zeros((6 * nl, ns))
        big[plan["scatter"]] = tw.ravel()
        J = big @ sW
    return (r, errs, J, (tw, sW)) if sources else (r, errs, J)


#: eval_stack's work arrays (factor angles, exponentials, running products, source twists)
#: live in one float buffer per thread, kept between calls so that a sweep's thousands of
#: evaluations do not allocate (and fault in) fresh memory each time.  Bound: the largest
#: evaluation of at most ``CHUNK`` states so far; a larger one gets a buffer of its own.
_SCRATCH = threading.local()


def _scratch(size, B):
    """A float buffer of at least ``size`` entries for an evaluation of ``B`` states."""
    if B > CHUNK:
        return np.empty(size)
    buf = getattr(_SCRATCH, "buf", None)
    if buf is None or buf.size < size:
        buf = _SCRATCH.buf = np.empty(size)
    return buf


def _soa_plan(plan, every=False):
    """What :func:`eval_stack` reads besides the plan's arrays, made once per plan (kept in
    it under "soa"): the factors in position order (position k of every loop side by side,
    so one product gives a position's exponentials), the cut points met at each position,
    and the Jacobian sources that feed a column (``every``: all of them, kept under
    "soa_every"), each with the nonzero entries of its screw (sign included)."""
    key = "soa_every" if every else "soa"
    sp = plan.get(key)
    if sp is not None:
        return sp
    nl, kmax = plan["nl"], plan["kmax"]
    fo = plan["fidx"].T.ravel()  # position k of loop li at k * nl + li
    used = (list(range(len(plan["src_loop"]))) if every else
            sorted({w[0] for w in plan["weights"]} | {v[0] for v in plan["varying"]}))
    slot = {k: n for n, k in enumerate(used)}
    at = [[] for _ in range(kmax + 1)]
    for n, k in enumerate(used):
        sg = float(plan["src_sign"][k, 0])
        tw = [sg * float(x) for x in plan["src_tw"][k]]
        at[int(plan["src_pos"][k])].append((n, int(plan["src_loop"][k]),
                                            [(j, tw[j]) for j in range(3) if tw[j] != 0.0],
                                            [(j, tw[3 + j]) for j in range(3) if tw[3 + j] != 0.0]))
    sp = plan[key] = {
        "pidx": plan["pidx"][fo], "phome": plan["phome"][fo, None], "psign": plan["psign"][fo, None],
        "p12": np.ascontiguousarray(plan["p12"][fo]), "nu": len(used), "at": at,
        "loop_of": [int(plan["src_loop"][k]) for k in used],
        "cuts": [[(li, plan["points"][li].tolist()) for li in range(nl) if plan["cut_pos"][li] == k]
                 for k in range(kmax + 1)],
        "weights": [(slot[k], li, c, a, first) for k, li, c, a, first in plan["weights"]],
        "varying": [(slot[k], int(plan["src_loop"][k]), c, i, g) for k, c, i, g in plan["varying"]],
    }
    return sp


def _rows_times(out, rows, coefs, tmp):
    """``out = sum_j rows[j] * c_j`` over the (j, c_j) in ``coefs`` (zeros when empty)."""
    if not coefs:
        out[...] = 0.0
        return
    j, c = coefs[0]
    np.multiply(rows[j], c, out=out)
    for j, c in coefs[1:]:
        np.multiply(rows[j], c, out=tmp)
        out += tmp


def _walk(plan, sp, Q, want):
    """The running products of ``plan``'s loops over states ``Q`` (B, n), component-first.

    Returns ``(A, site, tw, pp, tmp3)``: the loop products (3, 4, nl, B), the cut points
    (3, nl, B), per source of ``sp`` (:func:`_soa_plan`; none unless ``want``) its
    column's rotation part ``R w`` and ``R v`` (nu, 6, B) and the prefix's translation
    ``p`` (nu, 3, B), with ``R, p`` the prefix product at the source, sign included; and
    a (3, B) scratch row block.  All are views of the thread's work buffer (:func:`_scratch`):
    valid until the next walk."""
    B = Q.shape[0]
    nl, kmax = plan["nl"], plan["kmax"]
    nu = sp["nu"] if want else 0
    F = nl * kmax
    sizes = (F * B, 3 * F * B, 12 * nl * B, 12 * nl * B, 12 * nl * B, 12 * nl * B, 3 * nl * B,
             6 * nu * B, 3 * nu * B)
    buf = _scratch(sum(sizes), B)
    views, at = [], 0
    for size in sizes:
        views.append(buf[at:at + size])
        at += size
    th = views[0].reshape(F, B)
    coef = views[1].reshape(F, 3, B)
    E = views[2].reshape(nl, 12, B)
    A = views[3].reshape(3, 4, nl, B)
    An = views[4].reshape(3, 4, nl, B)
    tmp = views[5].reshape(3, 4, nl, B)
    site = views[6].reshape(3, nl, B)
    tw = views[7].reshape(nu, 6, B)
    pp = views[8].reshape(nu, 3, B)
    np.subtract(Q.T[sp["pidx"]], sp["phome"], out=th)
    th *= sp["psign"]
    coef[:, 0] = th
    np.cos(th, out=coef[:, 1])
    np.subtract(1.0, coef[:, 1], out=coef[:, 1])
    np.sin(th, out=coef[:, 2])
    np.subtract(th, coef[:, 2], out=coef[:, 2])
    Ek = E.reshape(nl, 3, 4, B).transpose(1, 2, 0, 3)  # (3, 4, nl, B) view
    p12, cuts, at_pos = sp["p12"], sp["cuts"], sp["at"]
    tmp3 = tmp[0, :3, 0]  # (3, B) scratch for the source twists
    for k in range(kmax + 1):
        if k == 0:
            A[...] = 0.0
            A[0, 0] = A[1, 1] = A[2, 2] = 1.0
        for li, pt in cuts[k]:
            out = site[:, li]
            np.multiply(A[:, 0, li], pt[0], out=out)
            for j in (1, 2):
                np.multiply(A[:, j, li], pt[j], out=tmp3)
                out += tmp3
            out += A[:, 3, li]
        if want:
            for n, li, wc, vc in at_pos[k]:
                rows = A[:, :, li].transpose(1, 0, 2)  # rows[j]: column j of R (3, B); rows[3]: p
                _rows_times(tw[n, :3], rows, wc, tmp3)
                _rows_times(tw[n, 3:], rows, vc, tmp3)
                pp[n] = rows[3]
        if k == kmax:
            break
        np.matmul(p12[k * nl:(k + 1) * nl], coef[k * nl:(k + 1) * nl], out=E)
        E[:, 0] += 1.0  # the identity of the exponential: entries (0, 0), (1, 1), (2, 2)
        E[:, 5] += 1.0
        E[:, 10] += 1.0
        if k == 0:
            A[...] = Ek
            continue
        np.multiply(A[:, 0, None], Ek[0], out=An)
        np.multiply(A[:, 1, None], Ek[1], out=tmp)
        An += tmp
        np.multiply(A[:, 2, None], Ek[2], out=tmp)
        An += tmp
        An[:, 3] += A[:, 3]
        A, An = An, A
    return A, site, tw, pp, tmp3


def _moment(tw, d, tmp):
    """``tw[3:] += d x tw[:3]`` for one column (6, B) and points ``d`` (3, B), in place."""
    wr, lin = tw[:3], tw[3:]
    np.multiply(d[1], wr[2], out=tmp)
    lin[0] += tmp
    np.multiply(d[2], wr[1], out=tmp)
    lin[0] -= tmp
    np.multiply(d[2], wr[0], out=tmp)
    lin[1] += tmp
    np.multiply(d[0], wr[2], out=tmp)
    lin[1] -= tmp
    np.multiply(d[0], wr[1], out=tmp)
    lin[2] += tmp
    np.multiply(d[1], wr[0], out=tmp)
    lin[2] -= tmp


def walk_columns(s, plan, Q):
    """:func:`loop_columns` from a loop plan built without couplings and with no columns
    (``loop_plan(s, block, [], set(), coupled=False)``), component-first over states ``Q``
    (B, n): every primitive's column ``sign Ad(prefix) S`` in product order, and the cut
    points."""
    sp = _soa_plan(plan, every=True)
    _, site, tw, pp, tmp3 = _walk(plan, sp, Q, True)
    out = [([], np.ascontiguousarray(site[:, li].T)) for li in range(plan["nl"])]
    for k in range(plan["kmax"] + 1):
        for n, li, _, _ in sp["at"][k]:
            _moment(tw[n], pp[n], tmp3[0])  # (R w, R v + p x R w)
            out[li][0].append((int(plan["pidx"][plan["fidx"][li, k]]), np.ascontiguousarray(tw[n].T)))
    return out


def eval_stack(s, plan, Q, jac=True, out=None):
    """:func:`eval_one` over states ``Q`` (B, n): residual (B, 6 nl), errors (B,) and
    Jacobian (B, 6 nl, ncols) (None without ``jac``); ``out``: arrays of those shapes to
    write them in (C-contiguous), returned.

    Stacks are held component-first (a transform as its 12 top entries, each a row over
    the loops and states), so every product is a few elementwise operations on long rows
    instead of many tiny matrix products; the work arrays are views of one kept buffer
    (:func:`_walk`) written in place."""
    B = Q.shape[0]
    nl = plan["nl"]
    sp = _soa_plan(plan)
    want = bool(jac and plan["ncols"] and sp["nu"])
    A, site, tw, pp, tmp3 = _walk(plan, sp, Q, want)
    w, v = spatial.log_soa(A)  # (3, nl, B) each
    v[0] += w[1] * site[2] - w[2] * site[1]
    v[1] += w[2] * site[0] - w[0] * site[2]
    v[2] += w[0] * site[1] - w[1] * site[0]
    r = np.empty((B, nl, 6)) if out is None else out[0].reshape(B, nl, 6)
    r[:, :, :3] = w.T
    r[:, :, 3:] = v.T
    r = r.reshape(B, 6 * nl)
    errs = np.maximum(np.abs(w).max(axis=0), np.abs(v).max(axis=0) * s.pos_weight).max(axis=0)
    if out is not None:
        out[1][...] = errs
        errs = out[1]
    if not jac:
        return r, errs, None
    if out is None:
        J = np.zeros((B, nl, 6, plan["ncols"]))
    else:
        J = out[2].reshape(B, nl, 6, plan["ncols"])
        J[...] = 0.0
    if not want:
        return r, errs, J.reshape(B, 6 * nl, plan["ncols"])
    # columns moved to the cut point: (R w, R v + (p - site) x R w), sign included
    for n, li in enumerate(sp["loop_of"]):
        d = pp[n]
        d -= site[:, li]
        _moment(tw[n], d, tmp3[0])
    for n, li, c, a, first in sp["weights"]:  # elementwise: no large BLAS call (threads on a busy machine)
        if not first:
            J[:, li, :, c] += a * tw[n].T
        elif a == 1.0:
            J[:, li, :, c] = tw[n].T
        else:
            np.multiply(tw[n].T, a, out=J[:, li, :, c])
    for n, li, c, i, g in sp["varying"]:
        J[:, li, :, c] += (s.m.coupling_table.member_slope(i, Q[:, g])[None, :] * tw[n]).T
    return r, errs, J.reshape(B, 6 * nl, plan["ncols"])
