"""The sweep's anchor walk steps over anchors while its predictor is right (sweep.py,
``ANCHOR_STRIDE``): same rows as the walk through every anchor, a fraction of the work.

Reference: the lift table's screw and nut (``blend_samples/plover_lift.toml``, M16 coarse:
pitch 2 mm, ISO 261 from memory) move the foot by one lead per turn, so the foot slides
``-2 mm * screw / 360 deg`` exactly (the helical joint's definition, lead per turn); and the
same continuation with ``ANCHOR_STRIDE = 1`` (every anchor solved in turn, as before)."""
from __future__ import annotations

import pathlib

import numpy as np

import jointwise
from jointwise import kinematics, sweep

ROOT = pathlib.Path(__file__).resolve().parents[1]


def _follow_counted(monkeypatch, stride):
    calls = []
    real = kinematics.Evaluator.eval

    def counted(self, *a, **k):
        calls.append(1)
        return real(self, *a, **k)
    monkeypatch.setattr(kinematics.Evaluator, "eval", counted)
    monkeypatch.setattr(sweep, "ANCHOR_STRIDE", stride)
    mech = jointwise.load(str(ROOT / "blend_samples" / "plover_lift.toml"))
    screw = np.linspace(0.0, 18000.0, 240)  # 50 turns, the sample's documented sweep
    sw = mech.follow({"screw_bearing": screw})
    monkeypatch.undo()
    return mech, screw, sw, len(calls)


def test_a_screw_of_many_turns_strides_over_anchors_and_keeps_every_turn(monkeypatch):
    mech, screw, fast, n_fast = _follow_counted(monkeypatch, sweep.ANCHOR_STRIDE)
    _, _, slow, n_slow = _follow_counted(monkeypatch, 1)
    assert fast.converged.all() and slow.converged.all()
    # one lead per turn: the nut keeps every one of its 50 turns (no turn lost between anchors)
    assert np.abs(fast.joints["foot_slide"] - (-2.0 * screw / 360.0)).max() < 1e-6
    assert np.abs(fast.joints["screw_nut"] + screw).max() < 1e-6
    for c in mech.coordinates:
        assert np.abs(fast.joints[c] - slow.joints[c]).max() < 1e-6, c
    assert n_fast * 3 < n_slow, (n_fast, n_slow)  # a fraction of the evaluations
