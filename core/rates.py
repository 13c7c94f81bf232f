"""Velocities and accelerations of a swept mechanism driven at a speed.

Given solved states ``Q`` (N, n) of a sweep and the drive's rate and acceleration at each
state, every coordinate's rate and acceleration follow from the loop constraints, not
from differences of positions:

- velocity: ``J_u q_dot_u = -J_h q_dot_h`` (the constraint Jacobian of the unknown and
  the held coordinates; least-norm solution as in the solver);
- acceleration: differentiating ``J(q) q_dot = 0`` once more gives
  ``J_u q_ddot_u = -J_h q_ddot_h - J_dot q_dot``.  The loop product is a product of
  exponentials; its spatial column of factor ``f`` is ``J_f = Ad(factors left of f) Y_f``
  and ``dJ_f/dq_g = ad(J_g) J_f`` for ``g`` left of ``f``, so ``J_dot q_dot = sum_f
  [V_<f, J_f q_dot_f]`` with ``V_<f`` the twist of the factors left of ``f`` (the Lie
  bracket ``[V, W] = ad_V W``; Lynch & Park, *Modern Robotics*, 2017, sec. 5.1 and 8.2;
  Murray, Li & Sastry 1994, sec. 3.2).  A coupling ``q_i = f(q_g)`` adds
  ``f''(q_g) q_dot_g^2`` to ``q_ddot_i``, which goes to the right-hand side.
- a point fixed to a link: with the link's spatial twist ``V = (w, v)`` (sum of the tree
  path's columns times rates), ``x_dot = w x x + v`` and ``x_ddot = w_dot x x + v_dot +
  w x x_dot``, ``V_dot = sum J_f q_ddot_f + sum_f [V_<f, J_f q_dot_f]`` (Murray, Li &
  Sastry 1994, sec. 2.4).

Internal units throughout (radians, the file's length unit, seconds).  The sweep
evaluator of :mod:`jointwise.sweep` gives the loop Jacobians (with the coupling slopes).
"""
from __future__ import annotations

import numpy as np

from . import spatial

__all__ = ["coordinate_rates", "point_rates", "loop_bias"]


def _cross(a, b):
    return np.stack([a[..., 1] * b[..., 2] - a[..., 2] * b[..., 1],
                     a[..., 2] * b[..., 0] - a[..., 0] * b[..., 2],
                     a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]], axis=-1)


def _bracket(V, W):
    """[V, W] = ad_V W for stacked twists (w, v): (w_V x w_W, w_V x v_W + v_V x w_W)."""
    return np.concatenate([_cross(V[:, :3], W[:, :3]),
                           _cross(V[:, :3], W[:, 3:]) + _cross(V[:, 3:], W[:, :3])], axis=-1)


def _joint_motion(mech, jn, Q, prims):
    """(R, p) of joint ``jn`` and its per-coordinate columns in the frame before it (B, k, 6)."""
    from .sweep import _ad_apply, _compose
    j = mech.joints[jn]
    sl = mech._slices[jn]
    B = Q.shape[0]
    prs = prims[jn]
    if not prs:
        return (np.broadcast_to(np.eye(3), (B, 3, 3)), np.zeros((B, 3))), np.zeros((B, 0, 6))
    screws = j.screws
    T = prs[0].exp(Q[:, sl.start])
    cols = [np.broadcast_to(screws[0], (B, 6))]
    for k in range(1, len(prs)):
        cols.append(_ad_apply(T[0], T[1], screws[k:k + 1])[:, 0])
        T = _compose(T, prs[k].exp(Q[:, sl.start + k]))
    return T, np.stack(cols, axis=1)


def _prims(mech):
    from .sweep import _Prim
    return {jn: [_Prim(pr.screw, h) for pr, h in zip(j.primitives, j.home)] for jn, j in mech.joints.items()}


def _columns(mech, steps, Q, prims):
    """Walk ``steps`` (joint, sign) from the identity over states Q.

    Returns the final (R, p), the walk's (R, p) before each joint (dict), and the factors'
    spatial columns in product order: a list of (coordinate index, (B, 6) twist)."""
    from .sweep import _ad_apply, _compose, _inv
    B = Q.shape[0]
    R = np.broadcast_to(np.eye(3), (B, 3, 3))
    p = np.zeros((B, 3))
    frames = {}
    cols = []
    for jn, sign in steps:
        T, X = _joint_motion(mech, jn, Q, prims)
        frames[jn] = (R, p)
        k = X.shape[1]
        start = mech._slices[jn].start
        if sign > 0:
            tw = _ad_apply(R, p, X) if k else None
            R, p = _compose((R, p), T)
            order = range(k)
        else:
            R, p = _compose((R, p), _inv(T))
            tw = -_ad_apply(R, p, X) if k else None
            order = reversed(range(k))
        if tw is not None:
            cols.extend((start + c, tw[:, c]) for c in order)
    return (R, p), frames, cols


def _accumulate(cols, Qd, extra=None):
    """The twist ``V = sum J_f q_dot_f`` of a walk's columns and ``sum_f [V_<f, J_f q_dot_f]``
    (plus ``sum_f J_f extra_f`` when ``extra`` (B, n) is given)."""
    B = Qd.shape[0]
    V = np.zeros((B, 6))
    acc = np.zeros((B, 6))
    for i, col in cols:
        vk = col * Qd[:, i, None]
        acc += _bracket(V, vk)
        V += vk
        if extra is not None:
            acc += col * extra[:, i, None]
    return V, acc


def _walk(mech, steps, Q, Qd, prims, extra=None):
    (R, p), frames, cols = _columns(mech, steps, Q, prims)
    V, acc = _accumulate(cols, Qd, extra)
    return (R, p), frames, V, acc


def _site_rows(v, site):
    """A spatial twist (or column) in the solver's row form: moved to the cut point."""
    out = v.copy()
    out[:, 3:] = v[:, 3:] - _cross(site, v[:, :3])
    return out


def loop_bias(mech, loop, Q, Qd, prims, extra=None):
    """``J_dot q_dot`` (+ ``J extra``) of one loop at its cut point, (B, 6), in the row form
    of the solver's residual (twist moved to the point where the loop is cut)."""
    (R, p), frames, V, acc = _walk(mech, loop.steps, Q, Qd, prims, extra)
    Rc, pc = frames[loop.name]
    site = (Rc @ np.asarray(mech.joints[loop.name].point, float)) + pc
    return _site_rows(acc, site)


def coordinate_rates(mech, Q, held_masters, drive, qd_drive, qdd_drive):
    """Rates and accelerations of every coordinate (internal units per s and per s^2).

    ``Q`` (N, n) solved states; ``held_masters``: solver master indices held in the run;
    ``drive``: the driving coordinate's index; ``qd_drive``, ``qdd_drive`` (N,): its rate
    and acceleration (internal units).  Other held coordinates stand still.  Returns
    ``(Qd, Qdd)`` (N, n).  One walk of each loop per chunk of states gives the columns
    of both the velocity and the acceleration equations."""
    from .sweep import CHUNK, _least_norm
    s = mech.solver
    Q = np.asarray(Q, dtype=float)
    N, n = Q.shape
    g = int(s.master[drive])
    slope = s.member_slope(drive, Q[:, g]) * np.ones(N)
    gd = qd_drive / slope                      # master rate (a linear member: / alpha)
    gdd = qdd_drive / slope
    Qd = np.zeros((N, n))
    Qdd = np.zeros((N, n))
    Qd[:, g], Qdd[:, g] = gd, gdd
    bi = s.block_of_master.get(g)
    prims = _prims(mech)
    if bi is not None:
        b = s.blocks[bi]
        unknown = [m for m in b.groups if m not in held_masters]
        col_of = {m: k for k, m in enumerate(unknown)}
        cs = np.array([1.0 / s.cscale[m] for m in unknown])   # length columns: mechanism sizes
        rs = np.tile(s.rscale, len(b.loops))
        nu = len(unknown)
        for k0 in range(0, N, CHUNK):
            sl = slice(k0, min(N, k0 + CHUNK))
            Qc = Q[sl]
            B = Qc.shape[0]
            walks = []
            Ju = np.zeros((B, 6 * len(b.loops), nu))
            jh = np.zeros((B, 6 * len(b.loops)))
            for li, lp in enumerate(b.loops):
                _, frames, cols = _columns(mech, lp.steps, Qc, prims)
                Rc, pc = frames[lp.name]
                site = (Rc @ np.asarray(mech.joints[lp.name].point, float)) + pc
                walks.append((cols, site))
                for i, col in cols:
                    m = int(s.master[i])
                    row = _site_rows(col, site)
                    if m == g:
                        sl_ = s.member_slope(i, Qc[:, m])
                        jh[:, 6 * li:6 * li + 6] += row * (np.asarray(sl_)[:, None] if np.ndim(sl_) else sl_)
                    elif m in col_of:
                        sl_ = s.member_slope(i, Qc[:, m])
                        Ju[:, 6 * li:6 * li + 6, col_of[m]] += row * (np.asarray(sl_)[:, None] if np.ndim(sl_) else sl_)
            Qdc = np.zeros((B, n))
            Qdc[:, g] = gd[sl]
            if nu:
                Js = Ju * rs[None, :, None] * cs[None, None, :]
                rhs = -(jh * gd[sl, None] * rs[None, :])[:, :, None]
                x, _ = _least_norm(Js, rhs)
                ud = x[:, :, 0] * cs[None, :]
                for m, k in col_of.items():
                    Qdc[:, m] = ud[:, k]
            curv = _members(s, Qc, Qdc, None, b.groups)
            if nu:
                bias = np.concatenate([_site_rows(_accumulate(cols, Qdc, curv)[1], site) for cols, site in walks],
                                      axis=1)
                rhs = -((jh * gdd[sl, None] + bias) * rs[None, :])[:, :, None]
                x, _ = _least_norm(Js, rhs)
                udd = x[:, :, 0] * cs[None, :]
                for m, k in col_of.items():
                    Qd[sl, m] = ud[:, k]
                    Qdd[sl, m] = udd[:, k]
    # members of every moving group follow their master
    _members(s, Q, Qd, Qdd, [int(m) for m in s.members])
    return Qd, Qdd


def _members(s, Q, Qd, Qdd, masters):
    """Set members' rates from their masters' (in place in Qd and, when given, Qdd: returns
    zeros); without Qdd, returns the curvature terms ``f''(q_g) q_dot_g^2`` (N, n)."""
    curv = np.zeros_like(Qd)
    for g in masters:
        for i in s.members[g]:
            if i == g:
                continue
            _, d1, d2 = s.member_rates(i, Q[:, g])
            Qd[:, i] = d1 * Qd[:, g]
            c = d2 * Qd[:, g] ** 2
            if Qdd is not None:
                Qdd[:, i] = d1 * Qdd[:, g] + c
            else:
                curv[:, i] = c
    return np.zeros_like(Qd) if Qdd is not None else curv


def point_rates(mech, Q, Qd, Qdd, link, at, prims=None):
    """Position, velocity and acceleration (N, 3 each) of a point fixed to ``link``
    (``at``: the point at home, world, length unit)."""
    prims = prims or _prims(mech)
    steps = [(jn, sign) for _, jn, sign in reversed(mech._path_up(link))]
    (R, p), _, V, acc = _walk(mech, steps, Q, Qd, prims, Qdd)
    x = (R @ np.asarray(at, dtype=float)) + p
    w = V[:, :3]
    xd = _cross(w, x) + V[:, 3:]
    xdd = _cross(acc[:, :3], x) + acc[:, 3:] + _cross(w, xd)
    return x, xd, xdd


def axis_rates(mech, Q, Qd, Qdd, link, axis, prims=None):
    """Direction, its rate and acceleration (N, 3 each) of a unit axis fixed to ``link``."""
    prims = prims or _prims(mech)
    steps = [(jn, sign) for _, jn, sign in reversed(mech._path_up(link))]
    (R, p), _, V, acc = _walk(mech, steps, Q, Qd, prims, Qdd)
    a = np.asarray(axis, float)
    u = R @ (a / np.linalg.norm(a))
    w = V[:, :3]
    ud = _cross(w, u)
    udd = _cross(acc[:, :3], u) + _cross(w, ud)
    return u, ud, udd


def measure_rates(mech, Q, Qd, Qdd):
    """Velocities and accelerations of the measures: {name: (N,) or (N, 3)} each, file units
    per s (angles in degrees per s).  Rate measures (speed ratios) are left out."""
    prims = _prims(mech)
    vel, acc = {}, {}
    for name, m in mech.measures.items():
        if m.type == "point":
            _, xd, xdd = point_rates(mech, Q, Qd, Qdd, m.a[0], m.a[1], prims)
            vel[name], acc[name] = xd, xdd
        elif m.type == "distance":
            pa, va, aa = point_rates(mech, Q, Qd, Qdd, m.a[0], m.a[1], prims)
            pb, vb, ab = point_rates(mech, Q, Qd, Qdd, m.b[0], m.b[1], prims)
            r, rd, rdd = pa - pb, va - vb, aa - ab
            d = np.linalg.norm(r, axis=1)
            with np.errstate(divide="ignore", invalid="ignore"):
                dd = np.einsum("ij,ij->i", r, rd) / d
                ddd = (np.einsum("ij,ij->i", rd, rd) + np.einsum("ij,ij->i", r, rdd) - dd * dd) / d
            vel[name], acc[name] = dd, ddd
        elif m.type == "angle":
            ua, uad, uadd = axis_rates(mech, Q, Qd, Qdd, m.a[0], m.a[1], prims)
            ub, ubd, ubdd = axis_rates(mech, Q, Qd, Qdd, m.b[0], m.b[1], prims)
            c = np.clip(np.einsum("ij,ij->i", ua, ub), -1.0, 1.0)
            sn = np.sqrt(1.0 - c * c)
            cd = np.einsum("ij,ij->i", uad, ub) + np.einsum("ij,ij->i", ua, ubd)
            cdd = (np.einsum("ij,ij->i", uadd, ub) + 2 * np.einsum("ij,ij->i", uad, ubd)
                   + np.einsum("ij,ij->i", ua, ubdd))
            with np.errstate(divide="ignore", invalid="ignore"):
                td = -cd / sn                                  # theta = acos(c)
                tdd = -(cdd + c * td * td) / sn
            vel[name], acc[name] = np.degrees(td), np.degrees(tdd)
    return vel, acc


def drive_timing(values, speed, acceleration=0.0):
    """Time (s) at each drive value and the drive's rate there, for a drive that starts at
    ``values[0]`` with rate ``speed`` and changes it at ``acceleration`` (file units):
    ``x = x0 + v t + a t^2 / 2``, ``t = (-v + sign(v) sqrt(v^2 + 2 a (x - x0))) / a``.

    Raises JointwiseError where the values run against the speed, or lie beyond the
    point where a decelerating drive stops."""
    from .errors import JointwiseError
    v = float(speed)
    a = float(acceleration)
    if not (np.isfinite(v) and np.isfinite(a)):
        raise JointwiseError(f"speed and acceleration must be finite, got {speed!r} and {acceleration!r}")
    if v == 0:
        raise JointwiseError("speed must not be 0 (the drive would not move)")
    values = np.asarray(values, dtype=float)
    dx = values - values[0]
    if np.any(dx * np.sign(v) < 0):
        raise JointwiseError("the values run against the speed's direction (time would go backwards); "
                             "give the speed the sign of the motion from the first value")
    if a == 0:
        return dx / v, np.full(values.shape, v)
    disc = v * v + 2 * a * dx
    if np.any(disc < 0):
        stop = values[0] - v * v / (2 * a)
        raise JointwiseError(f"at this deceleration the drive stops at {stop:g} before reaching the last "
                             f"value {values[-1]:g}")
    rate = np.sign(v) * np.sqrt(np.maximum(disc, 0.0))
    return (rate - v) / a, rate


def attach(mech, sw, drive, values, speed, acceleration, held_masters):
    """Add ``time``, ``velocities``, ``accelerations``, ``measure_velocities`` and
    ``measure_accelerations`` (file units per s, per s^2) to Sweep ``sw``; rows that did
    not converge hold NaN (written as empty cells)."""
    i = mech._require(drive)
    t, rate = drive_timing(values, speed, acceleration)
    unit = mech._unit(i)
    qd = rate * unit
    qdd = np.full(len(values), float(acceleration) * unit)
    Qd, Qdd = coordinate_rates(mech, sw.q, held_masters, i, qd, qdd)
    bad = ~np.asarray(sw.converged, bool)
    sw.time = t
    sw.velocities, sw.accelerations = {}, {}
    for k, c in enumerate(mech.coordinates):
        u = mech._unit(k)
        sw.velocities[c] = np.where(bad, np.nan, Qd[:, k] / u)
        sw.accelerations[c] = np.where(bad, np.nan, Qdd[:, k] / u)
    mv, ma = measure_rates(mech, sw.q, Qd, Qdd)
    shape = (lambda v: bad[:, None] if v.ndim > 1 else bad)
    sw.measure_velocities = {k: np.where(shape(v), np.nan, v) for k, v in mv.items()}
    sw.measure_accelerations = {k: np.where(shape(v), np.nan, v) for k, v in ma.items()}
    return sw
