"""Sweeps: continuation along many held values, vectorised over steps; reachable ranges.

Public functions
----------------
``sweep(mech, drive, values, held=None)``
    Drive one coordinate through ``values`` (file units).  The file's own ``drive = true``
    flags are released for the run; ``held`` (coordinate -> value) holds others.
``follow(mech, table, start=None)``
    Continuation along N rows of held values ``{coordinate: array N}`` with the rules of
    :meth:`Mechanism.pose` (the file's drives not in the table stay held).  Never raises
    for a failed row: it is flagged ``converged[i] = False`` and repeats the last good pose.
``sweep_schedule(mech, schedule, samples)``
    Several inputs at once, from keys (linear or eased segments) or a CSV table.
``reach(mech, drive, held=None)``
    Reachable interval(s) of a drive from home, by bracketing and bisection.

How a sweep is solved
---------------------
1. *Anchors*: samples spaced at most ``ANCHOR_STEP`` apart in held motion (dimensionless:
   radians, or length over the mechanism size) are solved one after another, each started
   from the previous one with a tangent predictor and Newton corrections (batch of one);
   an anchor that fails there, or moves more than a predictor should, is handed to
   :meth:`Solver.pose` (adaptive sub-steps, branch-jump checks) from the previous state.
   While the predictor's correction stays below ``ANCHOR_GROW`` of the step, the walk
   steps over anchors (twice as many each time, up to ``ANCHOR_STRIDE``); after a miss it
   goes back to every anchor from the last good one.  Anchors stepped over are solved with
   the refinement level (a lift table's screw, many turns for a small lift, needs a tenth
   of the anchors).
2. *Refinement*: points spaced ``REFINE_STEP`` apart are seeded by cubic Hermite
   interpolation between neighbouring anchors (end slopes from the Jacobian tangent
   dq/dheld; an angle takes the turn the tangents predict), corrected by batched Gauss-Newton steps over all of them at once, then every
   remaining sample is seeded from those and corrected the same way.  The batched
   evaluator stacks the screw exponentials, adjoint products, loop logarithms and
   Jacobians over steps (``B x 4 x 4`` products; least-norm steps from the normal
   equations of the dimensionless Jacobian, solved by a Cholesky factorisation vectorised
   over steps).
3. *Verification*: a sample counts only if every loop closes within ``TOLERANCE``
   (1e-9 length unit and radian) and the correction moved it by less than a tenth of
   the local sample spacing (else it may have jumped branch).  Samples failing either
   are solved one by one with :meth:`Solver.pose` from the neighbouring good sample.
   Inside a stretch that cannot be reached, the first failure stops the walk into it;
   the rest of that stretch is flagged without further attempts.
4. *Branch proof*: every step between neighbouring closed rows must be certified
   (:func:`_certify_pairs`: the row is the Newton limit from the predictor at the row
   before, by a Kantorovich-style contraction and distance test, and the solved block
   keeps its orientation; the argument is in :mod:`jointwise.linalg`, "branch
   continuity").  A row whose step is not certified is solved again from the row
   before by :meth:`Solver.pose` (certified sub-steps); where that differs, the rows
   after it were on another branch and are solved again, batched, from it.  A step
   that is certified but changes orientation passed a singular point: flagged singular.
   An anchor beyond a held value where the walk already failed is not tried again.
5. Every sample gets ``converged`` and ``singular`` flags; a failed sample repeats the
   last good pose (finite values, never NaN).  A coordinate outside its joint limits
   makes a sample fail as well (reason "limit of joint X").

Singular flags
--------------
A sample is singular when the smallest singular value of the dimensionless reduced
Jacobian (unknown coordinates, spherical joints by rotation increments) falls below
``SINGULAR_RATIO`` of the largest, as in the solver.  The cheap certificate
``det(G) / |G|_F^g`` (``G`` the Gram matrix of the normal equations) bounds that ratio
from below, so the SVD is only computed where the certificate cannot exclude it.  A dead
point crossed *between* samples is caught from ``s = sqrt(det G / |G|_F^g)``, which
behaves like ``|t - t0|`` near a simple singularity: where ``s`` has a local minimum and
the straight lines through the two samples on each side meet near ``s = 0`` with a
V-shaped (linear-sided) profile, the minimum sample is flagged.
"""
from __future__ import annotations

import csv
import math
import os

import numpy as np

from . import kinematics, linalg, spatial
from .errors import AssemblyError, JointwiseError, LimitError, Reason, SpecError
from .linalg import branch_step_certified, orientation_agrees, orientation_frame
from .results import Note, Sweep
from .units import CHUNK, NOISE_STEP, ORIENT_RATIO, SINGULAR_RATIO, TOLERANCE

__all__ = ["Sweep", "sweep", "follow", "sweep_schedule", "reach", "read_schedule_csv",
           "ANCHOR_STEP", "REFINE_STEP"]

#: Largest held motion between anchors solved one after another (dimensionless).
ANCHOR_STEP = 0.8
#: The anchor walk steps over up to this many anchors at once while its predictor is right:
#: a correction of at most ``ANCHOR_GROW`` of the step doubles the stride (a second-order
#: predictor's miss grows as the cube of the step, so the doubled step still passes).
ANCHOR_STRIDE = 32
ANCHOR_GROW = 0.01
#: Largest held motion between points of the refinement level (dimensionless).
REFINE_STEP = 0.1
#: Spacing of the second refinement level, from which every sample is interpolated.
FINE_STEP = 0.006
#: Batched Newton iterations per level.
BATCH_ITER = 6
#: The last level keeps its closed seeds' Jacobians for the branch proof when they take at
#: most this many entries (32 MiB); longer or larger sweeps evaluate them again there.
KEEP_JACOBIANS = 1 << 22
#: The chord test of a step (:func:`_chord_certified`) passes where the chord map's
#: estimated contraction over the ball it needs is at most this; the argument needs
#: below 1/2 (:mod:`jointwise.linalg`, "branch continuity", point 3): a margin of four.
CHORD_CONTRACTION = 0.125


# the batched evaluator lives in kinematics (``_Evaluator``: its old name here, which tests
# and benchmarks use), the stacked linear algebra in linalg
_Evaluator = kinematics.Evaluator
_tangent = kinematics.tangent
_least_norm = linalg.least_norm


# ---------------------------------------------------------------------------------------
# the continuation engine
# ---------------------------------------------------------------------------------------

class _Context:
    """Held set and evaluators for one sweep."""

    def __init__(self, mech, held_masters):
        self.m = mech
        self.s = mech.solver
        self.held_masters = set(held_masters)
        self.evs = [_Evaluator(mech, b, self.held_masters) for b in self.s.blocks]


def _held_set(mech, explicit, release):
    """Masters held in a run, as Solver.pose would: explicit ones, plus (unless released)
    the file's drives outside blocks where a passive coordinate is given."""
    s, ct = mech.solver, mech.coupling_table
    held = {int(ct.master[i]) for i in explicit}
    if release:
        return held, []
    extra = s.kept_drives(explicit)
    return held | {int(ct.master[i]) for i in extra}, extra


def _run(mech, explicit, N, q0, release):
    """Solve N steps with coordinates ``explicit`` {index: (N,) internal} held.

    Returns (Q (N, n), converged, singular, residual, reasons)."""
    s, ct = mech.solver, mech.coupling_table
    held_m, extra = _held_set(mech, explicit, release)
    # targets per master, checking couplings for contradictions (the coupling table's rule)
    target, source = {}, {}
    try:
        for i, v in list(explicit.items()) + [(i, np.full(N, q0[i])) for i in extra]:
            ct.hold(target, source, i, np.asarray(v, float))
    except AssemblyError as exc:  # refused held values of a sweep: a usage error (exit 2), as always
        err = JointwiseError(str(exc))
        err.reason = exc.reason
        raise err from None
    ctx = _Context(mech, held_m)
    Q = np.tile(q0, (N, 1))
    for g, v in target.items():
        Q[:, g] = v
    mech.coupling_table.derive(Q, list(target))
    conv = np.ones(N, bool)
    resid = np.zeros(N)
    reasons = {}
    good = np.ones(N, bool)
    explicit_rows = explicit
    for bi, ev in enumerate(ctx.evs):
        if not ev.cols_rot and not ev.held:
            # nothing moves in this block: check closure once
            continue
        ok, err, rs = _run_block(ctx, ev, Q, target, q0, explicit_rows, release)
        good &= ok
        resid = np.maximum(resid, err)
        reasons.update({k: v for k, v in rs.items() if k not in reasons})
    # limits of every coordinate
    lim_bad = np.zeros(N, bool)
    for i, c in enumerate(mech.coordinates):
        j = mech.joints[mech.owner[c]]
        lim = j.limits[i - mech.slices[j.name].start]
        if lim is None:
            continue
        slack = 1e-9 / s.qerr[i]  # radian, or a fraction of the mechanism's size
        bad = (Q[:, i] < lim[0] - slack) | (Q[:, i] > lim[1] + slack)
        for k in np.flatnonzero(bad & good & ~lim_bad):
            u = mech.unit_scale(i)
            reasons[int(k)] = Note(f"limit of joint {j.name}" + (f" ({c})" if c != j.name else ""),
                                   Reason("limit", joint=c, value=float(Q[k, i] / u),
                                          bounds=(lim[0] / u, lim[1] / u), unit=mech.unit_name(i),
                                          held=int(ct.master[i]) in target))
        lim_bad |= bad
    conv = good & ~lim_bad
    # singular flags on the solved states
    sing = np.zeros(N, bool)
    for ev in ctx.evs:
        if ev.cols_rot:
            sing |= _singular_flags(ev, Q, conv)
        crossed = getattr(ev, "crossed", None)
        if crossed is not None:
            sing |= crossed & conv
    # failed steps repeat the last good pose (or the start)
    if not conv.all():
        idx = np.where(conv, np.arange(N), -1)
        last = np.maximum.accumulate(idx)
        Qf = Q.copy()
        for k in np.flatnonzero(~conv):
            Qf[k] = Q[last[k]] if last[k] >= 0 else q0
        Q = Qf
        sing &= conv
    return Q, conv, sing, resid, reasons, held_m


def _dimless_path(ev, Hm):
    """Cumulative dimensionless held motion along the steps (N,)."""
    N = Hm.shape[0]
    if not ev.held:
        return np.zeros(N)
    sc = np.array([ev.s.cscale[g] for g in ev.held])
    d = np.abs(np.diff(Hm * sc, axis=0)).max(axis=1) if N > 1 else np.zeros(0)
    return np.concatenate([[0.0], np.cumsum(d)])


def _idle_tangents(ev, Q, Hm, known, ok, Tall):
    """Give the tangents at known samples the idle motion the path really has.

    Where the loops leave a freedom no held value determines (the spin of a rod between
    two ball joints), the least-norm tangent has none of it, while the solved path drifts
    along it; Hermite seeds built from such tangents miss closure by the square of that
    drift.  The idle part of each tangent is replaced by that of the central secant
    through the neighbouring known samples (dimensionless coordinates, null space of the
    reduced Jacobian)."""
    good = known[ok[known]]
    if len(good) < 3 or len(ev.held) != 1:
        return
    cols = ev.cols_coord
    nu = len(cols)
    cs = ev._cscale(cols)
    _, _, J = ev.eval(Q[good[1:-1]], cols, rotmode=False)
    Js = J * ev.rs[None, :, None] * cs[None, None, :]
    mrow = Js.shape[1]
    # rows whose Gram certificate proves full rank need no SVD: the certificate is at most
    # (s_min / s_max)^2, and above 1e-10 the solve's shift (1e-13) cannot have raised it
    # from below the SVD's cut (1e-8)^2.  Full column rank: no idle freedom.  Full row
    # rank: the idle part of x is x - J^T (J J^T)^-1 J x (the projection on the null space).
    tall = nu <= mrow
    fac = linalg.least_norm_factor(Js)
    full = fac[2][2] > 1e-10
    keep = np.flatnonzero(~full)
    if tall and not len(keep):
        return
    rank = np.full(Js.shape[0], nu if tall else mrow)
    if len(keep):
        _, sv, vt = np.linalg.svd(Js[keep], full_matrices=True)
        rank[keep] = (sv > 1e-8 * np.maximum(sv[:, :1], 1e-300)).sum(axis=1)
    if not (rank < nu).any():
        return
    ci = [c[1] for c in cols]
    prev, mid, nxt = good[:-2], good[1:-1], good[2:]
    dh = (Hm[nxt, 0] - Hm[prev, 0])
    use = np.abs(dh) > 0
    sec = (Q[nxt][:, ci] - Q[prev][:, ci]) / np.where(use, dh, 1.0)[:, None] / cs[None, :]
    T = Tall[mid][:, :, 0] / cs[None, :]
    if not tall and full.any():
        x = np.where((full & use)[:, None], sec - T, 0.0)
        Jx = np.einsum("bmk,bk->bm", Js, x)[:, :, None]
        T += x - linalg.least_norm_apply(fac, Jx)[:, :, 0]
        rank[full] = nu  # done
    if len(keep):
        vt_all = np.zeros((Js.shape[0], nu, nu))
        vt_all[keep] = vt
        vt = vt_all
    for r in np.unique(rank[rank < nu]):
        k = np.flatnonzero((rank == r) & use)
        if not len(k):
            continue
        N = vt[k, r:, :]  # (K, nu - r, nu): orthonormal idle directions
        coef = np.einsum("kij,kj->ki", N, sec[k] - T[k])
        T[k] += np.einsum("kij,ki->kj", N, coef)
    Tall[mid, :, 0] = T * cs[None, :]


def _newton(ev, Q, idx, iters=BATCH_ITER, first=None, final=None):
    """Batched Gauss-Newton on rows ``idx`` of Q (in place).  Returns err per row of idx.
    ``first``: the evaluation ``(r, e, J)`` of those rows (rotation-increment columns), if
    already made.  ``final`` (len(idx), rows, columns): filled with the Jacobian at each
    row's last state where it closed (every evaluation then carries the Jacobian)."""
    if len(idx) > CHUNK:
        return np.concatenate([_newton(ev, Q, idx[k:k + CHUNK], iters,
                                       None if first is None else tuple(x[k:k + CHUNK] for x in first),
                                       None if final is None else final[k:k + CHUNK])
                               for k in range(0, len(idx), CHUNK)])
    cols = ev.cols_rot
    cs = ev._cscale(cols)
    active = np.arange(len(idx))
    errs = np.full(len(idx), np.inf)
    for it in range(iters + 1):
        rows = idx[active]
        sub = Q[rows]
        last = it == iters
        if it == 0 and first is not None:
            r, e, J = first
        elif it == 0 or final is not None:
            r, e, J = ev.eval(sub, cols)
        elif last:
            r, e, J = ev.eval(sub)
        else:  # residuals first: rows that closed need no Jacobian
            r, e, _ = ev.eval(sub)
            J = None
        errs[active] = e
        keep = e > TOLERANCE
        if final is not None and J is not None:
            final[active[~keep]] = J[~keep]
        if last or not keep.any() or not cols:
            break
        sub_a = sub[keep]
        if J is None:
            r_k, _, J_k = ev.eval(sub_a, cols)
        else:
            r_k, J_k = r[keep], J[keep]
        Js = J_k * ev.rs[None, :, None] * cs[None, None, :]
        du, _ = _least_norm(Js, -(r_k * ev.rs[None, :])[:, :, None])
        du = du[:, :, 0]
        big = np.abs(du).max(axis=1)
        du *= np.minimum(1.0, 0.5 / np.maximum(big, 1e-300))[:, None]
        ev.apply(sub_a, du * cs[None, :], cols)
        Q[rows[keep]] = sub_a
        active = active[keep]
    return errs


def _distance(ev, A, Bq):
    """Largest dimensionless coordinate difference between state stacks (B,)."""
    sc = ev.s.cscale
    idx = sorted({i for g in ev.block.groups for i in ev.m.coupling_table.members[g]})
    if not idx:
        return np.zeros(A.shape[0])
    d = A[:, idx] - Bq[:, idx]
    ang = ~ev.s.is_length[idx]
    d[:, ang] = (d[:, ang] + np.pi) % (2 * np.pi) - np.pi  # a whole turn is the same placement
    return (np.abs(d) * sc[idx]).max(axis=1)


def _hermite(ev, Q, Hm, path, a, b, idx, Ta, Tb):
    """Seed rows idx (a < idx < b) by cubic Hermite between anchors a, b (arrays)."""
    u = (path[idx] - path[a]) / np.maximum(path[b] - path[a], 1e-300)
    u = np.where(path[b] > path[a], u, (idx - a) / np.maximum(b - a, 1))
    dH = Hm[b] - Hm[a]  # (K, nh)
    u2 = u * u
    u3 = u2 * u
    h00 = 2 * u3 - 3 * u2 + 1
    h10 = u3 - 2 * u2 + u
    h01 = -2 * u3 + 3 * u2
    h11 = u3 - u2
    ci = [c[1] for c in ev.cols_coord]
    if dH.shape[1] == 1:
        ma = Ta[:, :, 0] * dH
        mb = Tb[:, :, 0] * dH
    else:
        ma = np.einsum("kch,kh->kc", Ta, dH)
        mb = np.einsum("kch,kh->kc", Tb, dH)
    qa, qb = Q[a[:, None], ci], Q[b[:, None], ci]
    ang = ~ev.s.is_length[ci]
    # the turn of qb nearest to what the tangents predict (qa + (ma + mb) / 2): anchors many
    # turns apart (a screw's nut) keep their turns; close anchors take the same turn
    est = 0.5 * (ma[:, ang] + mb[:, ang])
    qb[:, ang] = qa[:, ang] + est + (qb[:, ang] - qa[:, ang] - est + np.pi) % (2 * np.pi) - np.pi
    out = h00[:, None] * qa + h10[:, None] * ma + h01[:, None] * qb + h11[:, None] * mb
    Q[np.ix_(idx, ci)] = out
    ev.m.coupling_table.derive(Q, ci)
    ev.m.coupling_table.derive(Q, ev.held)


def _run_block(ctx, ev, Q, target, q0, explicit, release):
    """Solve one block's rows (anchors, refinement, fix-up, branch proof); see the module
    notes.  Returns (ok, residual, reasons)."""
    ok, err, reasons = _run_block_once(ctx, ev, Q, target, q0, explicit, release)
    if ev.restart is not None:
        _rerun_tail(ctx, ev, Q, target, explicit, release, ok, err, reasons, ev.restart)
    bad = ~ok
    if bad.any():
        for k in np.flatnonzero(bad):
            reasons.setdefault(int(k), Note("the loops do not close there", Reason("unreachable")))
    return ok, np.where(np.isfinite(err), err, 0.0), reasons


def _run_block_once(ctx, ev, Q, target, q0, explicit, release):
    s = ctx.s
    N = Q.shape[0]
    Hm = np.stack([target[g] for g in ev.held], axis=1) if ev.held else np.zeros((N, 0))
    path = _dimless_path(ev, Hm)
    ok = np.zeros(N, bool)
    err = np.full(N, np.inf)
    reasons = {}

    def pose_one(i, qstart, info=False):
        held = {k: float(v[i]) for k, v in explicit.items()}
        try:
            qn, inf = s.pose(held, qstart, release=release)
        except LimitError as exc:
            out = None, Note(f"limit: {exc}", exc.reason)
        except JointwiseError as exc:
            out = None, Note(str(exc), getattr(exc, "reason", None) or Reason("unreachable"))
        else:
            if not inf["converged"]:
                out = None, Note(f"the loops do not close (residual {inf['residual']:.3g})",
                                 Reason("unreachable", error=inf["residual"]))
            else:
                out = qn, None
        if info:
            # the continuation passed a singular point, or an accepted state as near one as the
            # singular flag reads, or ends at one
            return out + ((out[0] is not None and bool(inf.get("crossed_singular") or inf["singular"] or
                                                     inf.get("passed_near_singular"))),)
        return out

    # -- 1. anchors, one after another -----------------------------------------------
    marks = np.arange(0.0, path[-1] + ANCHOR_STEP, ANCHOR_STEP) if N > 1 else np.zeros(1)
    anchors = np.unique(np.concatenate([[0], np.searchsorted(path, marks, side="left").clip(0, N - 1), [N - 1]]))
    cols = ev.cols_rot
    prev_q = q0.copy()
    prev_T = None
    prev_i = None
    pprev_i = None
    blocked = None
    # the walk may step over anchors while the predictor is right (``stride``, doubled
    # after a correction below ANCHOR_GROW of the step, back to 1 after a miss); the
    # anchors stepped over are solved with the refinement level, batched
    visited = []
    pos, prev_pos, stride = 0, None, 1
    while pos < len(anchors):
        i = int(anchors[pos])
        done = False
        grow = False
        if prev_i is not None and ok[prev_i] and cols:
            trial = Q[i:i + 1].copy()
            trial[0, :] = Q[prev_i]
            for g in ev.held:
                trial[0, g] = Q[i, g]
            ev.m.coupling_table.derive(trial, ev.held)
            if prev_T is not None and ev.cols_coord:
                ci = [c[1] for c in ev.cols_coord]
                trial[0, ci] += prev_T[0] @ (Hm[i] - Hm[prev_i])
                if pprev_i is not None and path[prev_i] > path[pprev_i]:
                    # second order: the curvature that the anchor before implies
                    back = Q[pprev_i, ci] - Q[prev_i, ci] - prev_T[0] @ (Hm[pprev_i] - Hm[prev_i])
                    ds0 = path[pprev_i] - path[prev_i]
                    ds1 = path[i] - path[prev_i]
                    bend = back * (ds1 / ds0) ** 2
                    if np.all(np.isfinite(bend)):
                        trial[0, ci] += bend
                ev.m.coupling_table.derive(trial, ci)
            before = trial.copy()
            e = _newton(ev, trial, np.array([0]), iters=10)
            moved = _distance(ev, before, trial)[0]
            stepd = path[i] - path[prev_i]
            if e[0] <= TOLERANCE and moved <= max(0.2 * stepd, 1e-4):
                Q[i] = trial[0]
                ok[i], err[i] = True, e[0]
                done = True
                grow = moved <= ANCHOR_GROW * stepd
            elif stride > 1:  # a long step missed: back to every anchor after the last good one
                pos, stride = prev_pos + 1, 1
                continue
        visited.append(i)
        if not done and _blocked(blocked, Hm, prev_i, i):
            reasons[i] = blocked[2]
            pos += 1
            continue
        if not done:
            start = Q[prev_i] if (prev_i is not None and ok[prev_i]) else prev_q
            qn, why = pose_one(i, start)
            if qn is None and len(ev.held) == 1:
                blocked = (prev_i, i, why)
            if qn is not None:
                Q[i] = qn
                ok[i] = True
                err[i] = ev.eval(Q[i:i + 1])[1][0]
            else:
                reasons[i] = why
        if ok[i]:
            prev_T = _tangent(ev, Q[i:i + 1])
            pprev_i = prev_i if done else None
            prev_i = i
            prev_pos = pos
            prev_q = Q[i].copy()
            stride = min(2 * stride, ANCHOR_STRIDE) if grow else 1
        else:
            stride = 1
        if pos == len(anchors) - 1:
            break
        pos = min(pos + stride, len(anchors) - 1)
    anchors = np.array(visited, dtype=int)
    # tangents at anchors
    nh = len(ev.held)
    Tall = np.zeros((N, len(ev.cols_coord), nh))
    good_a = anchors[ok[anchors]]
    if len(good_a) and ev.cols_coord:
        Tall[good_a] = _tangent(ev, Q[good_a])

    # -- 2. refinement levels, then every sample -------------------------------------------
    known = anchors.copy()
    kept = None  # (row -> position or -1, scaled Jacobians): closed seeds of the last level
    levels = [st for st in (REFINE_STEP, FINE_STEP) if st < ANCHOR_STEP] + [0.0]
    last_level = known
    for stepsize in levels:
        if stepsize > 0:
            marks = np.arange(0.0, path[-1] + stepsize, stepsize)
            level = np.unique(np.searchsorted(path, marks).clip(0, N - 1))
        else:
            level = np.arange(N)
        isknown = np.zeros(N, bool)
        isknown[known] = True
        level = level[~isknown[level]]
        if not len(level):
            continue
        pos = np.searchsorted(known, level)
        a = known[np.clip(pos - 1, 0, len(known) - 1)]
        b = known[np.clip(pos, 0, len(known) - 1)]
        inside = (pos > 0) & (pos < len(known))
        pair_ok = inside & ok[a] & ok[b]
        sel = level[pair_ok]
        if not len(sel):
            continue
        aa, bb = a[pair_ok], b[pair_ok]
        if stepsize == 0.0 and ev.cols_coord:
            _idle_tangents(ev, Q, Hm, known, ok, Tall)
        if ev.cols_coord:
            _hermite(ev, Q, Hm, path, aa, bb, sel, Tall[aa], Tall[bb])
        spacing = np.maximum(path[bb] - path[aa], 1e-12)
        first = None
        if stepsize == 0.0:
            # every sample: the Hermite seed is usually closed already; verify, then correct.
            # The Jacobians of the closed seeds are kept for the branch proof (their rows do
            # not change again) when they fit in KEEP_JACOBIANS entries
            keep = bool(ev.cols_rot) and N * 6 * ev.nl * len(ev.cols_rot) <= KEEP_JACOBIANS
            r, e, J = ev.eval(Q[sel], ev.cols_rot if keep else None)
            err[sel] = e
            fine = e <= TOLERANCE
            ok[sel[fine]] = True
            if keep:
                Jf = J[fine]
                Jf *= ev.rs[None, :, None]
                Jf *= ev._cscale(ev.cols_rot)[None, None, :]  # as _scale_jacobian, in place
                kept = (np.full(N, -1), Jf)
                kept[0][sel[fine]] = np.arange(int(fine.sum()))
                first = (r[~fine], e[~fine], J[~fine])  # the corrector's first evaluation
            sel, spacing = sel[~fine], spacing[~fine]
            if not len(sel):
                continue
        before = Q[sel].copy()
        final = None if first is None else np.empty_like(first[2])
        e = _newton(ev, Q, sel, first=first, final=final)
        moved = _distance(ev, before, Q[sel])
        good = (e <= TOLERANCE) & (moved <= np.maximum(0.1 * spacing, 1e-6))
        ok[sel[good]] = True
        if final is not None and good.any():  # their Jacobians join the kept ones
            Jg = final[good]
            Jg *= ev.rs[None, :, None]
            Jg *= ev._cscale(ev.cols_rot)[None, None, :]
            kept[0][sel[good]] = len(kept[1]) + np.arange(len(Jg))
            kept = (kept[0], np.concatenate([kept[1], Jg]))
        err[sel] = e
        gs = sel[good]
        if stepsize > 0 and len(gs) and ev.cols_coord:
            Tall[gs] = _tangent(ev, Q[gs])
        if stepsize > 0:
            known = np.union1d(known, gs)
            last_level = known
    ev.last_level = last_level

    # -- 3. sequential fix-up of what is left -------------------------------------------
    todo = np.flatnonzero(~ok)
    if len(todo):
        _fixup(ev, Q, ok, err, reasons, todo, pose_one, q0)
    # -- 4. every step between closed rows proven to stay on the branch ---------------
    ev.crossed, ev.restart = _prove_branch(ev, Q, ok, err, reasons, pose_one, kept)
    return ok, err, reasons


def _blocked(blocked, Hm, prev_i, i):
    """True when continuing from anchor ``prev_i`` to ``i`` must pass a held value where it
    already failed from that same anchor (one held coordinate): the first failure stops
    the walk into an unreachable stretch, so its cost is that of one failed solve."""
    if blocked is None or blocked[0] != prev_i or prev_i is None or Hm.shape[1] != 1:
        return False
    h0, hf, hi = Hm[prev_i, 0], Hm[blocked[1], 0], Hm[i, 0]
    return (hf - h0) * (hi - h0) > 0 and abs(hi - h0) >= abs(hf - h0)


def _rerun_tail(ctx, ev, Q, target, explicit, release, ok, err, reasons, restart):
    """Solve rows after ``restart`` again, batched, continuing from the proven row
    ``restart`` (whose batched neighbours were on another branch); repeats while the new
    tail needs it, so the work stays batched however many times that happens."""
    crossed = ev.crossed
    levels = [np.asarray(getattr(ev, "last_level", []))]
    while restart is not None:
        sub = slice(restart, Q.shape[0])
        Qs = Q[sub].copy()
        ok_s, err_s, rs_s = _run_block_once(
            ctx, ev, Qs, {g: v[sub] for g, v in target.items()}, Q[restart].copy(),
            {k: v[sub] for k, v in explicit.items()}, release)
        Q[sub], ok[sub], err[sub] = Qs, ok_s, err_s
        for k in [k for k in reasons if k >= restart]:
            del reasons[k]
        reasons.update({restart + k: v for k, v in rs_s.items()})
        crossed[sub] |= ev.crossed
        levels = [lv[lv < restart] for lv in levels] + [np.asarray(ev.last_level) + restart]
        restart = None if ev.restart is None else restart + ev.restart
    ev.crossed = crossed
    ev.last_level = np.unique(np.concatenate(levels)).astype(int)
    ev.restart = None


def _fixup(ev, Q, ok, err, reasons, todo, pose_one, q0):
    """Solve failed steps one by one, walking outward from good neighbours."""
    N = Q.shape[0]
    # runs of consecutive failed steps
    runs = np.split(todo, np.flatnonzero(np.diff(todo) > 1) + 1)
    for run in runs:
        lo, hi = int(run[0]), int(run[-1])
        left = lo - 1 if lo > 0 and ok[lo - 1] else None
        right = hi + 1 if hi < N - 1 and ok[hi + 1] else None
        if left is None and right is None:
            # no good neighbour: walk from the start state
            seq, start = range(lo, hi + 1), q0
            for i in seq:
                qn, why = pose_one(i, start)
                if qn is None:
                    reasons[i] = why
                    break
                Q[i], ok[i] = qn, True
                err[i] = ev.eval(Q[i:i + 1])[1][0]
                start = qn
            continue
        stop_l = hi + 1
        if left is not None:
            start = Q[left]
            for i in range(lo, hi + 1):
                qn, why = pose_one(i, start)
                if qn is None:
                    reasons[i] = why
                    stop_l = i
                    break
                Q[i], ok[i] = qn, True
                err[i] = ev.eval(Q[i:i + 1])[1][0]
                start = qn
        if right is not None:
            start = Q[right]
            for i in range(hi, stop_l - 1 if left is not None else lo - 1, -1):
                if ok[i]:
                    break
                qn, why = pose_one(i, start)
                if qn is None:
                    reasons.setdefault(i, why)
                    break
                Q[i], ok[i] = qn, True
                err[i] = ev.eval(Q[i:i + 1])[1][0]
                start = qn


def _certificate(ev, Q, want_js=True):
    """(certificate det(G)/|G|_F^g, Js) at states Q, rotation-increment columns."""
    if not want_js and Q.shape[0] > CHUNK:
        return np.concatenate([_certificate(ev, Q[k:k + CHUNK], False)[0]
                               for k in range(0, Q.shape[0], CHUNK)]), None
    cols = ev.cols_rot
    cs = ev._cscale(cols)
    _, _, J = ev.eval(Q, cols)
    Js = J * ev.rs[None, :, None] * cs[None, None, :]
    B, mr, nc = Js.shape
    Jt = np.swapaxes(Js, 1, 2)
    G = linalg.tmul(Js, Js) if nc <= mr else linalg.tmul(Jt, Jt)
    cert = linalg.chol_factor(G)[2]
    return cert, Js


def _singular_flags(ev, Q, conv):
    """Singular flags of every step (see the module notes).

    The certificate is computed exactly at the points of the last refinement level and
    interpolated between them; wherever the interpolated value comes within a factor 30 of
    the threshold (or a level point is a local minimum) it is computed exactly."""
    N = Q.shape[0]
    coarse = getattr(ev, "last_level", None)
    sq = np.zeros(N)
    exact = np.zeros(N, bool)
    if coarse is not None and len(coarse) >= 3 and len(coarse) < N // 2:
        coarse = np.asarray(coarse)
        c_cert, _ = _certificate(ev, Q[coarse], False)
        c_sq = np.sqrt(np.maximum(c_cert, 0.0))
        sq = np.interp(np.arange(N), coarse, c_sq)
        exact[coarse] = True
        sq[coarse] = c_sq
        cand = sq < 30 * SINGULAR_RATIO
        # around local minima of the level sequence, evaluate every sample
        lm = np.flatnonzero((c_sq[1:-1] <= c_sq[:-2]) & (c_sq[1:-1] <= c_sq[2:])) + 1
        for k in lm:
            cand[coarse[max(k - 2, 0)]:coarse[min(k + 2, len(coarse) - 1)] + 1] = True
        cand &= ~exact
        if cand.any():
            idx = np.flatnonzero(cand)
            cc, _ = _certificate(ev, Q[idx], False)
            sq[idx] = np.sqrt(np.maximum(cc, 0.0))
            exact[idx] = True
    else:
        cc, _ = _certificate(ev, Q, False)
        sq = np.sqrt(np.maximum(cc, 0.0))
        exact[:] = True
    flag = np.zeros(N, bool)
    maybe = exact & (sq * sq < SINGULAR_RATIO ** 2)
    full_rank = True
    if maybe.any():
        idx = np.flatnonzero(maybe)
        svs = []
        for k in range(0, len(idx), CHUNK):
            _, Js = _certificate(ev, Q[idx[k:k + CHUNK]])
            svs.append(np.linalg.svd(Js, compute_uv=False))
        sv = np.concatenate(svs)
        top = np.maximum(sv[:, :1], 1e-300)
        # the generic rank from this sweep's own rows: the suspects and a spread sample of its
        # closed rows (almost surely regular), so the flags depend on nothing seen before
        closed = np.flatnonzero(conv)
        spread = closed[np.linspace(0, len(closed) - 1, min(len(closed), 8)).astype(int)]
        _, Jr = _certificate(ev, Q[spread]) if len(spread) else (None, np.zeros((0,) + Js.shape[1:]))
        svr = np.linalg.svd(Jr, compute_uv=False) if len(Jr) else sv[:0]
        rank = int((sv > 1e-9 * top).sum(axis=1).max())
        if len(svr):
            rank = max(rank, int((svr > 1e-9 * np.maximum(svr[:, :1], 1e-300)).sum(axis=1).max()))
        rank = max(rank, 1)
        flag[idx] = sv[:, rank - 1] / top[:, 0] < SINGULAR_RATIO
        full_rank = rank == sv.shape[1]
    # dead points crossed between samples: V-shaped minimum of sqrt(certificate)
    if full_rank and N >= 5:
        i = np.arange(2, N - 2)
        c = sq[i]
        lmin = (c <= sq[i - 1]) & (c <= sq[i + 1]) & exact[i] & conv[i - 2] & conv[i - 1] \
            & conv[i] & conv[i + 1] & conv[i + 2]
        for k in i[lmin]:
            y = sq[k - 2:k + 3]
            sl, sr = y[1] - y[0], y[4] - y[3]  # slopes of the outer secants
            if not (sl < 0 < sr):
                continue
            # lines through (-2, y0), (-1, y1) and (1, y3), (2, y4), x relative to k
            t = ((y[3] - sr) - (y[1] + sl)) / (sl - sr)
            ymeet = y[1] + sl * (t + 1)
            inner_l, inner_r = y[2] - y[1], y[3] - y[2]
            linear = abs(inner_l) <= 1.5 * abs(sl) and abs(inner_r) <= 1.5 * abs(sr)
            scale = max(y[0], y[4])
            if linear and -1.0 <= t <= 1.0 and abs(ymeet) <= 0.05 * scale and y[2] < 0.5 * scale:
                flag[k] = True
    return flag


# ---------------------------------------------------------------------------------------
# branch continuity, proven per step
# ---------------------------------------------------------------------------------------

def _rot_diff(ev, A, Bq):
    """Dimensionless difference Bq - A over the rotation-increment columns (B, ncols):
    coordinate differences (angles within half a turn) scaled, and for free spherical
    joints the world rotation vector log(R_B R_A^T) (the increment :meth:`apply` adds)."""
    s = ev.s
    cols = ev.cols_rot
    out = np.zeros((A.shape[0], len(cols)))
    rots = {}
    for ci, c in enumerate(cols):
        if c[0] == "m":
            d = Bq[:, c[1]] - A[:, c[1]]
            if not s.is_length[c[1]]:
                d = (d + np.pi) % (2 * np.pi) - np.pi
            out[:, ci] = d * s.cscale[c[1]]
        else:
            if c[1] not in rots:
                sl = ev.m.slices[c[1]]
                ra = _joint_rotation(ev, c[1], A[:, sl])
                rb = _joint_rotation(ev, c[1], Bq[:, sl])
                rots[c[1]] = spatial.log3(rb @ np.swapaxes(ra, 1, 2))
            out[:, ci] = rots[c[1]][:, c[2]]
    return out


def _joint_rotation(ev, jn, q):
    return kinematics.joint_rotations(ev.prims[jn], q)


def _certify_pairs(ev, Qa, Qb, Jsa=None, Jsb=None):
    """Per pair of closed states: (proven, same_orientation, degenerate), bool arrays (B,).

    ``proven``: ``Qb`` is the Newton limit from the predictor at ``Qa`` (Kantorovich-style
    uniqueness, so it continues ``Qa``); ``same_orientation``: the solved block keeps
    its orientation (see :mod:`jointwise.linalg`, "branch continuity"); ``degenerate``:
    the orientation at ``Qa`` is undefined (a singular state).  Proven with the
    orientation changed means the step passed a singular point (a change point).

    Vectorised over pairs, with no SVD where the solved block has full rank:
    the orientation test det(U^T J_b V) > 0 equals det(J_a^T J_b) > 0 (or det(J_a J_b^T)
    for a wide block), since J_a = U S V^T.  There the step is first tried with the chord
    test (:func:`_chord_certified`: the Jacobians at both states and one residual at the
    predictor); pairs it does not pass get the Newton test at the predictor
    (:func:`_newton_certified`).  ``Jsa``, ``Jsb``: scaled Jacobians at the states, if
    already evaluated."""
    B = Qa.shape[0]
    cols = ev.cols_rot
    if not cols or B == 0:
        return np.ones(B, bool), np.ones(B, bool), np.zeros(B, bool)
    if B > CHUNK:
        parts = [_certify_pairs(ev, Qa[k:k + CHUNK], Qb[k:k + CHUNK],
                                None if Jsa is None else Jsa[k:k + CHUNK],
                                None if Jsb is None else Jsb[k:k + CHUNK]) for k in range(0, B, CHUNK)]
        return tuple(np.concatenate([p[j] for p in parts]) for j in range(3))
    if Jsa is None:
        Jsa = _scaled_jacobian(ev, Qa)
    if Jsb is None:
        Jsb = _scaled_jacobian(ev, Qb)
    mrow, k = Jsa.shape[1:]
    rank = _block_rank(ev, Jsa)
    if rank == k:
        G, M = linalg.tmul(Jsa, Jsa), linalg.tmul(Jsa, Jsb)
    elif rank == mrow:
        Jt = np.swapaxes(Jsa, 1, 2)
        G, M = linalg.tmul(Jt, Jt), linalg.tmul(Jt, np.swapaxes(Jsb, 1, 2))
    else:
        frame = orientation_frame(Jsa, rank)
        return _newton_certified(ev, Qa, Qb, rank, k), orientation_agrees(frame, Jsb), frame[2] < ORIENT_RATIO
    # how well the orientation is defined: det(G) against |G|^g (the engine's certificate)
    fac = linalg.chol_factor(G)
    degenerate = fac[2] < 1e-10  # about (s_min / s_max)^2 < 1e-10 (the solve floors it near 1e-13)
    same = (linalg.det_stack(M) > 0) | degenerate
    parts = _independent_parts(ev)
    if len(parts) > 1:
        # the block's determinant is the product of its independent parts': two parts that
        # turn together (two four-bars on one driven crank both flipping to their mirrored
        # assemblies in one step) keep its sign, so each part's orientation is read on its own
        for rows, cls in parts:
            a, b = Jsa[:, rows][:, :, cls], Jsb[:, rows][:, :, cls]
            if rank != k:
                a, b = np.swapaxes(a, 1, 2), np.swapaxes(b, 1, 2)
            same &= (linalg.det_stack(linalg.tmul(a, b)) > 0) | degenerate
    ok = _chord_certified(ev, Qa, Qb, Jsa, Jsb, fac, M, rank == k) & ~degenerate
    if not ok.all():
        slow = np.flatnonzero(~ok)
        ok[slow] = _newton_certified(ev, Qa[slow], Qb[slow], rank, k)
    return ok, same, degenerate


def _independent_parts(ev):
    """:func:`jointwise.linalg.independent_parts` of the evaluator's solved columns (from the
    loop plan's structure), kept on the evaluator (one sweep's columns)."""
    parts = getattr(ev, "_parts", None)
    if parts is None:
        plan = ev.s._plan(ev.block, ev.cols_rot, ev.rotj)
        parts = ev._parts = linalg.independent_parts(kinematics.loop_incidence(plan))
    return parts


def _predictor(ev, Qa, Qb):
    """The previous states ``Qa`` with the held values of ``Qb`` (and their coupled members)."""
    X0 = Qa.copy()
    if ev.held:
        X0[:, ev.held] = Qb[:, ev.held]
        ev.m.coupling_table.derive(X0, ev.held)
    return X0


def _newton_certified(ev, Qa, Qb, rank, k):
    """The Kantorovich-style test at the predictor (:func:`linalg.branch_step_certified`):
    the Newton increment d0 there and the next chord increment d1, both with the Jacobian
    at the predictor, against the distance from the predictor to ``Qb``."""
    if Qa.shape[0] == 0:
        return np.zeros(0, bool)
    cols = ev.cols_rot
    cs = ev._cscale(cols)
    rs = ev.rs
    X0 = _predictor(ev, Qa, Qb)
    r0, _, J0 = ev.eval(X0, cols)
    Js0 = J0 * rs[None, :, None] * cs[None, None, :]
    fac0 = linalg.least_norm_factor(Js0)  # one factorisation for both chord increments
    d0 = linalg.least_norm_apply(fac0, -(r0 * rs[None, :])[:, :, None])[:, :, 0]
    X1 = X0.copy()
    ev.apply(X1, d0 * cs[None, :], cols)
    r1 = ev.eval(X1)[0]
    d1 = linalg.least_norm_apply(fac0, -(r1 * rs[None, :])[:, :, None])[:, :, 0]
    diff = _rot_diff(ev, X0, Qb)
    if rank < k:  # idle freedoms (a coupler's spin) are not part of the branch: row-space part
        diff = linalg.least_norm_apply(fac0, (Js0 @ diff[:, :, None]))[:, :, 0]
    return branch_step_certified(np.linalg.norm(d0, axis=1), np.linalg.norm(d1, axis=1),
                                 np.linalg.norm(diff, axis=1))


def _chord_certified(ev, Qa, Qb, Jsa, Jsb, fac, M, tall):
    """The chord test of the branch continuity notes (:mod:`jointwise.linalg`, point 3):
    the chord increment ``d0 = -J_a^+ F(x0)`` at the predictor with the scaled Jacobian
    ``J_a`` at ``Qa`` (``fac``: the Cholesky factors of its Gram matrix, ``M`` the product
    with ``J_b`` that the orientation test uses), the contraction of the chord map
    estimated from the two ends, ``kappa = |J_a^+ (J_b - J_a)|_F`` times ``(|dh| + 2 |d0|)
    / |dh|`` (``dh`` the held step), at most ``CHORD_CONTRACTION``; and ``Qb`` within
    ``2 |d0|`` of the predictor, measured by an upper bound of the distance (an angle
    difference per primitive of a free ball joint)."""
    B, mrow, k = Jsa.shape
    rs = ev.rs
    X0 = _predictor(ev, Qa, Qb)
    r0 = ev.eval(X0)[0]
    rhs = -(r0 * rs[None, :])[:, :, None]
    if tall:
        d0 = linalg.chol_apply(fac, linalg.tmul(Jsa, rhs))[:, :, 0]
        P = linalg.chol_apply(fac, M)
        P[:, np.arange(k), np.arange(k)] -= 1.0  # J_a^+ J_b - I = J_a^+ (J_b - J_a)
        kappa = np.sqrt((P * P).sum(axis=(1, 2)))
    else:
        d0 = np.swapaxes(Jsa, 1, 2) @ linalg.chol_apply(fac, rhs)
        d0 = d0[:, :, 0]
        # |J_a^T G^-1 D|_F^2 = sum_c D_c^T G^-1 D_c  (G = J_a J_a^T, D = J_b - J_a)
        kappa = np.sqrt(np.maximum(linalg.chol_quad(fac, Jsb - Jsa), 0.0))
    nd0 = np.sqrt((d0 * d0).sum(axis=1))
    dh = _held_step(ev, Qa, Qb)
    reach = (dh + 2.0 * nd0) / np.maximum(dh, 1e-300)
    dist = _distance_bound(ev, Qa, Qb)
    return (kappa * reach <= CHORD_CONTRACTION) & (dist <= 2.0 * nd0 + 1e4 * NOISE_STEP) \
        & (nd0 > NOISE_STEP) & (dh > 0)


def _held_step(ev, Qa, Qb):
    """Dimensionless size of the held step between state stacks (B,)."""
    if not ev.held:
        return np.zeros(Qa.shape[0])
    sc = ev.s.cscale[ev.held]
    d = (Qb[:, ev.held] - Qa[:, ev.held]) * sc[None, :]
    return np.sqrt((d * d).sum(axis=1))


def _distance_bound(ev, Qa, Qb):
    """An upper bound of ``|_rot_diff(ev, Qa, Qb)|`` (B,): coordinate differences as there;
    a free ball joint's rotation difference ``|log(R_b R_a^T)|`` is at most the sum of its
    primitives' angle differences (the rotation angle is a bi-invariant distance on
    rotations, and the joint's rotation is the product of its primitives' rotations)."""
    s = ev.s
    acc = np.zeros(Qa.shape[0])
    seen = set()
    for c in ev.cols_rot:
        if c[0] == "m":
            d = Qb[:, c[1]] - Qa[:, c[1]]
            if not s.is_length[c[1]]:
                d = (d + np.pi) % (2 * np.pi) - np.pi
            d = d * s.cscale[c[1]]
            acc += d * d
        elif c[1] not in seen:
            seen.add(c[1])
            sl = ev.m.slices[c[1]]
            t = np.zeros(Qa.shape[0])
            for i, pr in zip(range(sl.start, sl.stop), ev.prims[c[1]]):
                if pr.rot:
                    t += np.abs((Qb[:, i] - Qa[:, i] + np.pi) % (2 * np.pi) - np.pi)
            acc += t * t
    return np.sqrt(acc)


def _scaled_jacobian(ev, Q):
    return _scale_jacobian(ev, ev.eval(Q, ev.cols_rot)[2])


def _scale_jacobian(ev, J):
    """The dimensionless Jacobian of the rotation-increment columns (rows by the residual
    scale, length columns by the mechanism size)."""
    return J * ev.rs[None, :, None] * ev._cscale(ev.cols_rot)[None, None, :]


def _block_rank(ev, Js):
    """Generic rank of the block's solved Jacobian (SVD of a few states, kept per block)."""
    key = ("orient", ev.block.index, tuple(ev.cols_rot))
    rank = ev.s._generic_rank.get(key)
    if rank is None or getattr(ev, "_rank_seen", 0) < 8:
        sample = Js[np.linspace(0, len(Js) - 1, min(len(Js), 8)).astype(int)]
        sv = np.linalg.svd(sample, compute_uv=False)
        r = int((sv > 1e-9 * np.maximum(sv[:, :1], 1e-300)).sum(axis=1).max())
        rank = max(r, rank or 0)
        ev.s._generic_rank[key] = rank
        ev._rank_seen = getattr(ev, "_rank_seen", 0) + len(sample)
    return rank


def _prove_branch(ev, Q, ok, err, reasons, pose_one, kept=None):
    """Check every step between neighbouring closed rows; re-solve unproven ones.

    A row whose step from the last closed row is not certified by :func:`_certify_pairs`
    is solved again from that row by :meth:`Solver.pose`, whose continuation accepts only
    certified sub-steps.  Where the re-solved state differs, the following rows are checked
    against it in turn.  Returns the rows where the continuation passed a singular point
    (to be flagged singular) and the row after which the batched rows must be solved
    again (None when every step is proven).  ``kept``: scaled Jacobians already evaluated
    at some rows (row -> position or -1, stack)."""
    N = Q.shape[0]
    crossed = np.zeros(N, bool)
    if N < 2 or not ev.cols_rot:
        return crossed, None
    idx = np.flatnonzero(ok[1:] & ok[:-1]) + 1
    cert = np.ones(N, bool)
    orient = np.ones(N, bool)
    degenerate = np.zeros(N, bool)
    for k0 in range(0, len(idx), CHUNK):  # the Jacobian of each row evaluated once
        sel = idx[k0:k0 + CHUNK]
        run = sel[-1] - sel[0] == len(sel) - 1  # consecutive rows (the usual case): no search
        rows = np.arange(sel[0] - 1, sel[-1] + 1) if run else np.union1d(sel - 1, sel)
        if kept is None:
            Js = _scaled_jacobian(ev, Q[rows])
        else:
            at = kept[0][rows]
            have = at >= 0
            Js = np.empty((len(rows),) + kept[1].shape[1:])
            Js[have] = kept[1][at[have]]
            if not have.all():
                Js[~have] = _scaled_jacobian(ev, Q[rows[~have]])
        if run:
            Qr = Q[rows[0]:rows[-1] + 1]
            parts = _certify_pairs(ev, Qr[:-1], Qr[1:], Js[:-1], Js[1:])
        else:
            pa, pb = np.searchsorted(rows, sel - 1), np.searchsorted(rows, sel)
            parts = _certify_pairs(ev, Q[sel - 1], Q[sel], Js[pa], Js[pb])
        cert[sel], orient[sel], degenerate[sel] = parts
    # Rows whose step from the row before is certified need nothing more: their flag is
    # set here, all at once; the loop below visits only the others (the first closed row,
    # rows after a gap, uncertified steps), in order, with the closed rows before them.
    trivial = np.zeros(N, bool)
    # a certified step whose orientation turns is not trivial: the tests prove a unique closed
    # state near the prediction, not that it continues the row before (a coarse step of a
    # crank-rocker can land on the mirrored assembly); the loop below decides it
    trivial[1:] = ok[1:] & ok[:-1] & cert[1:] & (orient[1:] | degenerate[1:])
    crossed[trivial] = ~orient[trivial]
    prev_ok = np.concatenate([[-1], np.maximum.accumulate(np.where(ok, np.arange(N), -1))[:-1]])
    todo = [int(i) for i in np.flatnonzero(ok & ~trivial)]
    p = -1  # the last row visited; (last_s, before_s): the closed rows before and at it
    last_s = before_s = None
    k = 0
    while k < len(todo):
        i = todo[k]
        k += 1
        l1 = int(prev_ok[i])  # rows between p and i are unchanged: closed ones are trivial
        if l1 > p:
            last = l1
            l2 = int(prev_ok[l1])
            before = l2 if l2 > p else last_s
        else:
            last, before = last_s, before_s
        p = i
        if last is None:
            last_s, before_s = i, before
            continue
        good, same, degen = cert[i], orient[i], degenerate[i]
        if last != i - 1:
            good, same, degen = (bool(x[0]) for x in _certify_pairs(ev, Q[last:last + 1], Q[i:i + 1]))
        if not good and degen and before is not None:
            # the step starts at a singular point, where neither test is defined: prove
            # it from the closed row before that point instead
            good, same, _ = (bool(x[0]) for x in _certify_pairs(ev, Q[before:before + 1], Q[i:i + 1]))
            # past a singular point the assembly taken is a choice (at a change point both
            # branches go on with either orientation): the row says so
            same = False
        turned = good and not same
        crossed[i] = turned
        if not good or (turned and not degen):
            # solved again from the row before by Solver.pose, whose continuation halves its
            # sub-steps before it accepts a turn: where that path passes a singular point (or
            # as near one as the singular flag reads), the batched row continues through it
            # and is kept, flagged; where it does not, the batched row was a jump to another
            # assembly branch and is replaced (the rows after it solved again)
            qn, why, sing = pose_one(i, Q[last].copy(), info=True)
            if turned and qn is not None and sing:
                last_s, before_s = i, last
                continue
            crossed[i] = False
            if qn is None:
                ok[i] = False
                reasons[i] = why
                last_s, before_s = last, before
                if i + 1 < N and trivial[i + 1]:  # its step no longer starts at a closed row
                    trivial[i + 1] = False
                    todo.insert(k, i + 1)
                continue
            moved = _distance(ev, Q[i:i + 1], qn[None, :])[0] > 1e-7
            Q[i] = qn
            err[i] = ev.eval(Q[i:i + 1])[1][0]
            crossed[i] = sing
            if moved and i < N - 1:
                crossed[i + 1:] = False
                return crossed, i  # the rows after i were solved on another branch: redo them
        last_s, before_s = i, last
    return crossed, None


# ---------------------------------------------------------------------------------------
# public API
# ---------------------------------------------------------------------------------------

def _start_q(mech, start):
    if start is None:
        return mech.solver.home_state()
    q = getattr(start, "q", start)
    q = np.asarray(q, float)
    if q.shape != (mech.solver.n,) or not np.all(np.isfinite(q)):
        return mech.solver.home_state()
    return q.copy()


def _finish(mech, drive, values, Q, conv, sing, resid, reasons, held_m):
    from .measures import evaluate
    scale = np.array([mech.unit_scale(i) for i in range(mech.solver.n)])
    joints = {c: Q[:, i] / scale[i] for i, c in enumerate(mech.coordinates)}
    links = link_poses(mech, Q)
    meas, adv = evaluate(mech, Q, links, held_m, drive)
    resid = np.where(np.isfinite(resid), resid, 0.0)
    return Sweep(drive=drive, values=np.asarray(values, float), joints=joints, links=links,
                 measures=meas, converged=conv, singular=sing, residual=resid, q=Q,
                 reasons=reasons, advantage=adv)


def link_poses(mech, Q):
    """Displacements from home of every link, stacked over states Q (N, n): link -> (N, 4, 4);
    :meth:`Mechanism.link_poses_into` in chunks, written into the result."""
    N = Q.shape[0]
    res = {name: np.empty((N, 4, 4)) for name in mech.links}
    for k0 in range(0, N, CHUNK):
        mech.link_poses_into(Q[k0:k0 + CHUNK], {name: v[k0:k0 + CHUNK] for name, v in res.items()})
    return res


def _as_rows(mech, table, N=None):
    explicit = {}
    for name, vals in table.items():
        i = mech.index_of(name)
        a = np.atleast_1d(np.asarray(vals, dtype=float))
        if a.ndim != 1:
            raise SpecError(f"values of {name!r} must be one-dimensional", source=mech.source)
        if N is None:
            N = len(a)
        if len(a) == 1 and N > 1:
            a = np.full(N, a[0])
        if len(a) != N:
            raise SpecError(f"values of {name!r}: expected {N} rows, got {len(a)}", source=mech.source)
        if not np.all(np.isfinite(a)):
            k = int(np.flatnonzero(~np.isfinite(a))[0])
            raise SpecError(f"values of {name!r} must be finite (row {k} is {float(a[k])})", source=mech.source)
        explicit[i] = a * mech.unit_scale(i)
    return explicit, (N or 0)


def sweep(mech, drive, values, held=None, *, start=None, speed=None, acceleration=0.0):
    """Drive coordinate ``drive`` through ``values`` (file units), on the start branch.

    The file's ``drive = true`` flags are released for the run; ``held`` (coordinate ->
    value, file units) holds other coordinates.  ``start`` (a Pose or state) defaults to
    home.  Returns a :class:`Sweep`; never NaN, failed steps are flagged.  With ``speed``
    (the drive's rate at the first value, file units per second) and ``acceleration``
    (its constant rate of change), the result also carries ``time``, ``velocities``,
    ``accelerations``, ``measure_velocities`` and ``measure_accelerations``
    (:func:`jointwise.rates.attach`; NaN on rows that did not converge).
    """
    values = np.atleast_1d(np.asarray(values, dtype=float))
    if values.ndim != 1 or len(values) == 0:
        raise JointwiseError("values must be a non-empty one-dimensional sequence")
    mech.index_of(drive)
    if speed is not None:  # check the timing before solving
        from .rates import drive_timing
        drive_timing(values, speed, acceleration)
    table = {drive: values}
    for k, v in (held or {}).items():
        if k == drive:
            raise JointwiseError(f"{drive!r} is the drive; it cannot also be held")
        table[k] = np.full(len(values), float(v))
    explicit, N = _as_rows(mech, table)
    q0 = _start_q(mech, start)
    Q, conv, sing, resid, reasons, held_m = _run(mech, explicit, N, q0, release=True)
    sw = _finish(mech, drive, values, Q, conv, sing, resid, reasons, held_m)
    for k, v in table.items():  # held coordinates read back exactly as asked where the step closed
        sw.joints[k] = np.where(conv, v, sw.joints[k])
    if speed is not None:
        from .rates import attach
        attach(mech, sw, drive, values, speed, acceleration, held_m)
    return sw


def follow(mech, table, start=None):
    """Continuation along N rows of held values ``{coordinate: array N}`` (file units).

    Same holding rules as :meth:`Mechanism.pose` at every row.  Never raises for a failed
    row: it is flagged (``converged[i] = False``) and repeats the last good pose; the
    continuation carries on from the last good state.  Bad arguments (unknown
    coordinate, rows of unequal length, non-finite values) raise ``SpecError``.
    """
    explicit, N = _as_rows(mech, table)
    if N == 0:
        raise JointwiseError("follow needs at least one row")
    q0 = _start_q(mech, start)
    try:
        Q, conv, sing, resid, reasons, held_m = _run(mech, explicit, N, q0, release=False)
    except JointwiseError as exc:  # e.g. held values contradicting a coupling
        Q = np.tile(q0, (N, 1))
        held_m = set()
        conv = np.zeros(N, bool)
        sing = np.zeros(N, bool)
        resid = np.zeros(N)
        why = Note(str(exc), getattr(exc, "reason", None) or Reason("coupling"))
        reasons = {i: why for i in range(N)}
    first = next(iter(table)) if table else None
    vals = np.asarray(table[first], float) if first else np.arange(N, dtype=float)
    return _finish(mech, first, vals, Q, conv, sing, resid, reasons, held_m)


# ---------------------------------------------------------------------------------------
# schedules
# ---------------------------------------------------------------------------------------

def _ease(u):
    return u * u * (3 - 2 * u)


def _keys_values(name, keys, t, ease_default):
    """Values at parameters t from keys: [(param, value[, "linear"|"eased"]), ...] or dicts."""
    pts = []
    for k, key in enumerate(keys):
        if isinstance(key, dict):
            try:
                pts.append((float(key["at"]), float(key["value"]), key.get("ease", ease_default)))
            except (KeyError, TypeError, ValueError):
                raise JointwiseError(f"schedule {name!r} key {k}: expected {{at = ..., value = ..., "
                                     f"ease = 'linear'|'eased'}}, got {key!r}") from None
        else:
            try:
                seq = list(key)
                pts.append((float(seq[0]), float(seq[1]), seq[2] if len(seq) > 2 else ease_default))
            except (TypeError, ValueError, IndexError):
                raise JointwiseError(f"schedule {name!r} key {k}: expected (parameter, value[, ease]), "
                                     f"got {key!r}") from None
    if not pts:
        raise JointwiseError(f"schedule {name!r} has no keys")
    for k, (a, v, e) in enumerate(pts):
        if not (math.isfinite(a) and math.isfinite(v)):
            raise JointwiseError(f"schedule {name!r} key {k}: parameter and value must be finite")
        if e not in ("linear", "eased"):
            raise JointwiseError(f"schedule {name!r} key {k}: ease must be 'linear' or 'eased', got {e!r}")
        if k and a <= pts[k - 1][0]:
            raise JointwiseError(f"schedule {name!r} key {k}: parameters must increase "
                                 f"({a:g} after {pts[k - 1][0]:g})")
    at = np.array([p[0] for p in pts])
    val = np.array([p[1] for p in pts])
    out = np.interp(t, at, val)
    if len(pts) > 1:
        seg = np.clip(np.searchsorted(at, t, side="right") - 1, 0, len(pts) - 2)
        u = np.clip((t - at[seg]) / (at[seg + 1] - at[seg]), 0.0, 1.0)
        eased = np.array([pts[s_ + 1][2] == "eased" for s_ in range(len(pts) - 1)])[seg]
        w = np.where(eased, _ease(u), u)
        out = val[seg] + w * (val[seg + 1] - val[seg])
        out = np.where(t <= at[0], val[0], np.where(t >= at[-1], val[-1], out))
    return out


def read_schedule_csv(path):
    """Read a CSV table of held values: a header of coordinate names (an optional first
    column named ``step`` or ``t`` is the parameter), then one row per sample.

    Returns (parameter array or None, {coordinate: array}).  Errors name the file, the
    row (1-based, the header is row 1) and the column."""
    name = os.path.basename(str(path))
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.reader(fh))
    except OSError as exc:
        raise SpecError(f"cannot read schedule table: {exc.strerror or exc}", source=name) from None
    except (UnicodeDecodeError, csv.Error) as exc:
        raise SpecError(f"not a readable CSV table: {exc}", source=name) from None
    if not rows:
        raise SpecError("schedule table is empty (expected a header of coordinate names)", source=name)
    header = [h.strip() for h in rows[0]]
    for c, h in enumerate(header):
        if not h:
            raise SpecError(f"row 1, column {c + 1}: empty column name", source=name)
        if h in header[:c]:
            raise SpecError(f"row 1, column {c + 1}: column {h!r} appears twice", source=name)
    data = {h: [] for h in header}
    for r, row in enumerate(rows[1:], start=2):
        if not row or all(not x.strip() for x in row):
            continue
        if len(row) != len(header):
            raise SpecError(f"row {r}: expected {len(header)} values, got {len(row)}", source=name)
        for c, (h, x) in enumerate(zip(header, row)):
            try:
                v = float(x)
            except ValueError:
                raise SpecError(f"row {r}, column {c + 1} ({h}): expected a number, got {x!r}",
                                source=name) from None
            if not math.isfinite(v):
                raise SpecError(f"row {r}, column {c + 1} ({h}): value must be finite, got {x!r}",
                                source=name)
            data[h].append(v)
    if not data[header[0]]:
        raise SpecError("schedule table has a header but no rows", source=name)
    param = None
    if header[0] in ("step", "t"):
        param = np.array(data.pop(header[0]))
    return param, {k: np.array(v) for k, v in data.items()}


def sweep_schedule(mech, schedule, samples=None, *, start=None, ease="linear", release=True):
    """Several inputs at once.

    ``schedule`` is either a path to a CSV table (see :func:`read_schedule_csv`; one row per
    sample, ``samples`` ignored) or a dict ``{coordinate: keys}`` where ``keys`` is a list of
    ``(parameter, value)`` or ``(parameter, value, "linear"|"eased")`` or
    ``{at, value, ease}``; a key's ease shapes the segment that ends at it ("eased" is
    smoothstep 3u^2 - 2u^3, zero speed at both ends).  ``samples`` is the number of
    samples spread evenly over the keys' parameter span (both ends), or an array of
    parameters.  The scheduled coordinates are the inputs: the file's drives are
    released (``release=True``), as with ``--drive``.
    """
    if isinstance(schedule, (str, os.PathLike)):
        param, table = read_schedule_csv(schedule)
        if param is None:
            n = len(next(iter(table.values())))
            param = np.arange(n, dtype=float)
    else:
        if not isinstance(schedule, dict) or not schedule:
            raise JointwiseError("schedule must be a CSV path or a non-empty dict {coordinate: keys}")
        ats = []
        for name, keys in schedule.items():
            mech.index_of(name)
            for key in keys:
                try:
                    ats.append(float(key["at"] if isinstance(key, dict) else key[0]))
                except (KeyError, TypeError, ValueError, IndexError):
                    raise JointwiseError(f"schedule {name!r}: bad key {key!r}") from None
        if samples is None:
            raise JointwiseError("sweep_schedule with keys needs samples (a count or an array)")
        if np.ndim(samples) == 0:
            ns = int(samples)
            if ns < 1:
                raise JointwiseError(f"samples must be at least 1, got {samples!r}")
            param = np.linspace(min(ats), max(ats), ns)
        else:
            param = np.asarray(samples, dtype=float)
        table = {name: _keys_values(name, keys, param, ease) for name, keys in schedule.items()}
    for name in table:
        mech.index_of(name)
    explicit, N = _as_rows(mech, table)
    q0 = _start_q(mech, start)
    Q, conv, sing, resid, reasons, held_m = _run(mech, explicit, N, q0, release=release)
    first = next(iter(table))
    sw = _finish(mech, first, param, Q, conv, sing, resid, reasons, held_m)
    sw.schedule = table
    return sw


# ---------------------------------------------------------------------------------------
# reachable range
# ---------------------------------------------------------------------------------------

#: ``reach`` searches this far from home unless told otherwise: turns of an angle drive,
#: mechanism sizes of a length drive (a lead screw with far limits is searched to them).
SEARCH_TURNS = 1000
SEARCH_SIZES = 1000


def reach(mech, drive, held=None, *, tol=1e-6, step=None, max_turns=None, max_travel=None):
    """Reachable interval(s) of ``drive`` from home, file units.

    Steps out from home both ways (first steps of ``step`` file units, default 2 deg or
    1/50 of the mechanism size, doubling up to eight turns or eight sizes while the
    solves succeed: the solver's continuation covers a step) until a dead point or a
    limit, however many turns away, up to a search bound (``max_turns``, default
    ``SEARCH_TURNS``; ``max_travel`` file units; ``SEARCH_SIZES`` sizes for a length
    drive).  Each end is then refined to ``tol`` of the drive's unit: a failed solve
    reports the farthest closed state its continuation reached, which brackets a dead
    point at once, and bisection finishes.  Returns ``{"drive", "intervals": [[lo, hi]], "reasons": [[why_lo,
    why_hi]]}``.  Reasons: ``"dead point"`` (no closed placement beyond: the mechanism
    locks, its Jacobian becomes singular there), ``"limit of joint X"`` (the drive's own or
    a passive joint's limit), ``"turns fully"`` (an angle drive that comes back to its home
    placement after one turn: reported as [home - 180 deg, home + 180 deg] in file units,
    both ends open), ``"no end found within N turns (search bound)"`` / ``"... within L
    <unit> (search bound)"`` (the search stopped at its bound: the drive goes on beyond
    it).  The file's drives are released, ``held`` holds others.

    Why each end stops, structured (as :class:`jointwise.results.Pose` and ``Sweep`` say
    it): every reason text carries a :class:`jointwise.errors.Reason` (``.reason``; None
    where the drive goes on), and the result gains ``"status"`` (per interval ``[lo end,
    hi end]``, of :data:`jointwise.results.STATUSES`: ``"singular"`` at a dead point,
    ``"limit"`` at a limit, ``"converged"`` where nothing stops it) and ``"stops"`` (the
    same Reasons: a dead point's ``joint`` is the drive, ``value`` the end, ``bounds`` the
    interval; a limit's ``joint`` the limited coordinate, ``value`` its value at the end,
    ``bounds`` its limits; file units).  A drive that cannot move raises
    :class:`AssemblyError` whose reason has the locked value and both ends.
    """
    s = mech.solver
    di = mech.index_of(drive)
    unit = mech.unit_scale(di)
    is_angle = mech.kinds[di] == "angle"
    heldv = {}
    for k, v in (held or {}).items():
        if k == drive:
            raise JointwiseError(f"{drive!r} is the drive; it cannot also be held")
        heldv[mech.index_of(k)] = float(v) * mech.unit_scale(mech.index_of(k))
    mech.check_limits(heldv)
    q_home = s.home_state()  # home is settled with the file's own drives
    if heldv:
        q_home, info = s.pose(heldv, q_home, release=True)
    home = q_home[di] / unit
    if step is None:
        step = 2.0 * (math.pi / 180) / unit if is_angle else mech.size / 50.0
    full = 2 * math.pi / unit if is_angle else None
    j = mech.joints[mech.owner[drive]]
    lim = j.limits[di - mech.slices[j.name].start]
    if max_travel is None:
        if is_angle:
            max_travel = (SEARCH_TURNS if max_turns is None else max_turns) * full
        else:
            max_travel = SEARCH_SIZES * mech.size / unit
        if lim is not None:  # a limited drive (a lead screw, say) is searched up to its limits
            max_travel = max(max_travel, (lim[1] - lim[0]) / unit)
    max_step = max(16 * step, 8 * full if is_angle else 8 * mech.size / unit)
    # why an end stops, with the coordinate concerned (the Reason is completed at the end)
    own_limit = Note(f"limit of joint {j.name}", Reason("limit", joint=drive))
    dead = Note("dead point", Reason("singular", joint=drive))

    def solve(value, qstart):
        s.last_closed = None
        h = dict(heldv)
        h[di] = value * unit
        if lim is not None and not (lim[0] - 1e-12 <= value * unit <= lim[1] + 1e-12):
            return None, own_limit
        try:
            q, info = s.pose(h, qstart, release=True)
        except LimitError as exc:
            jn = mech.owner.get(exc.joint, exc.joint) if exc.joint else "?"
            return None, Note(f"limit of joint {jn}", Reason("limit", joint=exc.joint))
        except JointwiseError:
            return None, dead
        if not info["converged"]:
            return None, dead
        return q, None

    def walk(direction):
        q = q_home.copy()
        v = home
        travelled = 0.0
        checked = False
        h = step
        while True:
            nv = v + direction * h
            h = min(2 * h, max_step)  # the solver continues within a step; bisection refines the end
            at_turn = False
            if is_angle and not checked and travelled + abs(nv - v) >= full:
                nv = home + direction * full
                at_turn = checked = True
            if lim is not None:
                edge = (lim[1] if direction > 0 else lim[0]) / unit
                if direction * (nv - edge) > 0:
                    nv = edge
                    if abs(nv - v) <= tol:
                        return v, own_limit, False, q
            qn, why = solve(nv, q)
            if qn is None:
                end, why, q_end = _refine_end(solve, s, di, unit, v, nv, q, why, tol)
                return end, why, False, q_end
            travelled += abs(nv - v)
            q, v = qn, nv
            if lim is not None and v == (lim[1] if direction > 0 else lim[0]) / unit:
                return v, own_limit, False, q
            if at_turn:
                if _same_placement(mech, q, q_home):
                    return v, "turns fully", True, q
            if travelled >= max_travel:
                u = mech.unit_name(di)
                what = (f"{max_travel * unit / (2 * math.pi):g} turns" if is_angle
                        else f"{max_travel:g} {u}")
                return v, f"no end found within {what} (search bound)", False, q

    hi, why_hi, turns, q_hi = walk(+1)
    if not turns:
        lo, why_lo, turns, q_lo = walk(-1)
    if turns:
        half = math.pi / unit
        return _range_result(mech, drive, home - half, home + half, ("turns fully", None), ("turns fully", None))
    if hi - lo <= 10 * tol:
        u = mech.unit_name(di)
        what = f" with {', '.join(f'{k} = {v:g}' for k, v in (held or {}).items())} held" if held else ""
        ends = _range_result(mech, drive, lo, hi, (why_lo, q_lo), (why_hi, q_hi))["status"][0]
        why = Reason("limit" if "limit" in ends else "singular", joint=drive, value=float(home),
                     bounds=(float(lo), float(hi)), unit=u)
        raise AssemblyError(f"{drive} cannot move{what}: it is locked at {home:.6g} {u} "
                            f"({why_lo} below, {why_hi} above)", reason=why)
    return _range_result(mech, drive, lo, hi, (why_lo, q_lo), (why_hi, q_hi))


def _range_result(mech, drive, lo, hi, end_lo, end_hi):
    """The result of :func:`reach` for one interval [lo, hi] (file units of the drive);
    ``end_lo``, ``end_hi``: (why the end stops, the closed state there)."""
    di = mech.index_of(drive)
    lo, hi = float(lo), float(hi)
    reasons, status, stops = [], [], []
    for end, (why, q) in ((lo, end_lo), (hi, end_hi)):
        partial = getattr(why, "reason", None)
        if partial is None:  # nothing stops the drive there
            r, st = None, "converged"
        elif partial.kind == "limit" and partial.joint in mech.index:
            i = mech.index_of(partial.joint)
            u = mech.unit_scale(i)
            limits = mech.joints[mech.owner[partial.joint]].limits[mech.local_index(i)]
            value = end if i == di else float(q[i]) / u
            r = Reason("limit", joint=partial.joint, value=value, bounds=(limits[0] / u, limits[1] / u),
                       unit=mech.unit_name(i), held=False, on_path=True)  # met going on
            st = "limit"
        elif partial.kind == "limit":  # a limit met elsewhere (no coordinate named)
            r, st = Reason("limit", held=False, on_path=True), "limit"
        else:
            r = Reason("singular", joint=drive, value=end, bounds=(lo, hi), unit=mech.unit_name(di))
            st = "singular"
        reasons.append(Note(str(why), r))
        status.append(st)
        stops.append(r)
    return {"drive": drive, "intervals": [[lo, hi]], "reasons": [reasons], "status": [status],
            "stops": [stops]}


def _refine_end(solve, s, di, unit, good, bad, qg, why, tol):
    """Narrow [good, bad] (closed at ``good``, not at ``bad``) to ``tol``; returns (the
    last closed value, why the drive stops beyond it, the closed state there).

    A dead point: the failed solve's continuation stopped at the farthest closed state
    it could reach (``Solver.last_closed``), within rounding of the dead point, so the
    bracket is taken from there and checked one ``tol`` beyond; bisection otherwise."""
    while abs(bad - good) > tol:
        lc = s.last_closed if why == "dead point" else None
        s.last_closed = None
        mid = 0.5 * (good + bad)
        if lc is not None:
            vc = float(lc[di]) / unit
            if (vc - good) * (bad - good) > 0 and abs(vc - good) < abs(bad - good):
                good, qg = vc, lc.copy()
                if abs(bad - good) <= tol:
                    break
                mid = good + math.copysign(0.5 * tol, bad - good)
        qm, w2 = solve(mid, qg)
        if qm is None:
            bad, why = mid, w2
        else:
            good, qg = mid, qm
    return good, why, qg


def _same_placement(mech, qa, qb):
    la = link_poses(mech, qa[None, :])
    lb = link_poses(mech, qb[None, :])
    tol = 1e-6
    for k in la:
        d = la[k][0] - lb[k][0]
        if np.abs(d[:3, :3]).max() > tol or np.abs(d[:3, 3]).max() > tol * mech.size:
            return False
    return True
