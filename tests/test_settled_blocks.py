"""A pose started where the last one left its loop blocks, with the same held values for
some of them, solves only the blocks whose held values moved (``Solver._settled``).

Reference: the same poses from a fresh mechanism (nothing remembered), and the four-bar's
closed form (``mechanisms.four_bar_positions``: the circle meet of coupler and rocker,
e.g. Norton, *Design of Machinery*, sec. 4.5)."""
from __future__ import annotations

import numpy as np

import jointwise
from jointwise import solver
from mechanisms import four_bar_chain, four_bar_positions


def _count_blocks(monkeypatch):
    calls = []
    real = solver.Solver._solve_block

    def counted(self, b, *a, **k):
        calls.append(b.index)
        return real(self, b, *a, **k)
    monkeypatch.setattr(solver.Solver, "_solve_block", counted)
    return calls


def test_only_the_moved_block_is_solved_and_the_pose_is_the_same(monkeypatch):
    data = four_bar_chain(6)
    mech = jointwise.from_dict(data)
    calls = _count_blocks(monkeypatch)
    held = {f"crank{i}": 60.0 for i in range(6)}
    p = mech.pose(held)
    assert len(calls) == 6
    for step, deg in enumerate((62.0, 65.0, 70.0, 66.0)):
        held["crank2"] = deg
        calls.clear()
        p = mech.pose(held, start=p)
        assert calls == [mech.solver.block_of_master[mech.coordinates.index("crank2")]], step
        fresh = jointwise.from_dict(data).pose(held, start=None)
        for c in mech.coordinates:
            assert abs(p.joints[c] - fresh.joints[c]) < 1e-7, (step, c)
        (_, _), (_, _), th4 = four_bar_positions(1.0, 3.0, 2.5, 3.0, deg)
        assert abs(p.joints["rocker2"] - th4) < 1e-7
    # a start that differs from where the pose left a block (rounded, as a 32-bit property
    # would) solves that block again
    calls.clear()
    q32 = np.asarray(p.q, dtype=np.float32).astype(float)
    start = jointwise.mechanism.Pose(joints=dict(zip(mech.coordinates, q32)), links={},
                                     converged=True, residual=0.0, q=q32)
    p2 = mech.pose(held, start=start)
    assert len(calls) == 6 and p2.converged
