"""Velocities and accelerations of a swept mechanism driven at a speed.

A sweep is a one-parameter motion: every coordinate is a function ``q(x)`` of the drive's
value ``x``.  :func:`drive_derivatives` gives ``q'``, ``q''`` (and ``q'''``) per unit of
drive exactly, from the loop constraints, not from differences of positions; at a drive
rate ``x_dot`` and acceleration ``x_ddot`` the chain rule gives the time derivatives,
``q_dot = q' x_dot`` and ``q_ddot = q'' x_dot^2 + q' x_ddot``.  The loop equations come from
:mod:`jointwise.kinematics` (one ``J_dot q_dot`` in the core):

- first: ``J_u q'_u = -J_h x'`` (the constraint Jacobian of the unknown and the held
  coordinates; least-norm solution as in the solver);
- second: differentiating ``J q' = 0`` once more, ``J q'' = -J_dot q'`` with
  ``J_dot q'`` from Lie brackets (:func:`kinematics.walk_terms`; Lynch & Park, *Modern
  Robotics*, 2017, sec. 5.1 and 8.2; Murray, Li & Sastry 1994, sec. 3.2);
- third (rate measures only): once more, ``J q''' = -(2 J_dot q'' + J_ddot q')``, the
  bracket form of :func:`kinematics.walk_terms` (``jerk``).

A coupling ``q_i = f(q_g)`` gives ``q_i' = f' g'``, ``q_i'' = f' g'' + f'' g'^2`` and
``q_i''' = f' g''' + 3 f'' g' g'' + f''' g'^3``; the terms without the master's own
derivative go to the right-hand side.  ``f'`` and ``f''`` are the laws' exact ones;
``f'''`` (third order only) is a central difference of the exact ``f''`` (step 1e-5 rad,
or 1e-5 mechanism sizes for a length leader).

Measures (file units per s and per s^2; angles in degrees):

- point: ``x_dot = Jp q_dot``, ``x_ddot = Jp q_ddot + a0`` (:func:`kinematics.point_motion`);
- distance ``d = |r|``, ``r = x_a - x_b``: ``d_dot = r . r_dot / d``,
  ``d_ddot = (r_dot . r_dot + r . r_ddot - d_dot^2) / d``;
- angle ``t = acos(u_a . u_b)`` of two unit axes (:func:`kinematics.axis_motion`):
  ``t_dot = -c_dot / sin t``, ``t_ddot = -(c_ddot + cos t t_dot^2) / sin t``;
- rate ``M = d(of)/d(per) = q'_of / q'_per`` along the sweep's path:
  ``M' = (q''_of q'_per - q'_of q''_per) / q'_per^2``,
  ``M'' = (q'''_of q'_per - q'_of q'''_per) / q'_per^2 - 2 q''_per M' / q'_per``, then
  ``M_dot = M' x_dot``, ``M_ddot = M'' x_dot^2 + M' x_ddot`` (the quotient and chain
  rules; checked in tests/test_rates.py against the closed form of a slider-crank's
  ratio derivatives and against central differences).

Undefined values are NaN here (written as empty cells, never as NaN): rows that did not
converge; a rate measure where ``q'_per = 0`` (``per`` stands still: a dead point);
a rate measure whose own motion is not the sweep's (its ``of``, or its ``per`` other than
the drive, is held in the run, so the measure releases or holds another coordinate);
a distance of zero; an angle of 0 or 180 degrees.

Internal units throughout (radians, the file's length unit, seconds) except in
:func:`attach`, which gives file units.
"""
from __future__ import annotations

import numpy as np

from . import kinematics
from .linalg import least_norm
from .units import CHUNK

__all__ = ["drive_derivatives", "coordinate_rates", "measure_rates", "drive_timing", "attach"]

#: A rate measure's ``per`` counts as standing still where ``|q'_per|`` is below this
#: fraction of its largest value over the sweep.
DEAD = 1e-12


def drive_derivatives(mech, Q, held_masters, drive, order=2):
    """Derivatives of every coordinate per unit of the drive along a sweep's path.

    ``Q`` (N, n) solved states; ``held_masters``: solver master indices held in the run
    (the drive's among them; the others stand still); ``drive``: the driving coordinate's
    index.  Returns ``[D1, D2]`` (``order=2``) or ``[D1, D2, D3]`` (``order=3``), each
    (N, n): ``d^k q / dx^k`` in internal units (x the drive's value, internal units).
    One walk of each loop per chunk of states gives the columns of every order."""
    s, ct = mech.solver, mech.coupling_table
    Q = np.asarray(Q, dtype=float)
    N, n = Q.shape
    D = [np.zeros((N, n)) for _ in range(order)]
    g = int(ct.master[drive])
    D[0][:, g] = 1.0 / (ct.member_slope(drive, Q[:, g]) * np.ones(N))   # a linear member: 1 / alpha
    bi = s.block_of_master.get(g)
    if bi is not None:
        b = s.blocks[bi]
        unknown = [m for m in b.groups if m not in held_masters]
        if unknown:
            for k0 in range(0, N, CHUNK):
                sl = slice(k0, min(N, k0 + CHUNK))
                part = _block_derivatives(mech, b, Q[sl], [d[sl] for d in D], g, unknown)
                for d, v in zip(D, part):
                    d[sl] = v
    _members(mech, Q, D, [int(m) for m in ct.members])   # members of every group follow their master
    return D


def _block_derivatives(mech, b, Q, D, g, unknown):
    """:func:`drive_derivatives` on one chunk of states for the drive's block ``b``."""
    s, ct = mech.solver, mech.coupling_table
    B = Q.shape[0]
    D = [d.copy() for d in D]
    walks = kinematics.loop_columns(mech, b, Q)
    col_of = {m: k for k, m in enumerate(unknown)}
    cs = np.array([1.0 / s.cscale[m] for m in unknown])   # length columns: mechanism sizes
    rs = np.tile(s.rscale, len(b.loops))
    Ju = np.zeros((B, 6 * len(b.loops), len(unknown)))
    jh = np.zeros((B, 6 * len(b.loops)))
    for li, (cols, site) in enumerate(walks):
        for i, col in cols:
            m = int(ct.master[i])
            if m != g and m not in col_of:
                continue
            row = kinematics.at_site(col, site) * np.reshape(ct.member_slope(i, Q[:, m]) * np.ones(B), (-1, 1))
            if m == g:
                jh[:, 6 * li:6 * li + 6] += row
            else:
                Ju[:, 6 * li:6 * li + 6, col_of[m]] += row
    Js = Ju * rs[None, :, None] * cs[None, None, :]

    def solve(rest, k):
        """The masters' k-th derivatives from ``Ju u + jh D_k[g] + rest = 0``."""
        rhs = -((jh * D[k][:, g, None] + rest) * rs[None, :])[:, :, None]
        u = least_norm(Js, rhs)[0][:, :, 0] * cs[None, :]
        for m, c in col_of.items():
            D[k][:, m] = u[:, c]
        _members(mech, Q, D[:k + 1], b.groups, only=k)

    def rest(terms, extra):
        """Loop rows of ``terms`` (per loop, (B, 6)) plus ``sum_f c_f extra_f``."""
        out = [kinematics.at_site(t + sum(col * extra[:, i, None] for i, col in cols), site)
               for t, (cols, site) in zip(terms, walks)]
        return np.concatenate(out, axis=1)

    solve(0.0, 0)
    if len(D) > 1:
        bias = [kinematics.walk_terms(cols, D[0])[1] for cols, _ in walks]
        solve(rest(bias, _curvature(mech, Q, D, b.groups, 1)), 1)
    if len(D) > 2:
        jerk = [kinematics.walk_terms(cols, D[0], D[1])[2] for cols, _ in walks]
        solve(rest(jerk, _curvature(mech, Q, D, b.groups, 2)), 2)
    return D


def _law_terms(mech, i, qg, order):
    """(f', f'', f''') of member ``i`` over master values ``qg``; f''' (order 3 only) by a
    central difference of the law's exact f''.  Where f'' jumps (a Geneva wheel's pin
    entering its slot, a constant-velocity rise starting) f''' is undefined: NaN there,
    found as the central differences at steps h and h/2 disagreeing (they agree to
    O(h^2) where f'' is smooth; across a jump J they differ by about J / 2h)."""
    ct = mech.coupling_table
    _, d1, d2 = ct.member_rates(i, qg)
    d3 = np.zeros_like(qg)
    if order > 2 and i in ct.law:
        size = 1.0 / mech.solver.cscale[int(ct.master[i])]   # 1 rad, or the mechanism's size
        h = 1e-5 * size
        f2 = {k: ct.member_rates(i, qg + k * h)[2] for k in (-1.0, -0.5, 0.5, 1.0)}
        wide = (f2[1.0] - f2[-1.0]) / (2 * h)
        d3 = (f2[0.5] - f2[-0.5]) / h
        floor = 1e-4 * float(np.abs(d2).max(initial=0.0)) / size
        jump = np.abs(wide - d3) > 1e-3 * np.maximum(np.abs(wide), np.abs(d3)) + floor
        d3 = np.where(jump, np.nan, d3)
    return d1, d2, d3


def _curvature(mech, Q, D, masters, k):
    """The part of the members' (k+1)-th derivatives that does not depend on their master's
    own (k+1)-th derivative (N, n): ``f'' g'^2`` (k=1) or ``3 f'' g' g'' + f''' g'^3`` (k=2)."""
    ct = mech.coupling_table
    out = np.zeros_like(D[0])
    for g in masters:
        for i in ct.members[g]:
            if i == g or i not in ct.law:
                continue
            d1, d2, d3 = _law_terms(mech, i, Q[:, g], k + 1)
            g1 = D[0][:, g]
            out[:, i] = d2 * g1 ** 2 if k == 1 else 3 * d2 * g1 * D[1][:, g] + d3 * g1 ** 3
    return out


def _members(mech, Q, D, masters, only=None):
    """Set members' derivatives from their masters' (in place in the list ``D``; ``only``:
    just that order)."""
    ct = mech.coupling_table
    orders = range(len(D)) if only is None else [only]
    for g in masters:
        for i in ct.members[g]:
            if i == g:
                continue
            d1, d2, d3 = _law_terms(mech, i, Q[:, g], max(orders) + 1)
            g1 = D[0][:, g]
            for k in orders:
                if k == 0:
                    D[0][:, i] = d1 * g1
                elif k == 1:
                    D[1][:, i] = d1 * D[1][:, g] + d2 * g1 ** 2
                else:
                    D[2][:, i] = d1 * D[2][:, g] + 3 * d2 * g1 * D[1][:, g] + d3 * g1 ** 3


def coordinate_rates(mech, Q, held_masters, drive, qd_drive, qdd_drive):
    """Rates and accelerations of every coordinate (internal units per s and per s^2).

    ``Q`` (N, n) solved states; ``held_masters``: solver master indices held in the run;
    ``drive``: the driving coordinate's index; ``qd_drive``, ``qdd_drive`` (N,): its rate
    and acceleration (internal units).  Other held coordinates stand still.  Returns
    ``(Qd, Qdd)`` (N, n), by the chain rule from :func:`drive_derivatives`."""
    D1, D2 = drive_derivatives(mech, Q, held_masters, drive)
    return _in_time(D1, D2, qd_drive, qdd_drive)


def _in_time(D1, D2, xd, xdd):
    """``(q_dot, q_ddot)`` from derivatives per unit of drive at drive rate ``xd`` and
    acceleration ``xdd`` (scalars or (N,))."""
    xd = np.reshape(np.asarray(xd, float) * np.ones(D1.shape[0]), (-1, 1))
    xdd = np.reshape(np.asarray(xdd, float) * np.ones(D1.shape[0]), (-1, 1))
    return D1 * xd, D2 * xd * xd + D1 * xdd


def _dot(a, b):
    return np.einsum("ij,ij->i", a, b)


def measure_rates(mech, Q, Qd, Qdd, rated=None):
    """Velocities and accelerations of the measures: {name: (N,) or (N, 3)} each, file units
    per s (angles in degrees per s).  ``rated``: ``(D, xd, xdd, held_masters, drive)`` with
    ``D = [D1, D2, D3]`` of :func:`drive_derivatives`, the drive's rate and acceleration
    (internal units), for the rate measures (left out without it).  NaN where undefined
    (see the module's notes), never inf."""
    vel, acc = {}, {}
    with np.errstate(divide="ignore", invalid="ignore"):
        for name, m in mech.measures.items():
            if m.type == "point":
                _, xd, xdd = _point(mech, Q, Qd, Qdd, m.a)
                vel[name], acc[name] = xd, xdd
            elif m.type == "distance":
                pa, va, aa = _point(mech, Q, Qd, Qdd, m.a)
                pb, vb, ab = _point(mech, Q, Qd, Qdd, m.b)
                r, rd, rdd = pa - pb, va - vb, aa - ab
                d = np.linalg.norm(r, axis=1)
                dd = _dot(r, rd) / d
                vel[name], acc[name] = dd, (_dot(rd, rd) + _dot(r, rdd) - dd * dd) / d
            elif m.type == "angle":
                ua, uad, uadd = _axis(mech, Q, Qd, Qdd, m.a)
                ub, ubd, ubdd = _axis(mech, Q, Qd, Qdd, m.b)
                c = np.clip(_dot(ua, ub), -1.0, 1.0)
                sn = np.sqrt(1.0 - c * c)
                cd = _dot(uad, ub) + _dot(ua, ubd)
                cdd = _dot(uadd, ub) + 2 * _dot(uad, ubd) + _dot(ua, ubdd)
                td = -cd / sn                                  # theta = acos(c)
                vel[name], acc[name] = np.degrees(td), np.degrees(-(cdd + c * td * td) / sn)
            elif rated is not None:
                vel[name], acc[name] = _rate_measure(mech, m, *rated)
    for k in vel:  # never inf: undefined is NaN (an empty cell)
        vel[k] = np.where(np.isfinite(vel[k]), vel[k], np.nan)
        acc[k] = np.where(np.isfinite(acc[k]), acc[k], np.nan)
    return vel, acc


def _point(mech, Q, Qd, Qdd, where):
    """Position, velocity and acceleration (N, 3 each) of ``where = (link, point at home)``."""
    x, Jp, a0 = kinematics.point_motion(mech, Q, Qd, where[0], where[1])
    return x, np.einsum("bij,bj->bi", Jp, Qd), np.einsum("bij,bj->bi", Jp, Qdd) + a0


def _axis(mech, Q, Qd, Qdd, where):
    """Unit direction, its rate and acceleration (N, 3 each) of ``where = (link, axis)``."""
    u, Ju, a0 = kinematics.axis_motion(mech, Q, Qd, where[0], where[1])
    return u, np.einsum("bij,bj->bi", Ju, Qd), np.einsum("bij,bj->bi", Ju, Qdd) + a0


def _rate_measure(mech, m, D, xd, xdd, held_masters, drive):
    """Rate and acceleration (file units per s, per s^2) of rate measure ``m`` =
    d(of)/d(per) along the sweep (see the module's notes)."""
    s, ct = mech.solver, mech.coupling_table
    N = D[0].shape[0]
    io, ip = mech.index_of(m.of), mech.index_of(m.per)
    go, gp = int(ct.master[io]), int(ct.master[ip])
    conv = mech.unit_scale(ip) / mech.unit_scale(io)
    if go != gp:
        bo = s.block_of_master.get(go)
        if bo is None or s.block_of_master.get(gp) != bo:      # the measure is 0 throughout
            return np.zeros(N), np.zeros(N)
        others = set(held_masters) - {int(ct.master[drive])}
        if go in others or gp in others:                        # not the sweep's motion
            return np.full(N, np.nan), np.full(N, np.nan)
    elif io not in ct.law and ip not in ct.law:                  # a constant ratio
        return np.zeros(N), np.zeros(N)
    a1, a2, a3 = (d[:, io] for d in D)
    b1, b2, b3 = (d[:, ip] for d in D)
    finite = np.isfinite(b1)
    big = np.abs(b1[finite]).max() if finite.any() else 0.0
    b1 = np.where(np.abs(b1) > DEAD * big, b1, np.nan)        # per stands still: undefined
    m1 = (a2 * b1 - a1 * b2) / (b1 * b1)
    m2 = (a3 * b1 - a1 * b3) / (b1 * b1) - 2 * b2 * m1 / b1
    return conv * m1 * xd, conv * (m2 * xd * xd + m1 * xdd)


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
    not converge, and values undefined there (see the module's notes), hold NaN (written
    as empty cells, null in JSON)."""
    i = mech.index_of(drive)
    t, rate = drive_timing(values, speed, acceleration)
    unit = mech.unit_scale(i)
    xd = rate * unit
    xdd = float(acceleration) * unit
    rated = any(m.type == "rate" for m in mech.measures.values())
    D = drive_derivatives(mech, sw.q, held_masters, i, order=3 if rated else 2)
    Qd, Qdd = _in_time(D[0], D[1], xd, xdd)
    bad = ~np.asarray(sw.converged, bool)
    sw.time = t
    sw.velocities, sw.accelerations = {}, {}
    for k, c in enumerate(mech.coordinates):
        u = mech.unit_scale(k)
        sw.velocities[c] = np.where(bad, np.nan, Qd[:, k] / u)
        sw.accelerations[c] = np.where(bad, np.nan, Qdd[:, k] / u)
    mv, ma = measure_rates(mech, sw.q, Qd, Qdd, (D, xd, xdd, held_masters, i) if rated else None)
    shape = (lambda v: bad[:, None] if v.ndim > 1 else bad)
    sw.measure_velocities = {k: np.where(shape(v), np.nan, v) for k, v in mv.items()}
    sw.measure_accelerations = {k: np.where(shape(v), np.nan, v) for k, v in ma.items()}
    return sw
