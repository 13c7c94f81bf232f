"""The coupling table (jointwise.coupling_table): groups, chained ratios, motion laws,
held values, errors and constraint rows.

References: a chain of linear couplings composes by substitution (q_b = r1 q_a + o1,
q_c = r2 q_b + o2 gives q_c = r2 r1 q_a + r2 o1 + o2); a constraint row is the derivative
of the coupling's residual, checked here against a central difference of that residual.
"""
import math

import numpy as np
import pytest

import jointwise
from jointwise.errors import AssemblyError

from mechanisms import base, revolute


def _gear_train(r1=-18 / 42, o1=5.0, r2=-42 / 20, o2=-2.0):
    m = base("Fennwick gear train", links=["a", "b", "c"])
    j = m["joints"]
    j["a"] = revolute("frame", "a", (0, 0), drive=True)
    j["b"] = revolute("frame", "b", (30, 0), home=o1)
    j["c"] = revolute("frame", "c", (60, 0), home=r2 * o1 + o2)
    m["couplings"] = {"ab": {"leader": "a", "follower": "b", "ratio": r1, "offset": o1},
                      "bc": {"leader": "b", "follower": "c", "ratio": r2, "offset": o2}}
    return m


def _cam():
    m = base("Fennwick table cam", links=["cam", "follower"])
    m["joints"]["cam_shaft"] = revolute("frame", "cam", (0, 0), drive=True)
    m["joints"]["lift"] = {"type": "prismatic", "parent": "frame", "child": "follower",
                           "point": [0.0, 40.0, 0.0], "axis": [0.0, 1.0, 0.0]}
    m["couplings"] = {"cam": {"leader": "cam_shaft", "follower": "lift", "law": "program",
                              "segments": [[0, 120, 0, 10, "cycloidal"], [120, 180, 10, 10, "dwell"],
                                           [180, 300, 10, 0, "polynomial-345"], [300, 360, 0, 0, "dwell"]]}}
    return m


def test_chained_ratios_compose():
    r1, o1, r2, o2 = -18 / 42, 5.0, -42 / 20, -2.0
    m = jointwise.from_dict(_gear_train(r1, o1, r2, o2))
    t = m.coupling_table
    a, b, c = (m.index[n] for n in ("a", "b", "c"))
    assert list(t.master) == [a, a, a] and t.members == {a: [a, b, c]}
    deg = math.pi / 180
    assert t.alpha[c] == pytest.approx(r2 * r1, rel=1e-15)
    assert t.beta[c] == pytest.approx((r2 * o1 + o2) * deg, rel=1e-15)
    q = np.zeros(3)
    q[a] = 0.7
    t.derive(q, [a])
    assert q[c] == pytest.approx(r2 * (r1 * 0.7 + o1 * deg) + o2 * deg, rel=1e-14)
    assert max(t.errors(q).values()) < 1e-15
    # a stack derives row by row like single states
    Q = np.zeros((4, 3))
    Q[:, a] = [0.1, 0.2, -1.0, 3.0]
    t.derive(Q, [a])
    for row in Q:
        one = np.zeros(3)
        one[a] = row[a]
        t.derive(one, [a])
        assert np.array_equal(one, row)


def test_held_values_reach_the_master_and_contradictions_are_named():
    m = jointwise.from_dict(_gear_train())
    t = m.coupling_table
    a, c = m.index["a"], m.index["c"]
    target, source = {}, {}
    t.hold(target, source, c, 0.3)
    assert target[a] == pytest.approx((0.3 - t.beta[c]) / t.alpha[c]) and source == {a: c}
    with pytest.raises(AssemblyError, match=r"held values of 'a' and 'c' contradict their coupling"):
        t.hold(target, source, a, target[a] + 0.01)


def test_motion_law_rows_are_the_residual_derivative():
    m = jointwise.from_dict(_cam())
    t = m.coupling_table
    li, fi = m.index["cam_shaft"], m.index["lift"]
    law = m.couplings["cam"].law
    with pytest.raises(AssemblyError, match="follows a motion law and cannot be held"):
        t.hold({}, {}, fi, 1.0)
    h = 1e-6
    for x in (0.3, 1.0, 3.9, 4.5):
        q = np.zeros(2)
        q[li] = x
        t.derive(q, [li])
        assert q[fi] == pytest.approx(float(law.evaluate(x)[0]), abs=1e-12)
        rows = t.rows(q)
        residual = lambda v: v[fi] - float(law.evaluate(v[li])[0])  # noqa: E731
        for k in (li, fi):
            e = np.zeros(2)
            e[k] = h
            assert rows[0, k] == pytest.approx((residual(q + e) - residual(q - e)) / (2 * h), abs=1e-6)


def test_the_table_is_built_once_with_the_model():
    m = jointwise.from_dict(_gear_train())
    t = m.coupling_table
    m.pose({"a": 20.0})
    m.sweep("a", np.linspace(0, 90, 7))
    assert m.coupling_table is t


def test_a_sweeps_held_rows_follow_the_same_rule():
    """Sweeps hold through the table too: a contradiction names the first row that
    disagrees (the gear mesh: wheel = -18/42 pinion); the CLI keeps exit 2 for a sweep."""
    import mechanisms as M
    from jointwise.errors import JointwiseError
    g = jointwise.from_dict(M.gear_pair(18, 42))
    t = g.coupling_table
    w = -18 / 42 * 5.0  # agrees with the middle row only
    with pytest.raises(JointwiseError, match="held values of 'wheel' and 'pinion' contradict their coupling") as exc:
        g.sweep("pinion", [0.0, 5.0, 10.0], held={"wheel": w})
    r = exc.value.reason
    assert (r.kind, r.joint, r.other) == ("coupling", "wheel", "pinion")
    assert r.value == pytest.approx(w) and r.bounds == (0.0, 0.0)  # row 0: pinion 0 allows wheel 0
    target, source = {}, {}
    t.hold(target, source, g.index["pinion"], np.radians([0.0, 5.0]))
    t.hold(target, source, g.index["wheel"], np.radians([0.0, -18 / 42 * 5.0]))  # agrees on every row
    assert np.allclose(target[g.index["pinion"]], np.radians([0.0, 5.0]))
