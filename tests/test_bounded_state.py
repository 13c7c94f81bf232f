"""Bounded state: caches with a bound and a documented key, nothing swapped on shared
objects, mobility worked out once per structure.

The four-bar of ``sweep_fixtures`` has mobility 1 by the Grubler-Kutzbach count for planar
linkages, M = 3 (n - 1) - 2 j1 with n = 4 links and j1 = 4 revolute joints (any mechanism
text states the count; e.g. Uicker, Pennock & Shigley, *Theory of Machines and Mechanisms*,
sec. 1.7).
"""
import itertools
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(__file__))
from sweep_fixtures import fourbar_toml, load  # noqa: E402

from jointwise import solver as solver_module  # noqa: E402
from jointwise.solver import Solver  # noqa: E402


def test_mobility_once_per_structure(monkeypatch):
    m = load(fourbar_toml())
    calls = []
    real = Solver.mobility

    def counting(self, q):
        calls.append(1)
        return real(self, q)

    monkeypatch.setattr(Solver, "mobility", counting)
    first = m.mobility()
    assert first["numeric"] == 1 and first["kutzbach"] == 3 * (4 - 1) - 2 * 4
    for v in (70.0, 80.0, 95.0):
        m.pose({"crank": v})
        assert m.mobility() == first
    assert len(calls) == 1
    first["numeric"] = 99  # a caller's copy: the kept value is not changed through it
    assert m.mobility()["numeric"] == 1 and len(calls) == 1
    # a structural change (new joint geometry) forgets it
    m._set_geometry({n: (j.axis, j.point) for n, j in m.joints.items()})
    assert m.mobility()["numeric"] == 1 and len(calls) == 2
    # at a given state it is worked out there
    m.mobility(m.pose({"crank": 75.0}).q)
    assert len(calls) == 3


def test_full_jacobian_swaps_no_coupling_table(monkeypatch):
    """The uncoupled Jacobian of mobility is built without swapping the solver's tables."""
    m = load(fourbar_toml())
    s = m.solver
    t = m.coupling_table
    tables = (t.master, t.alpha, t.members, t.law)
    seen = []
    real = Solver._plan

    def watching(self, *args, **kw):
        t = self.m.coupling_table
        seen.append(all(a is b for a, b in zip((t.master, t.alpha, t.members, t.law), tables)))
        return real(self, *args, **kw)

    monkeypatch.setattr(Solver, "_plan", watching)
    J1 = s.full_jacobian(m.home.copy())
    J2 = s.full_jacobian(m.home.copy())
    assert seen and all(seen)
    assert np.array_equal(J1, J2) and J1.shape == (6, 4)


def test_sweep_swaps_no_drive_flags(monkeypatch):
    """A sweep releases the file's drives by asking, not by switching the joints' flags."""
    m = load(fourbar_toml(crank_drive=True))
    flags = {n: j.drive for n, j in m.joints.items()}
    assert flags["crank"]
    seen = []
    real = Solver.pose

    def watching(self, held, q_start=None, release=False):
        seen.append({n: j.drive for n, j in self.m.joints.items()} == flags)
        return real(self, held, q_start, release)

    monkeypatch.setattr(Solver, "pose", watching)
    sw = m.sweep("rocker", np.linspace(95, 140, 10))  # reach 92.05..143.8 deg; the crank's drive released
    assert sw.converged.all() and seen and all(seen)
    assert {n: j.drive for n, j in m.joints.items()} == flags


def test_plan_cache_is_bounded_and_keyed_by_content(monkeypatch):
    m = load(fourbar_toml())
    s = m.solver
    b = s.blocks[0]
    q = m.pose({"crank": 75.0}).q
    monkeypatch.setattr(solver_module, "PLAN_MEMORY", 4)
    s._plans.clear()
    groups = list(b.groups)
    subsets = [list(c) for r in range(1, len(groups) + 1) for c in itertools.combinations(groups, r)]
    for sub in subsets:
        cols = [("m", g) for g in sub]
        J = s._eval(b, q, cols, set())[2]
        full = s._eval(b, q, [("m", g) for g in groups], set())[2]
        assert np.allclose(J, full[:, [groups.index(g) for g in sub]], atol=1e-12)
        assert len(s._plans) <= 4
    # equal columns in a new list each call find the same plan: no growth
    s._plans.clear()
    for _ in range(10):
        s._eval(b, q, [("m", groups[0])], set())
    assert len(s._plans) == 1
