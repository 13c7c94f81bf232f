"""The warm-started pose step (issue 9): the second-order predictor's curvature term
(``kinematics.bias_one``), the one-state evaluator, the normal-equation solves and the
one-state link placements, each checked against an independent reference; and the step
itself: a 1-degree warm-started four-bar step closes with two loop evaluations and lands
on the closed-form position of its branch."""
from __future__ import annotations

import math

import numpy as np
import pytest

import jointwise
import mechanisms as M
from jointwise import kinematics, solver
from jointwise.linalg import lstsq_small, normal_factor, normal_solve

A, B, C, D = 1.0, 3.0, 2.5, 3.0  # invented crank-rocker


def _block_plan(m, held=()):
    s = m.solver
    b = s.blocks[0]
    cols = [("m", g) for g in b.groups if g not in held] + [("m", g) for g in held]
    return s, b, cols, s._plan(b, cols, set())


@pytest.mark.parametrize("build, drive, value", [
    (lambda: M.four_bar(A, B, C, D, 60.0), "crank", 75.0),
    (lambda: M.rssr(), "crank", 20.0),
    (lambda: M.watt_six_bar(), None, None),
    (lambda: M.scissor_stack(3), "slide", 380.0),
])
def test_bias_one_matches_central_differences_of_the_jacobian(build, drive, value):
    # J-dot q-dot = d/dh J(q + h q') q' at h = 0, by central differences of the analytic
    # Jacobian along a tangent q' of the closed loops (where the residual's second
    # derivative along the line is exactly this term)
    m = jointwise.from_dict(build())
    drive = drive or m.driven[0]
    p = m.pose({drive: value}) if value is not None else m.pose()
    i = m.coordinates.index(drive)
    qd = m.solver.tangent(p.q, [], i)
    s, b, cols, plan = _block_plan(m)
    rates = np.array([qd[c[1]] for c in cols])
    r, _, J, src = kinematics.eval_one(s, plan, p.q, True, True)
    h = 1e-5
    Jp = kinematics.eval_one(s, plan, p.q + h * qd)[2]
    Jm = kinematics.eval_one(s, plan, p.q - h * qd)[2]
    fd = (Jp - Jm) / (2 * h) @ rates
    exact = kinematics.bias_one(plan, src, rates)
    assert np.abs(exact).max() > 1e-3  # a real term, not zero
    assert np.allclose(exact, fd, atol=1e-7 * max(1.0, np.abs(exact).max()))
    assert np.abs(J @ rates).max() < 1e-9  # q' is a tangent: J q' = 0


def test_eval_one_jacobian_matches_central_differences_of_the_residual():
    # columns of the one-state evaluator against differences of its own residual (at the
    # cut point), at a closed state of a two-loop linkage
    m = jointwise.from_dict(M.watt_six_bar())
    p = m.pose()
    s, b, cols, plan = _block_plan(m)
    r, errs, J = kinematics.eval_one(s, plan, p.q)
    assert errs.max() <= 1e-9
    h = 1e-6
    for k, c in enumerate(cols):
        dq = np.zeros_like(p.q)
        for i in m.coupling_table.members[c[1]]:
            dq[i] = h * m.coupling_table.member_slope(i, p.q[c[1]])
        fd = (kinematics.eval_one(s, plan, p.q + dq, False)[0] - kinematics.eval_one(s, plan, p.q - dq, False)[0]) / (2 * h)
        assert np.allclose(J[:, k], fd, atol=1e-7 * max(1.0, np.abs(J).max()))


def test_normal_solves_match_numpy_lstsq():
    # reference: numpy's SVD least squares
    rng = np.random.default_rng(7)
    for k in (1, 2, 3):
        a = rng.normal(size=(6, k))
        fac = normal_factor(a)
        assert fac is not None
        for _ in range(3):
            b = rng.normal(size=6)
            ref = np.linalg.lstsq(a, b, rcond=None)[0]
            assert np.allclose(normal_solve(fac, a, b), ref, rtol=1e-12, atol=1e-12)
            assert np.allclose(lstsq_small(a, b, 1e-10), ref, rtol=1e-12, atol=1e-12)
    a = np.ones((6, 2))  # rank one: no certificate, lstsq_small takes the SVD
    assert normal_factor(a) is None
    assert np.allclose(lstsq_small(a, np.arange(6.0), 1e-10), np.linalg.lstsq(a, np.arange(6.0), rcond=1e-10)[0])


@pytest.mark.parametrize("build", [lambda: M.four_bar(A, B, C, D, 60.0), lambda: M.rssr(), lambda: M.hooke(),
                                   lambda: M.screw_jaw(), lambda: M.branching_tree(4)])
def test_one_state_link_placements_match_the_exponential_products(build):
    # reference: each link's placement as the product of spatial.exp6 of its tree joints'
    # screws down from ground (Lynch & Park 2017, eq. 4.14), inverses where walked backwards
    from jointwise import spatial
    m = jointwise.from_dict(build())
    q = m.home + np.random.default_rng(3).normal(0, 0.3, m.home.shape)
    got = m.link_poses(q)
    assert list(got) == list(m.links)
    ref = {m.ground: np.eye(4)}
    for link in m.order[1:]:
        jn, sign = m.tree_parent[link]
        j = m.joints[jn]
        sl = m.slices[jn]
        e = np.eye(4)
        for k, pr in enumerate(j.primitives):
            e = e @ spatial.exp6(pr.screw, q[sl.start + k] - m.home[sl.start + k])
        ref[link] = ref[j.parent] @ e if sign > 0 else ref[j.child] @ np.linalg.inv(e)
    for link in m.links:
        assert got[link].shape == (4, 4)
        assert np.allclose(got[link], ref[link], atol=1e-12 * max(1.0, m.size))


def test_a_warm_1_degree_four_bar_step_closes_with_two_evaluations(monkeypatch):
    m = jointwise.from_dict(M.four_bar(A, B, C, D, 60.0))
    calls = []
    real = kinematics.eval_one

    def counted(*args, **kw):
        calls.append(1)
        return real(*args, **kw)

    for t in (30.0, 95.0, 200.0, 300.0):
        start = m.pose({"crank": t - 1.0})
        monkeypatch.setattr(kinematics, "eval_one", counted)
        calls.clear()
        p = m.pose({"crank": t}, start=start)
        monkeypatch.setattr(kinematics, "eval_one", real)
        assert p.converged and not p.singular
        assert len(calls) == 2  # at the predictor and at the closed state
        # on the open branch of the closed form (Norton, Design of Machinery, sec. 4.5)
        assert p.joints["rocker"] == pytest.approx(M.four_bar_positions(A, B, C, D, t)[2], abs=1e-8)


def test_the_curvature_term_moves_only_the_correctors_start():
    # the step taken without the second-order term (first-order predictor, as before)
    # reaches the same closed state and the same flags
    m1 = jointwise.from_dict(M.four_bar(A, B, C, D, 60.0))
    m2 = jointwise.from_dict(M.four_bar(A, B, C, D, 60.0))
    for t in (10.0, 120.0, 181.0, 359.0):
        s1, s2 = m1.pose({"crank": t - 7.0}), m2.pose({"crank": t - 7.0})
        p1 = m1.pose({"crank": t}, start=s1)
        for st in m2.solver._steps.values():
            st.curved = False
        p2 = m2.pose({"crank": t}, start=s2)
        assert p1.converged and p2.converged and p1.singular == p2.singular
        assert np.allclose(p1.q, p2.q, atol=1e-9)
