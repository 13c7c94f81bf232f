"""The evaluator's rates and accelerations (issue 9): J-dot q-dot from Lie brackets and
point Jacobians, checked against central finite differences and against the closed-form
acceleration analysis of a four-bar."""
from __future__ import annotations

import math

import numpy as np
import pytest

import jointwise
import mechanisms as M
from jointwise.kinematics import loop_bias, point_motion
from jointwise.sweep import _Evaluator as Evaluator  # the loop equations' stacked Jacobian

A, B, C, D = 1.0, 3.0, 2.5, 3.0  # invented crank-rocker


def _closed(mech, drive, value):
    p = mech.pose({drive: value})
    i = mech.coordinates.index(drive)
    qd = mech.solver.tangent(p.q, [], i)  # dq/d(drive), internal units
    return p.q, qd, i


def _full_cols(mech, ev):
    t = mech.coupling_table
    return [("m", i) for i in sorted({i for g in ev.block.groups for i in t.members[g]})]


@pytest.mark.parametrize("build, drive, value", [
    (lambda: M.four_bar(A, B, C, D, 60.0), "crank", 75.0),
    (lambda: M.rssr(), "crank", 20.0),
])
def test_bias_matches_central_differences(build, drive, value):
    m = jointwise.from_dict(build())
    q, qd, _ = _closed(m, drive, value)
    ev = Evaluator(m, m.solver.blocks[0], set())
    cols = _full_cols(m, ev)
    idx = [c[1] for c in cols]
    h = 1e-5
    Jp = ev.eval((q + h * qd)[None], cols, rotmode=False)[2][0]
    Jm = ev.eval((q - h * qd)[None], cols, rotmode=False)[2][0]
    fd = (Jp - Jm) / (2 * h) @ qd[idx]
    exact = loop_bias(m, ev.block, q[None], qd[None])[0]
    assert np.abs(exact).max() > 1e-3  # a real term, not zero
    assert np.allclose(exact, fd, atol=1e-7 * max(1.0, np.abs(exact).max()))


def test_four_bar_accelerations_match_the_vector_loop_closed_form():
    # vector loop a e^{i t2} + b e^{i t3} - c e^{i t4} - d = 0, differentiated once and twice
    # (Norton, Design of Machinery, sec. 6.7 and 7.3): 2x2 real systems for (w3, w4) and
    # (al3, al4) with the crank turning at w2 = 1 rad/s, al2 = 0
    m = jointwise.from_dict(M.four_bar(A, B, C, D, 60.0))
    for t2d in (20.0, 75.0, 140.0, 250.0):
        q, qd, ic = _closed(m, "crank", t2d)
        (ax, ay), (bx, by), t4d = M.four_bar_positions(A, B, C, D, t2d)
        t2, t3, t4 = math.radians(t2d), math.atan2(by - ay, bx - ax), math.radians(t4d)
        w2 = 1.0
        Mv = np.array([[-B * math.sin(t3), C * math.sin(t4)], [B * math.cos(t3), -C * math.cos(t4)]])
        w3, w4 = np.linalg.solve(Mv, [A * w2 * math.sin(t2), -A * w2 * math.cos(t2)])
        rhs = [A * w2 ** 2 * math.cos(t2) + B * w3 ** 2 * math.cos(t3) - C * w4 ** 2 * math.cos(t4),
               A * w2 ** 2 * math.sin(t2) + B * w3 ** 2 * math.sin(t3) - C * w4 ** 2 * math.sin(t4)]
        al3, al4 = np.linalg.solve(Mv, rhs)
        # jointwise: J_u qdd_u = -(J-dot q-dot), crank held (al2 = 0)
        ev = Evaluator(m, m.solver.blocks[0], {ic})
        cols = ev.cols_coord
        J = ev.eval(q[None], cols, rotmode=False)[2][0]
        qdd_u = np.linalg.lstsq(J, -loop_bias(m, ev.block, q[None], qd[None])[0], rcond=1e-12)[0]
        qdd = dict(zip([m.coordinates[c[1]] for c in cols], qdd_u))
        i4 = m.coordinates.index("rocker")
        assert qd[i4] == pytest.approx(w4, abs=1e-9)
        assert qd[ic] + qd[m.coordinates.index("pin_a")] == pytest.approx(w3, abs=1e-9)
        assert qdd["rocker"] == pytest.approx(al4, abs=1e-8)
        assert qdd["pin_a"] == pytest.approx(al3, abs=1e-8)  # al3 = al2 + pin_a'' with al2 = 0


def test_point_motion_matches_differences_and_the_crank_pin():
    m = jointwise.from_dict(M.rssr())
    q, qd, _ = _closed(m, "crank", 35.0)
    at = np.array([1.0, 0.5, 0.25])
    Q, Qd = q[None], qd[None]
    for link in ("crank_arm", "coupler", "rocker_arm"):
        x, Jp, a0 = point_motion(m, Q, Qd, link, at)
        # position against the link poses
        D_ = m.link_poses(q)[link]
        assert np.allclose(x[0], D_[:3, :3] @ at + D_[:3, 3], atol=1e-12)
        # along the straight line q + t qd: x' = Jp qd, x'' = a0 (q'' = 0 there)
        h = 1e-4
        xp = point_motion(m, Q + h * Qd, Qd, link, at)[0][0]
        xm = point_motion(m, Q - h * Qd, Qd, link, at)[0][0]
        assert np.allclose(Jp[0] @ qd, (xp - xm) / (2 * h), atol=1e-7)
        assert np.allclose(a0[0], (xp - 2 * x[0] + xm) / h ** 2, atol=1e-5)
    # the crank pin (2, 0, 0) on a crank turning at 1 rad/s about z: speed 2, centripetal 2
    x, Jp, a0 = point_motion(m, Q, Qd, "crank_arm", [2.0, 0.0, 0.0])
    v = Jp[0] @ qd
    assert np.linalg.norm(v) == pytest.approx(2.0, abs=1e-12)
    assert np.allclose(a0[0], -x[0] * np.array([1, 1, 0]), atol=1e-12)


def _twist_by_differences(m, q_plus, q_minus, link, h):
    """Spatial twist of ``link`` from central differences of its pose: vee(D' D^-1)."""
    Dp, Dm = m.link_poses(q_plus)[link], m.link_poses(q_minus)[link]
    D0 = m.link_poses(0.5 * (q_plus + q_minus))[link]
    Xi = (Dp - Dm) / (2 * h) @ np.linalg.inv(D0)
    return np.array([Xi[2, 1], Xi[0, 2], Xi[1, 0], Xi[0, 3], Xi[1, 3], Xi[2, 3]])


def test_link_columns_match_central_differences_of_the_link_poses():
    # every coordinate, at an arbitrary (not closed) state: the columns are a tree's
    # space Jacobian (Lynch & Park 2017, sec. 5.1.1), checked against differences
    from jointwise.kinematics import link_motion
    m = jointwise.from_dict(M.rssr())
    rng = np.random.default_rng(7)
    q = m.home + rng.uniform(-0.6, 0.6, len(m.coordinates))
    h = 1e-6
    for link in m.links:
        cols = link_motion(m, q[None], None, link)[1]
        # the same columns from the link poses' frames instead of the walk
        framed = link_motion(m, q[None], None, link, links=m.link_poses(q))[1]
        assert np.allclose(framed, cols, atol=1e-12)
        for i in range(len(q)):
            dq = np.zeros(len(q))
            dq[i] = h
            fd = _twist_by_differences(m, q + dq, q - dq, link, h)
            assert np.allclose(cols[0][:, i], fd, atol=1e-7), (link, m.coordinates[i])


def test_link_columns_of_rotation_increments_match_the_solvers_step():
    # a free ball joint moved by rotation increments (the solver's columns): the column is
    # the twist of the increment, checked against the solver's own update of the state
    from jointwise.kinematics import link_motion
    m = jointwise.from_dict(M.rssr())
    s = m.solver
    q = m.pose({"crank": 35.0}).q
    h = 1e-6
    cols_s = [("s", "ball_a", k) for k in range(3)]
    cols = link_motion(m, q[None], None, "coupler", rot={"ball_a"}, links=m.link_poses(q))[1]
    walked = link_motion(m, q[None], None, "coupler", rot={"ball_a"})[1]
    assert np.allclose(walked, cols, atol=1e-12)
    sl = m.slices["ball_a"]
    for k in range(3):
        du = np.zeros(3)
        du[k] = h
        qp, qm = q.copy(), q.copy()
        s._apply(qp, cols_s, {"ball_a"}, du)
        s._apply(qm, cols_s, {"ball_a"}, -du)
        fd = _twist_by_differences(m, qp, qm, "coupler", h)
        assert np.allclose(cols[0][:, sl.start + k], fd, atol=1e-7), k
