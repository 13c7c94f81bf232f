"""Measures declared in a mechanism file (``[measures.NAME]``), evaluated over stacks of poses.

Types and what is reported (every point and axis is given in world coordinates at home,
as joint points and axes are):

``point``     a point fixed to ``link``: its world position, (N, 3), length unit.
``distance``  between point ``a`` (fixed to its link) and point ``b``: (N,), length unit.
``angle``     between axis ``a`` (fixed to its link) and axis ``b``: (N,), always in
              **degrees**, 0-180, whatever the file's angle unit (so transmission angles
              read the same in every file).
``rate``      d(of)/d(per) in file units (e.g. mm per deg), from the constraint Jacobian
              (the least-norm tangent of :meth:`Solver.tangent`, stacked over steps), not
              from finite differences.  The coordinates held in the run stay held, except
              ``per``, which moves.  ``per`` takes the place of the run's input (the
              drive, or ``of``, is released).  Its inverse is the *ideal (frictionless) mechanical
              advantage* out/in by virtual work, F_of / F_per = d(per) / d(of), reported
              separately (:func:`evaluate` returns it; capped at +-1e12 where the rate is 0,
              a toggle position).
"""
from __future__ import annotations

import numpy as np

from .kinematics import Evaluator, tangent

__all__ = ["evaluate", "columns", "ADVANTAGE_CAP", "describe"]

ADVANTAGE_CAP = 1e12


def columns(mech):
    """Table column names of the measures: points as NAME.x, NAME.y, NAME.z."""
    out = []
    for name, m in mech.measures.items():
        if m.type == "point":
            out.extend(f"{name}.{a}" for a in "xyz")
        else:
            out.append(name)
    return out


def describe(mech, name):
    """Unit text of a measure, for labels."""
    m = mech.measures[name]
    if m.type in ("point", "distance"):
        return mech.length_unit
    if m.type == "angle":
        return "deg"
    u = lambda c: mech.unit_name(mech.index_of(c))  # noqa: E731
    return f"{u(m.of)}/{u(m.per)}"


def _world(links, link, at):
    D = links[link]
    return np.einsum("nij,j->ni", D[:, :3, :3], np.asarray(at, float)) + D[:, :3, 3]


def evaluate(mech, Q, links, held_masters=None, drive=None):
    """Every measure of ``mech`` at states ``Q`` (N, n) with link displacements ``links``.

    ``held_masters``: solver master indices held in the run (default: the file's drives).
    Returns ``(values, advantage)``: name -> array, and rate name -> ideal mechanical
    advantage array."""
    values, adv = {}, {}
    if not mech.measures:
        return values, adv
    if held_masters is None:
        held_masters = {int(mech.coupling_table.master[mech.index[c]]) for c in mech.driven}
    for name, m in mech.measures.items():
        if m.type == "point":
            values[name] = _world(links, m.a[0], m.a[1])
        elif m.type == "distance":
            d = _world(links, m.a[0], m.a[1]) - _world(links, m.b[0], m.b[1])
            values[name] = np.sqrt((d * d).sum(axis=1))
        elif m.type == "angle":
            a = np.asarray(m.a[1], float)
            b = np.asarray(m.b[1], float)
            a = links[m.a[0]][:, :3, :3] @ (a / np.linalg.norm(a))
            b = links[m.b[0]][:, :3, :3] @ (b / np.linalg.norm(b))
            c = np.clip((a * b).sum(axis=1), -1.0, 1.0)
            values[name] = np.degrees(np.arccos(c))
        else:
            r = rate(mech, Q, m.of, m.per, held_masters, drive)
            values[name] = r
            with np.errstate(divide="ignore"):
                inv = np.where(np.abs(r) > 1 / ADVANTAGE_CAP, 1.0 / np.where(r == 0, 1.0, r),
                               np.copysign(ADVANTAGE_CAP, np.where(r == 0, 1.0, r)))
            adv[name] = inv
    return values, adv


def rate(mech, Q, of, per, held_masters, drive=None):
    """d(of)/d(per) (file units) at states Q (N, n).

    ``per`` takes the place of the run's input: the held set is ``held_masters`` with the
    drive (when ``per`` is not held already) and ``of`` released and ``per`` held, so the
    rate is the speed ratio along the mechanism's motion, whichever coordinate drove it."""
    s, ct = mech.solver, mech.coupling_table
    N = Q.shape[0]
    io, ip = mech.index_of(of), mech.index_of(per)
    go, gp = int(ct.master[io]), int(ct.master[ip])
    conv = mech.unit_scale(ip) / mech.unit_scale(io)
    if go == gp:
        return ct.member_slope(io, Q[:, go]) / ct.member_slope(ip, Q[:, go]) * np.ones(N) * conv
    held = set(held_masters)
    if gp not in held and drive is not None:
        held.discard(int(ct.master[mech.index_of(drive)]))
    held.discard(go)
    held.add(gp)
    bi = s.block_of_master.get(gp)
    if bi is None or s.block_of_master.get(go) != bi:
        return np.zeros(N)
    ev = Evaluator(mech, s.blocks[bi], held)
    T = tangent(ev, Q)  # (N, coord cols, held)
    ci = [c[1] for c in ev.cols_coord].index(go)
    hi = ev.held.index(gp)
    dg = T[:, ci, hi]
    return dg * ct.member_slope(io, Q[:, go]) / ct.member_slope(ip, Q[:, gp]) * conv
