"""The coupling table of a model: which coordinates its couplings join, and how.

Couplings are structure, not solving: the table is built once, with the model
(:attr:`jointwise.model.Model.coupling_table`), from the model's couplings and its public
coordinate layout, and the solver, sweeps, rates, measures and targets ask it.

Coupled coordinates form groups.  Each group has one master (its coordinate of lowest
order that leads, never a motion law's follower); member ``i`` of master ``g`` follows

    q_i = alpha_i q_g + beta_i                         (linear couplings, chained), or
    q_i = a_out f(a_in q_g + b_in) + b_out             (behind one motion law f),

all in internal units (radians, file length units).  A motion law is followed from its
leader only (it need not be invertible), and one chain of couplings passes at most one
motion law.  A coordinate no coupling names is its own master (``alpha = 1``, ``beta = 0``).
"""
from __future__ import annotations

import numpy as np

from .errors import AssemblyError, Reason, SpecError

__all__ = ["CouplingTable"]


class CouplingTable:
    """Coupling groups of one model (fixed for the model's life).

    Attributes
    ----------
    master : (n,) int array
        The master of every coordinate (itself when uncoupled).
    alpha, beta : (n,) float arrays
        ``q_i = alpha_i q_master + beta_i`` for linear members (NaN behind a motion law).
    law : dict
        Member behind a motion law -> ``(f, a_in, b_in, a_out, b_out)``.
    members : dict
        Master -> its group's coordinates in order (the master among them).
    """

    def __init__(self, model):
        m = model
        n = len(m.coordinates)
        self.coordinates = list(m.coordinates)
        self._units = [(m.unit_scale(i), m.unit_name(i)) for i in range(n)]  # for messages
        self.master = np.arange(n)
        self.alpha = np.ones(n)
        self.beta = np.zeros(n)
        self.law = {}
        #: per coupling: (name, leader index, follower index, a, b, law) with
        #: ``q_f = a q_l + b`` (internal units) or ``q_f = law(q_l)``
        self.equations = []
        adj = {i: [] for i in range(n)}
        followers = set()
        for c in m.couplings.values():
            li, fi = m.index[c.leader], m.index[c.follower]
            if c.law is not None:
                self.equations.append((c.name, li, fi, None, None, c.law))
                adj[li].append((fi, c.law, None, c.name))       # q_f = f(q_l)
                adj[fi].append((li, None, None, c.name))        # not invertible
                followers.add(fi)
                continue
            ul, uf = m.unit_scale(li), m.unit_scale(fi)
            a = uf * c.ratio / ul
            b = uf * c.offset
            self.equations.append((c.name, li, fi, a, b, None))
            adj[li].append((fi, a, b, c.name))            # q_f = a q_l + b
            adj[fi].append((li, 1 / a, -b / a, c.name))   # q_l = (q_f - b) / a
        seen = set()
        order = [i for i in range(n) if i not in followers] + sorted(followers)
        for root in order:
            if root in seen or not adj[root]:
                continue
            seen.add(root)
            via = {root: None}
            stack = [root]
            while stack:
                i = stack.pop()
                for k, a, b, cname in adj[i]:
                    if cname == via[i]:
                        continue
                    if k in seen:
                        if a is None or not isinstance(a, float) or i in self.law or k in self.law:
                            raise SpecError(f"coupling {cname!r} closes a loop of couplings through a motion "
                                            f"law at {m.coordinates[k]!r}", source=m.source, key=f"couplings.{cname}")
                        na, nb = a * self.alpha[i], a * self.beta[i] + b
                        if abs(na - self.alpha[k]) > 1e-9 * max(1, abs(na)) or abs(nb - self.beta[k]) > 1e-9 * max(1, abs(nb)):
                            raise SpecError(f"coupling {cname!r} contradicts the other couplings of "
                                            f"{m.coordinates[k]!r} (they form a loop with another ratio)",
                                            source=m.source, key=f"couplings.{cname}")
                        continue
                    if a is None:
                        raise SpecError(f"coupling {cname!r}: {m.coordinates[k]!r} leads a motion law but is "
                                        f"itself set through {m.coordinates[i]!r}; a motion law is followed from "
                                        f"its leader only", source=m.source, key=f"couplings.{cname}")
                    if isinstance(a, float):
                        if i in self.law:
                            f, ai, bi_, ao, bo = self.law[i]
                            self.law[k] = (f, ai, bi_, a * ao, a * bo + b)
                            self.alpha[k], self.beta[k] = np.nan, np.nan
                        else:
                            self.alpha[k], self.beta[k] = a * self.alpha[i], a * self.beta[i] + b
                    else:
                        if i in self.law:
                            raise SpecError(f"coupling {cname!r}: two motion laws in one chain of couplings "
                                            f"are not supported", source=m.source, key=f"couplings.{cname}")
                        self.law[k] = (a, self.alpha[i], self.beta[i], 1.0, 0.0)
                        self.alpha[k], self.beta[k] = np.nan, np.nan
                    seen.add(k)
                    via[k] = cname
                    self.master[k] = root
                    stack.append(k)
        self.members = {}
        for i in range(n):
            self.members.setdefault(int(self.master[i]), []).append(i)
        #: master -> its other members (only masters that have some)
        self._others = {g: [i for i in ms if i != g] for g, ms in self.members.items() if len(ms) > 1}

    # -- values and slopes -----------------------------------------------------------------
    def member_rates(self, i, qg):
        """``(q_i, dq_i/dq_g, d2q_i/dq_g2)`` of member ``i`` at master values ``qg`` (array)."""
        qg = np.asarray(qg, dtype=float)
        hit = self.law.get(i)
        if hit is None:
            return self.alpha[i] * qg + self.beta[i], np.full(qg.shape, self.alpha[i]), np.zeros(qg.shape)
        f, ai, bi, ao, bo = hit
        y, dy, ddy = f.evaluate(ai * qg + bi)
        return ao * y + bo, ao * ai * dy, ao * ai * ai * ddy

    def member_slope(self, i, qg):
        """dq_i/dq_g of member ``i`` at master values ``qg`` (float or array)."""
        if i not in self.law:
            return self.alpha[i]
        return self.member_rates(i, qg)[1]

    def derive(self, q, masters):
        """Set every other member of ``masters`` from its master, in place: one state ``q``
        (n,) or a stack (B, n)."""
        others = self._others
        if not others:
            return
        for g in masters:
            for i in others.get(g, ()):
                if i in self.law:
                    q[..., i] = self.member_rates(i, q[..., g])[0]
                else:
                    q[..., i] = self.alpha[i] * q[..., g] + self.beta[i]

    def hold(self, target, source, i, v):
        """Hold coordinate ``i`` at ``v`` (internal units; a float, or an array of a sweep's
        rows): its master's value goes into ``target`` (master -> value), ``source``
        remembers the first coordinate that set it.  A motion law's follower cannot be held;
        two held values of one group must agree (on every row; the Reason names the first
        row that does not)."""
        g = int(self.master[i])
        name = self.coordinates[i]
        if i in self.law:
            raise AssemblyError(reason=Reason("coupling", joint=name, other=self.coordinates[g]))
        gv = (v - self.beta[i]) / self.alpha[i]
        if g in target:
            had, now, asked = np.broadcast_arrays(target[g], gv, v)
            gap = np.abs(had - now)
            bad = np.flatnonzero(gap > 1e-9 * np.maximum(1.0, np.abs(now)))
            if bad.size:
                k = np.unravel_index(bad[0], gap.shape)
                scale, unit = self._units[i]
                allowed = float(self.alpha[i] * had[k] + self.beta[i]) / scale
                raise AssemblyError(reason=Reason("coupling", joint=name, other=self.coordinates[source[g]],
                                                  value=float(asked[k]) / scale, bounds=(allowed, allowed),
                                                  unit=unit, error=float(gap[k])))
        target[g] = gv
        source.setdefault(g, i)

    # -- the coupling equations --------------------------------------------------------------
    def errors(self, q):
        """Coupling name -> ``|q_f - f(q_l)|`` at state ``q`` (internal units of the follower)."""
        out = {}
        for name, li, fi, a, b, law in self.equations:
            if law is not None:
                out[name] = float(abs(q[fi] - law.evaluate(q[li])[0]))
            else:
                out[name] = float(abs(q[fi] - (a * q[li] + b)))
        return out

    def rows(self, q):
        """The couplings' constraint rows at state ``q``, (couplings, n): the derivative of
        ``q_f - f(q_l)`` (internal units)."""
        out = np.zeros((len(self.equations), len(self.coordinates)))
        for k, (_, li, fi, a, _b, law) in enumerate(self.equations):
            out[k, fi] = 1.0
            out[k, li] = -(a if law is None else float(law.evaluate(q[li])[1]))
        return out
