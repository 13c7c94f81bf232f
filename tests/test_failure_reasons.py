"""Failures and range ends with a structured reason (issue 9, item 4): every failure of a
solve carries a :class:`jointwise.errors.Reason` whose fields (file units) give its text,
and a reachable range says per end why it stops (status and Reason).

References: the four-bar positions are Freudenstein's closed form (tests/mechanisms.py,
``four_bar_positions``); a crank-rocker's rocker stops where crank and coupler are
collinear, its angle there from the law of cosines in triangle O2-O4-B (as in
tests/test_range.py); a gear coupling is ``wheel = ratio * pinion + offset`` by definition.
"""
from __future__ import annotations

import math

import pytest

import jointwise
import mechanisms as M
from jointwise.errors import AssemblyError, LimitError, Reason
from jointwise.results import STATUSES
from jointwise.sweep import reach
from jointwise.units import ASSEMBLY_TOLERANCE, MAX_SPAN
from sweep_fixtures import fourbar_toml, load

A, B, C, D = 30.0, 90.0, 70.0, 100.0
CR = (30.0, 90.0, 70.0, 100.0)


def limit_angle(s):
    return 180.0 - math.degrees(math.acos((D * D + C * C - s * s) / (2 * D * C)))


def _raised(fn):
    with pytest.raises(AssemblyError) as exc:
        fn()
    e = exc.value
    assert e.reason is not None and str(e) == e.reason.message()  # the text comes from the fields
    return e.reason


# -- range ends -----------------------------------------------------------------------------------

def test_range_dead_points_carry_status_and_reason():
    m = load(fourbar_toml())
    res = reach(m, "rocker")
    (lo, hi), = res["intervals"]
    assert res["status"] == [["singular", "singular"]]
    for end, want, why, r in zip((lo, hi), (limit_angle(B + A), limit_angle(B - A)), res["reasons"][0],
                                 res["stops"][0]):
        assert why.reason is r
        assert (r.kind, r.joint, r.unit, r.bounds) == ("singular", "rocker", "deg", (lo, hi))
        assert r.value == end and abs(r.value - want) < 2e-6
    assert set(s for pair in res["status"] for s in pair) <= set(STATUSES)


def test_range_limits_name_the_limited_joint_and_its_value():
    m = load(fourbar_toml(limits=[90, 120]))
    res = reach(m, "rocker")
    assert res["status"] == [["singular", "limit"]]
    r = res["stops"][0][1]
    assert (r.kind, r.joint, r.unit) == ("limit", "rocker", "deg")
    assert r.value == pytest.approx(120.0, abs=1e-9) and r.bounds == pytest.approx((90.0, 120.0))
    res = reach(m, "crank")  # the rocker's limits stop the crank: its value at each end is a limit
    assert res["status"] == [["limit", "limit"]]
    for end, r in zip(res["intervals"][0], res["stops"][0]):
        assert (r.kind, r.joint, r.held) == ("limit", "rocker", False)
        assert r.value == pytest.approx(m.pose({"crank": end}).joints["rocker"], abs=1e-6)
        assert min(abs(r.value - b) for b in r.bounds) < 1e-5


def test_range_that_turns_fully_has_no_stop():
    m = load(fourbar_toml())
    res = reach(m, "crank")
    assert res["status"] == [["converged", "converged"]] and res["stops"] == [[None, None]]
    assert [getattr(w, "reason", None) for w in res["reasons"][0]] == [None, None]


def test_locked_drive_reason_has_the_locked_value():
    m = load(fourbar_toml())
    held = m.pose({"rocker": 110.0})
    with pytest.raises(AssemblyError) as exc:
        reach(m, "crank", {"rocker": 110.0})
    r = exc.value.reason
    assert "cannot move" in str(exc.value)
    assert (r.joint, r.unit) == ("crank", "deg") and r.kind in ("singular", "limit")
    lo, hi = r.bounds
    assert lo <= r.value <= hi and hi - lo < 1e-4
    # the locked crank value is where the held rocker puts it (the pose from home)
    assert abs(((r.value - held.joints["crank"]) + 180) % 360 - 180) < 1e-4


# -- failures of a pose ---------------------------------------------------------------------------

def test_out_of_reach_names_the_held_value_and_how_far_it_closed():
    m = load(fourbar_toml())
    r = _raised(lambda: m.pose({"rocker": 150.0}))
    assert (r.kind, r.joint, r.value, r.unit) == ("unreachable", "rocker", 150.0, "deg")
    assert r.bounds[0] == r.bounds[1] and abs(r.bounds[1] - limit_angle(B - A)) < 1e-3


def test_limits_on_the_way_and_at_the_closed_placement():
    r60, r65 = M.four_bar_positions(*CR, 60.0)[2], M.four_bar_positions(*CR, 65.0)[2]
    m = jointwise.from_dict(M.four_bar(*CR, 60.0, rocker_limits=[r60 - 1, (r60 + r65) / 2]))
    r = _raised(lambda: m.pose({"crank": 65.0}))
    assert (r.kind, r.joint, r.held, r.on_path) == ("limit", "rocker", False, True)
    assert r.value == pytest.approx((r60 + r65) / 2) and r.bounds == pytest.approx((r60 - 1, (r60 + r65) / 2))
    r61 = M.four_bar_positions(*CR, 60.1)[2]
    m = jointwise.from_dict(M.four_bar(*CR, 60.0, rocker_limits=[r60 - 1, (r60 + r61) / 2]))
    with pytest.raises(LimitError):
        m.pose({"crank": 60.1})
    r = _raised(lambda: m.pose({"crank": 60.1}))
    assert (r.kind, r.joint, r.held, r.on_path) == ("limit", "rocker", False, False)
    assert r.value == pytest.approx(r61, abs=1e-8)  # Freudenstein's closed form


def test_too_far_says_what_can_be_followed_from_the_start():
    m = load(fourbar_toml())
    home = m.pose().joints["rocker"]
    r = _raised(lambda: m.pose({"rocker": 1e6}))
    reach_deg = math.degrees(MAX_SPAN)
    assert (r.kind, r.joint, r.unit) == ("span", "rocker", "deg") and r.value == pytest.approx(1e6)
    assert r.bounds == pytest.approx((home - reach_deg, home + reach_deg), rel=1e-12)
    assert "too far" in r.message()


def test_contradicting_held_values_and_a_held_follower():
    g = jointwise.from_dict(M.gear_pair(18, 42))
    r = _raised(lambda: g.pose({"pinion": 10.0, "wheel": 50.0}))
    assert (r.kind, r.joint, r.other, r.value, r.unit) == ("coupling", "wheel", "pinion", 50.0, "deg")
    assert r.bounds == pytest.approx((-18 / 42 * 10.0, -18 / 42 * 10.0))  # what the coupling allows
    cam = M.base("Fennwick test cam", links=["cam", "follower"])
    cam["joints"]["cam_shaft"] = M.revolute("frame", "cam", (0, 0), drive=True)
    cam["joints"]["lift"] = {"type": "prismatic", "parent": "frame", "child": "follower",
                             "point": [0.0, 40.0, 0.0], "axis": [0.0, 1.0, 0.0]}
    cam["couplings"] = {"cam": {"leader": "cam_shaft", "follower": "lift", "law": "program",
                                "segments": [[0, 180, 0, 10, "cycloidal"], [180, 360, 10, 0, "cycloidal"]]}}
    c = jointwise.from_dict(cam)
    r = _raised(lambda: c.pose({"lift": 3.0}))
    assert (r.kind, r.joint, r.other) == ("coupling", "lift", "cam_shaft")
    assert r.message() == "'lift' follows a motion law and cannot be held; hold its leader 'cam_shaft' instead"


def test_coupling_off_at_home_gives_the_gap():
    d = M.gear_pair(18, 42)
    d["joints"]["wheel"]["home"] = 1.0  # the coupling says 0 at home
    g = jointwise.from_dict(d)
    r = _raised(lambda: g.pose({"pinion": 10.0}))
    assert (r.kind, r.coupling, r.joint, r.unit) == ("coupling", "mesh", "wheel", "deg")
    assert r.value == pytest.approx(1.0, rel=1e-12)
    assert r.bounds == pytest.approx((0.0, math.degrees(ASSEMBLY_TOLERANCE)))


def test_home_reason_texts_from_fields():
    r = Reason("home", loop="pin_b", value=0.5, bounds=(0.0, 0.1), unit="mm", angle=(2.0, 0.0573), error=0.01)
    assert r.message() == ("loop closed by joint 'pin_b' does not close at home: gap 0.5 mm, 2 deg "
                           "(assembly tolerance 0.1 mm, 0.0573 deg)")
    assert Reason("home", loop="pin_b", error=3e-4).message() == (
        "loop closed by joint 'pin_b' could not be settled at home (closest error 0.0003)")
    assert str(AssemblyError(reason=r)) == r.message() and AssemblyError(reason=r).loop == "pin_b"
