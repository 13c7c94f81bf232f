"""``range`` searches to the real ends however many turns away, and says when it stopped
at its search bound; dead points found from a failed continuation's farthest closed state.

References: the Tr16x4 lead (4 mm per turn, ISO 2904 designation) turns the jaw slide's
limits [-48, 8] mm into screw turns; the RSSR's dead points are where the closed form
P cos p + Q sin p = S (tests/branch_campaign.py) has |S| = sqrt(P^2 + Q^2), found here by
scipy's brentq.
"""
import os

import numpy as np
import pytest
from scipy.optimize import brentq

import jointwise
from jointwise.sweep import reach
import branch_campaign as B

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
VISE = open(os.path.join(ROOT, "blend_samples", "linnet_vise.toml"), encoding="utf-8").read()


def test_lead_screw_is_searched_to_the_slide_limits_many_turns_away():
    text = VISE.replace("limits = [-720, 4320]\n", "", 1)  # the screw's own limits removed
    assert text != VISE
    m = jointwise.loads(text, source="vise.toml")
    res = reach(m, "screw_bearing")
    (lo, hi), = res["intervals"]
    # jaw at 8 mm and -48 mm: 8 / 4 = 2 turns one way, 48 / 4 = 12 turns the other
    assert lo == pytest.approx(-2 * 360.0, abs=1e-5)
    assert hi == pytest.approx(12 * 360.0, abs=1e-5)
    assert res["reasons"] == [["limit of joint jaw_slide", "limit of joint jaw_slide"]]


def test_unbounded_screw_says_it_stopped_at_the_search_bound():
    text = VISE.replace("limits = [-720, 4320]\n", "", 1).replace("limits = [-48, 8]\n", "", 1)
    m = jointwise.loads(text, source="vise.toml")
    res = reach(m, "screw_bearing", max_turns=20)
    (lo, hi), = res["intervals"]
    assert lo <= -20 * 360.0 and hi >= 20 * 360.0
    for why in res["reasons"][0]:
        assert why == "no end found within 20 turns (search bound)"


def test_rssr_dead_points_match_closed_form():
    rng = np.random.default_rng(1)
    for _ in range(3):  # the third case of this seed: an RSSR whose crank cannot turn fully
        case = B.KINDS[["four-bar", "slider-crank", "RSSR"][_]](rng, near_toggle=bool(_ % 2))
    a, C, u, w, l, home, sign = case["dims"]
    C, u, w = np.array(C), np.array(u), np.array(w)
    v = np.cross(u, w)

    def ratio(deg):
        t = np.radians(deg)
        A = np.array([a * np.cos(t), a * np.sin(t), 0.0])
        CA = C - A
        return (l * l - CA @ CA - w @ w) / np.hypot(2 * CA @ w, 2 * CA @ v)
    m = B._mech(case["data"])
    res = reach(m, "crank")
    (lo, hi), = res["intervals"]
    assert res["reasons"] == [["dead point", "dead point"]]
    assert lo < home < hi
    for end, inside in ((lo, lo + 1.0), (hi, hi - 1.0)):
        outside = end + (end - inside)
        target = 1.0 if ratio(inside) > 0 else -1.0
        assert abs(ratio(inside)) < 1 < abs(ratio(outside))
        dead = brentq(lambda x: ratio(x) - target, inside, outside, xtol=1e-12)
        assert end == pytest.approx(dead, abs=1e-5)
