"""Results that say why: Pose.status / Pose.reason, Sweep.status / Sweep.failures.

The planar four-bar of ``sweep_fixtures`` (crank a = 30, coupler b = 90, rocker c = 70,
ground d = 100 mm) driven by its rocker reaches only up to the toggle where crank and
coupler fold onto one line, |O2 B| = b - a: by the law of cosines in the triangle O2 O4 B,
cos(phi) = (d^2 + c^2 - (b - a)^2) / (2 d c) and the rocker angle is 180 deg - phi
(about 143.8 deg).  Rows beyond it are 'unreachable'.  Rocker angles of a crank sweep
come from Freudenstein's equation (as in test_sweep.py).
"""
import json
import math
import os
import pickle
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(__file__))
from sweep_fixtures import fourbar_toml, load  # noqa: E402
from test_sweep import freudenstein, wrapdeg  # noqa: E402

from jointwise.errors import LimitError, Reason  # noqa: E402
from jointwise.results import STATUSES, Note  # noqa: E402

A, B, C, D = 30.0, 90.0, 70.0, 100.0


def toggle_rocker_deg():
    phi = math.acos((D * D + C * C - (B - A) ** 2) / (2 * D * C))
    return 180.0 - math.degrees(phi)


def test_pose_status_converged_and_unclosed_state():
    m = load(fourbar_toml())
    p = m.pose({"crank": 75.0})
    assert p.status == "converged" and p.reason is None
    s = m.state({"crank": 75.0})  # values given, loops not solved: open
    assert not s.converged
    assert s.status == "unreachable"
    assert s.reason.kind == "unreachable" and s.reason.error == pytest.approx(s.residual)


def test_pose_limit_error_carries_fields_in_file_units():
    m = load(fourbar_toml(limits=[60.0, 120.0]))
    with pytest.raises(LimitError) as exc:
        m.pose({"rocker": 130.0})
    r = exc.value.reason
    assert (r.kind, r.joint, r.unit) == ("limit", "rocker", "deg")
    assert r.value == pytest.approx(130.0) and r.bounds == pytest.approx((60.0, 120.0))
    assert str(exc.value) == "rocker = 130 deg lies outside its limits [60, 120] deg"


def test_sweep_status_unreachable_beyond_the_toggle():
    m = load(fourbar_toml())
    vals = np.linspace(100, 160, 61)
    sw = m.sweep("rocker", vals)
    st = sw.status
    assert st.shape == vals.shape and set(st) <= set(STATUSES)
    top = toggle_rocker_deg()
    assert abs(top - 143.8) < 0.05
    assert (st[vals > top + 0.5] == "unreachable").all()
    assert np.isin(st[vals < top - 0.5], ["converged", "singular"]).all()
    assert (st[vals < top - 5] == "converged").all()
    assert set(sw.failures) == set(np.flatnonzero(~sw.converged).tolist())
    assert all(r.kind == "unreachable" for r in sw.failures.values())
    # the text stays as it was; it carries the structured reason
    first = min(sw.failures)
    assert isinstance(sw.reasons[first], str) and sw.reasons[first].reason is sw.failures[first]


def test_sweep_status_limit_rows_name_joint_and_bounds():
    lo, hi = 50.0, 100.0
    m = load(fourbar_toml(limits=[lo, hi]))
    vals = np.linspace(60, 420, 361)
    sw = m.sweep("crank", vals)
    t4, _ = freudenstein(np.radians(vals))
    rocker = wrapdeg(np.degrees(t4))
    outside = (rocker < lo - 0.2) | (rocker > hi + 0.2)
    inside = (rocker > lo + 0.2) & (rocker < hi - 0.2)
    assert outside.any() and inside.any()
    st = sw.status
    assert (st[outside] == "limit").all()
    assert (st[inside] == "converged").all()
    for i in np.flatnonzero(outside):
        r = sw.failures[int(i)]
        assert (r.kind, r.joint, r.unit, r.held) == ("limit", "rocker", "deg", False)
        assert r.bounds == pytest.approx((lo, hi))
        assert not lo <= r.value <= hi


def test_sweep_limit_of_a_held_coordinate_says_it_was_asked():
    # the rocker driven past its own limit: the value was asked (held), not found by closing
    # the loop, so its reason says held (its text reads "rocker = V lies outside its limits")
    lo, hi = 50.0, 100.0
    m = load(fourbar_toml(limits=[lo, hi]))
    vals = np.linspace(60.0, 110.0, 51)
    sw = m.sweep("rocker", vals)
    past = vals > hi + 1e-9
    assert (sw.status[past] == "limit").all() and (sw.status[~past] != "limit").all()
    for i in np.flatnonzero(past):
        r = sw.failures[int(i)]
        assert (r.kind, r.joint, r.held) == ("limit", "rocker", True)
        assert r.value == pytest.approx(vals[i])
        assert r.message().startswith(f"rocker = {vals[i]:g} deg lies outside its limits")


def test_sweep_status_singular_rows():
    m = load(fourbar_toml(a=40, b=100, c=40, d=100, theta2=60.0))  # parallelogram
    vals = np.linspace(60, 300, 481)
    sw = m.sweep("crank", vals)
    st = sw.status
    assert (st == "singular").any()
    assert ((st == "singular") == (sw.singular & sw.converged)).all()
    assert ((st == "converged") == (sw.converged & ~sw.singular)).all()


def test_note_reads_as_its_text():
    n = Note("limit of joint rocker", Reason("limit", joint="rocker"))
    assert n == "limit of joint rocker" and json.dumps({1: n}) == '{"1": "limit of joint rocker"}'
    back = pickle.loads(pickle.dumps(n))
    assert back == n and back.reason == n.reason
