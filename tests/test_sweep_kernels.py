"""The sweep engine's stacked kernels and its chord test of a step.

- ``eval_stack`` (component-first over a stack, kept work buffer) against ``eval_one``
  (one state at a time, plain floats and small matrices: independent code) and the
  Jacobian against central differences of the residual;
- ``loop_columns`` on stacks (component-first walk) against its joint-by-joint form;
- ``linalg.chol_quad`` against ``numpy.linalg.solve``;
- the chord test (``sweep._chord_certified``, linalg "branch continuity" point 3) on a
  four-bar whose two branches come from the circle-intersection closed form
  (``mechanisms.four_bar_positions``; Norton, *Design of Machinery*, sec. 4.5): a small
  step along the open branch passes, a step onto the crossed branch does not.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

import jointwise
import mechanisms as M
from jointwise import kinematics, linalg
from jointwise import sweep as S

CASES = [
    (lambda: M.four_bar(1.0, 3.0, 2.5, 3.0, 60.0), "crank"),
    (lambda: M.rssr(), "crank"),
    (lambda: M.watt_six_bar(), None),
    (lambda: M.four_bar_chain(3), None),
    (lambda: M.scissor_stack(3), None),
]


def _states(m, B, seed):
    rng = np.random.default_rng(seed)
    return m.solver.home_state() + 0.2 * rng.standard_normal((B, m.solver.n))


@pytest.mark.parametrize("build, drive", CASES)
def test_eval_stack_matches_one_state_at_a_time(build, drive):
    m = jointwise.from_dict(build())
    s = m.solver
    held = {m.coordinates.index(drive)} if drive else set()
    Q = _states(m, 40, 1)
    for b in s.blocks:
        if not b.loops:
            continue
        ev = S._Evaluator(m, b, held)
        for cols, rot in ((ev.cols_rot, ev.rotj), (ev.cols_coord, set()), ([], set())):
            plan = s._plan(b, cols, rot)
            r, e, J = kinematics.eval_stack(s, plan, Q, True)
            for k in range(0, 40, 7):
                r1, e1, J1 = kinematics.eval_one(s, plan, Q[k], True)
                assert np.allclose(r[k], r1, rtol=0, atol=1e-12 * max(1.0, np.abs(r1).max()))
                assert e[k] == pytest.approx(float(np.max(e1)), rel=1e-12, abs=1e-15)
                assert np.allclose(J[k], J1, rtol=0, atol=1e-12 * max(1.0, np.abs(J1).max(initial=0.0)))
            # a second, shorter stack reuses the work buffer: nothing of the first remains
            r2, _, J2 = kinematics.eval_stack(s, plan, Q[:13], True)
            assert np.array_equal(r2, r[:13]) and np.array_equal(J2, J[:13])


@pytest.mark.parametrize("build, drive", CASES[:2])
def test_eval_stack_jacobian_matches_central_differences(build, drive):
    m = jointwise.from_dict(build())
    s = m.solver
    ev = S._Evaluator(m, s.blocks[0], {m.coordinates.index(drive)})
    cols = ev.cols_coord  # coordinate columns: a step is a plain coordinate change
    plan = s._plan(ev.block, cols, set())
    # closed states (the columns are the derivative of the residual where the loops close)
    Q = np.stack([m.pose({drive: v}).q for v in np.linspace(10.0, 350.0, 12)])
    _, _, J = kinematics.eval_stack(s, plan, Q, True)
    h = 1e-6
    for c, col in enumerate(cols):
        Qp, Qm = Q.copy(), Q.copy()
        Qp[:, col[1]] += h
        Qm[:, col[1]] -= h
        fd = (kinematics.eval_stack(s, plan, Qp, False)[0] - kinematics.eval_stack(s, plan, Qm, False)[0]) / (2 * h)
        assert np.allclose(J[:, :, c], fd, atol=1e-6 * max(1.0, np.abs(fd).max()))


@pytest.mark.parametrize("build, drive", CASES)
def test_loop_columns_on_stacks_match_the_joint_by_joint_walk(build, drive, monkeypatch):
    m = jointwise.from_dict(build())
    Q = _states(m, 30, 3)
    for b in m.solver.blocks:
        if not b.loops:
            continue
        stacked = kinematics.loop_columns(m, b, Q)
        monkeypatch.setattr(kinematics, "SMALL_STACK", 10 ** 9)  # the joint-by-joint form
        walked = kinematics.loop_columns(m, b, Q)
        monkeypatch.undo()
        assert len(stacked) == len(walked) == len(b.loops)
        for (cs_, site_s), (cw, site_w) in zip(stacked, walked):
            assert [i for i, _ in cs_] == [i for i, _ in cw]
            assert np.allclose(site_s, site_w, atol=1e-12 * max(1.0, np.abs(site_w).max()))
            for (_, a), (_, w) in zip(cs_, cw):
                assert np.allclose(a, w, atol=1e-12 * max(1.0, np.abs(w).max()))


def test_chol_quad_matches_numpy_solve():
    rng = np.random.default_rng(4)
    for B in (5, 300):  # stacked and component-first factors
        for g in (1, 2, 3, 6):
            A = rng.standard_normal((B, g, g + 2))
            G = A @ np.swapaxes(A, 1, 2) + 0.5 * np.eye(g)
            b = rng.standard_normal((B, g, 3))
            ref = np.einsum("bgc,bgc->b", b, np.linalg.solve(G, b))
            got = linalg.chol_quad(linalg.chol_factor(G), b)
            assert np.allclose(got, ref, rtol=1e-10)


def test_chord_test_passes_a_small_step_and_refuses_a_branch_jump():
    a, b, c, d = 1.0, 3.0, 2.5, 3.0
    m = jointwise.from_dict(M.four_bar(a, b, c, d, 60.0))
    ic = m.coordinates.index("crank")
    ev = S._Evaluator(m, m.solver.blocks[0], {ic})
    # closed states from the solver, checked against the closed form's rocker angle
    qa = m.pose({"crank": 70.0}).q
    qb = m.pose({"crank": 70.5}).q
    ir = m.coordinates.index("rocker")
    for q, t2 in ((qa, 70.0), (qb, 70.5)):
        assert math.degrees(q[ir]) == pytest.approx(M.four_bar_positions(a, b, c, d, t2, "open")[2], abs=1e-7)
    # the crossed branch at 70.5 deg, from the closed form
    (ax, ay), (bx, by), t4x = M.four_bar_positions(a, b, c, d, 70.5, "crossed")
    qx = qb.copy()
    qx[ir] = math.radians(t4x)
    ia, ib = m.coordinates.index("pin_a"), m.coordinates.index("pin_b")
    t3x = math.atan2(by - ay, bx - ax)
    # pin coordinates: relative angles, zero at home; shift them by the change of the
    # absolute link angles from the open to the crossed placement
    (oax, oay), (obx, oby), t4o = M.four_bar_positions(a, b, c, d, 70.5, "open")
    t3o = math.atan2(oby - oay, obx - oax)
    qx[ia] = qb[ia] + (t3x - t3o)
    qx[ib] = qb[ib] + (math.radians(t4x) - math.radians(t4o)) - (t3x - t3o)
    assert ev.eval(qx[None])[1][0] < 1e-9  # a closed state of the other branch
    Qa = np.stack([qa, qa])
    Qb = np.stack([qb, qx])
    Jsa, Jsb = S._scaled_jacobian(ev, Qa), S._scaled_jacobian(ev, Qb)
    G, Mab = linalg.tmul(Jsa, Jsa), linalg.tmul(Jsa, Jsb)
    fac = linalg.chol_factor(G)
    ok = S._chord_certified(ev, Qa, Qb, Jsa, Jsb, fac, Mab, True)
    assert ok.tolist() == [True, False]
    # the whole certificate agrees: the jump is neither proven nor of the same orientation
    proven, same, _ = S._certify_pairs(ev, Qa, Qb)
    assert proven.tolist() == [True, False] and same.tolist() == [True, False]
