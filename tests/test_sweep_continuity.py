"""Coordinates of a sweep run on continuously: ball-joint turns do not wrap at 180 deg.

Reference: the crank of the spatial RSSR moves 0.036 deg a step; the closed-form rocker
(tests/sweep_fixtures.rssr_rocker, law of cosines in 3D) moves smoothly with it, so no
coordinate may jump by anything near a turn between neighbouring samples.
"""
import numpy as np

import jointwise
from sweep_fixtures import rssr_rocker, rssr_toml


def test_rssr_ball_turns_are_continuous_and_rocker_matches_closed_form():
    m = jointwise.loads(rssr_toml(), source="rssr.toml")
    v = np.linspace(0, 360, 2001)
    sw = m.sweep("crank", v)
    assert sw.converged.all()
    for c in m.coordinates:
        assert np.abs(np.diff(sw.joints[c])).max() < 5.0, c  # degrees per 0.18 deg of crank
    ref = np.degrees(rssr_rocker(np.radians(v)))
    d = (sw.joints["arm"] - ref + 180) % 360 - 180  # the file's arm home is the absolute angle
    assert np.abs(d).max() < 1e-6
