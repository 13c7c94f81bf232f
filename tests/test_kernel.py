"""The kernel (issue 9), first stage: failures with fields, the rigid-motion maths once in
``spatial`` (scalar fast path of ``log6``, the Lie bracket)."""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from jointwise import spatial
from jointwise.errors import AssemblyError, LimitError, Reason


def test_limit_reason_message_built_from_fields_in_file_units():
    r = Reason("limit", joint="rocker", value=200.0, bounds=(0.0, 170.0), unit="deg")
    e = LimitError(reason=r)
    assert (e.kind, e.joint, e.value, e.bounds, e.unit) == ("limit", "rocker", 200.0, (0.0, 170.0), "deg")
    assert str(e) == "rocker = 200 deg lies outside its limits [0, 170] deg"
    solved = LimitError(reason=Reason("limit", joint="rocker", value=171.5, bounds=(0.0, 170.0), unit="deg",
                                      held=False))
    assert str(solved) == ("infeasible: the closed placement puts rocker at 171.5 deg, "
                           "outside its limits [0, 170] deg")


def test_assembly_error_keeps_its_old_form_and_gains_a_kind():
    e = AssemblyError("cannot assemble", loop="pin_b", error=1e-3, joint="crank")
    assert (str(e), e.loop, e.error, e.joint, e.kind) == ("cannot assemble", "pin_b", 1e-3, "crank", "unreachable")
    assert LimitError("x", joint="c").kind == "limit"
    u = AssemblyError(reason=Reason("unreachable", joint="rocker", loop="pin_b", bounds=(120.5, 120.5),
                                    unit="deg", error=0.25))
    assert str(u) == ("cannot assemble: loop closed by joint 'pin_b' stays open by 0.25 (closest closure "
                      "error reached); the held value of 'rocker' is likely out of reach (the loop stays "
                      "closed only up to about 120.5 deg)")


def test_log6_scalar_path_matches_stack_and_scipy():
    rng = np.random.default_rng(9)
    for ang in (0.0, 1e-9, 1e-5, 0.3, 2.0, 3.1, math.pi - 1e-7):
        axis = rng.normal(size=3)
        axis /= np.linalg.norm(axis)
        w = axis * ang
        T = np.eye(4)
        T[:3, :3] = Rotation.from_rotvec(w).as_matrix()  # scipy as the outside reference
        T[:3, 3] = rng.normal(size=3)
        one = spatial.log6(T)
        many = spatial.log6(np.stack([T, T]))
        assert np.allclose(one, many[0], atol=1e-12)
        assert np.allclose(one[:3], w, atol=1e-9)
        assert np.allclose(spatial.exp6(one), T, atol=1e-12)


def test_bracket_is_the_twist_commutator():
    # [x, y] as 4x4 matrices: [X][Y] - [Y][X] (Lynch & Park 2017, sec. 8.2.1)
    rng = np.random.default_rng(3)
    x, y = rng.normal(size=6), rng.normal(size=6)
    X, Y = spatial.twist_matrix(x), spatial.twist_matrix(y)
    assert np.allclose(spatial.twist_matrix(spatial.ad(x, y)), X @ Y - Y @ X, atol=1e-12)


def test_unit_screw_matches_exp6():
    s = spatial.screw_axis([0.3, -1.0, 2.0], [1.0, 2.0, 2.0], 0.05)
    t = np.array([-2.0, 0.0, 0.7, 3.0])
    R, p = spatial.UnitScrew(s, home=0.5).exp(t)
    for k in range(len(t)):
        T = spatial.exp6(s, t[k] - 0.5)
        assert np.allclose(R[k], T[:3, :3], atol=1e-13) and np.allclose(p[k], T[:3, 3], atol=1e-13)


import jointwise  # noqa: E402
import mechanisms as M  # noqa: E402


def four_bar(**kw):
    return jointwise.from_dict(M.four_bar(1.0, 3.0, 2.5, 3.0, 60.0, **kw))


def test_held_coordinates_drives_and_release():
    m = four_bar()
    assert m.held_coordinates() == ["crank"]                       # the file's drive
    assert m.held_coordinates(["crank"]) == ["crank"]
    assert m.held_coordinates(["rocker"]) == ["rocker"]            # passive given: drive released
    assert m.held_coordinates(drives=()) == []                     # every drive released
    assert m.held_coordinates(["pin_a"], drives=["crank"], animated=["rocker"]) == ["pin_a"]
    assert m.held_coordinates(animated=["rocker"]) == ["crank", "rocker"]
    assert m.held_coordinates(["crank"], inputs=["crank"], animated=["rocker"]) == ["crank"]


def test_held_coordinates_open_chain_and_couplings():
    g = jointwise.from_dict(M.gear_pair())
    names = g.coordinates
    # no loops: every coordinate group is placed by its value only, once per coupling group
    held = g.held_coordinates()
    assert len(held) == len({int(g.coupling_table.master[g.coordinates.index(c)]) for c in names})
    # a given coordinate takes its group's place
    held2 = g.held_coordinates([names[-1]])
    assert names[-1] in held2 and len(held2) == len(held)


def test_one_rule_for_pose_and_follow():
    # follow (the rows of a table) and pose agree where a passive coordinate is given
    m = four_bar()
    p = m.pose({"rocker": 95.0})
    f = m.follow({"rocker": np.array([95.0])})
    assert f.converged[0]
    assert f.joints["crank"][0] == pytest.approx(p.joints["crank"], abs=1e-9)


