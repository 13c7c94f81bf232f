"""A continuation stops at the first joint limit its path reaches (core/solver.py
``Solver._stop_at_limit``).

A joint limit is a hard stop: a held value whose closed placement lies beyond a limit
along the path from the start cannot be reached without passing through the stop, so the
solve fails there, naming the joint and the limit, instead of walking on to the end.
Checked on the Plover lift table (three-stage scissor on an M16 lead screw, screw limits
[0, 45000] deg): the top pivot's angle drives the screw through the scissor geometry.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import jointwise
from jointwise.errors import LimitError

LIFT = Path(__file__).resolve().parents[1] / "blend_samples" / "plover_lift.toml"


@pytest.fixture(scope="module")
def lift():
    return jointwise.load(LIFT)


@pytest.mark.parametrize("top", [60.0, 70.0, 90.0])
def test_a_target_past_the_screw_limit_stops_at_the_limit(lift, top):
    with pytest.raises(LimitError, match=r"screw_bearing reaches its limit 45000 deg") as e:
        lift.pose({"top_pin": top})
    err = e.value
    assert err.joint == "screw_bearing" and err.kind == "limit"
    assert err.bounds == (0.0, 45000.0) and err.value == 45000.0 and err.reason.unit == "deg"


def test_the_reachable_side_is_unchanged_and_inside_the_limits(lift):
    p = lift.pose({"top_pin": 50.0})
    assert p.converged
    assert 0.0 <= p.joints["screw_bearing"] <= 45000.0


def test_sweep_past_the_limit_flags_the_rows_beyond_and_keeps_the_rest(lift):
    s = lift.sweep("top_pin", np.arange(0.0, 91.0, 10.0))
    assert s.converged.tolist() == [True] * 6 + [False] * 4
    # the rows that closed agree with single poses from home (same branch)
    for k in (1, 3, 5):
        p = lift.pose({"top_pin": float(s.values[k])})
        assert s.joints["screw_bearing"][k] == pytest.approx(p.joints["screw_bearing"], abs=1e-6)
