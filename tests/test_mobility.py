"""Mobility counts (issue 3 item 5).

Reference: the Grubler-Kutzbach criterion (any mechanism text):
spatial M = 6 (n - 1) - sum(6 - f_i), planar M = 3 (n - 1) - sum(3 - f_i), n links
including ground, f_i the freedoms of joint i; each coupling removes one more.  The
expected counts below are worked out by hand from that formula for each linkage; the
numeric counts are the freedoms one sees by hand (a four-bar moves with one input...).
"""
from __future__ import annotations

import pytest

import jointwise

import mechanisms as M
from mechanisms import no_traceback, run_cli


def kutzbach(n_links, freedoms, planar):
    k = 3 if planar else 6
    return k * (n_links - 1) - sum(k - f for f in freedoms)


CASES = {
    # name: (builder, links, joint freedoms, planar?, expected numeric)
    "four-bar": (lambda: M.four_bar(1, 3, 2.5, 3), 4, [1] * 4, True, 1),
    "slider-crank": (lambda: M.slider_crank(1, 3, 0.5), 4, [1] * 4, True, 1),
    "five-bar": (M.five_bar, 5, [1] * 5, True, 2),
    "watt six-bar": (M.watt_six_bar, 6, [1] * 7, True, 1),
    "stephenson six-bar": (M.stephenson_six_bar, 6, [1] * 7, True, 1),
    "scissor stack (3)": (lambda: M.scissor_stack(3), 8, [1] * 10, True, 1),
    "screw-driven jaw": (M.screw_jaw, 3, [1, 1, 1], False, 1),
    "hooke shaft pair": (M.hooke, 3, [1, 2, 1], False, 1),
}

HAND = {"four-bar": 1, "slider-crank": 1, "five-bar": 2, "watt six-bar": 1, "stephenson six-bar": 1,
        "scissor stack (3)": 1, "screw-driven jaw": -3, "hooke shaft pair": -2}


@pytest.mark.parametrize("name", sorted(CASES))
def test_kutzbach_and_numeric(name):
    builder, n, fs, planar, numeric = CASES[name]
    d = builder()
    assert len(d["links"]) == n and len(d["joints"]) == len(fs)
    assert kutzbach(n, fs, planar) == HAND[name]  # the helper agrees with the hand count
    mob = jointwise.from_dict(d).mobility()
    assert mob["form"] == ("planar" if planar else "spatial")
    assert mob["kutzbach"] == HAND[name]
    assert mob["numeric"] == numeric
    assert mob["numeric"] == mob["kutzbach"] + mob["redundant"]
    assert mob["redundant"] == (0 if planar else numeric - HAND[name])


def test_spatial_count_of_planar_four_bar():
    # spatial form of the same four-bar: 6*3 - 4*5 = -2, three redundant
    mob = jointwise.from_dict(M.four_bar(1, 3, 2.5, 3)).mobility()
    assert mob.get("spatial", kutzbach(4, [1] * 4, False)) == kutzbach(4, [1] * 4, False) == -2


def test_coupling_removes_a_freedom():
    d = M.five_bar()
    d["couplings"] = {"belt": {"leader": "j0", "follower": "j4", "ratio": 1.0}}
    mob = jointwise.from_dict(d).mobility()
    assert mob["kutzbach"] == kutzbach(5, [1] * 5, True) - 1 == 1
    assert mob["numeric"] == 1
    assert mob["numeric"] == mob["kutzbach"] + mob["redundant"]


def test_tilted_axis_four_bar_is_spatial_and_locked():
    # a four-bar with one axis tilted is a spatial 4R: Kutzbach -2 and, generically, no motion
    d = M.four_bar(1, 3, 2.5, 3)
    d["joints"]["pin_b"]["axis"] = [0.0, 0.3, 1.0]
    mob = jointwise.from_dict(d).mobility()
    assert mob["form"] == "spatial" and mob["kutzbach"] == -2
    assert mob["numeric"] == 0


@pytest.mark.parametrize("name,kz,num", [("hooke shaft pair", -2, 1), ("screw-driven jaw", -3, 1)])
def test_check_explains_overconstrained_case(name, kz, num, mech_file):
    r = run_cli("check", mech_file(CASES[name][0]()), "--format", "json")
    assert r.code == 0, r
    info = r.json()
    assert info["mobility"]["kutzbach"] == kz and info["mobility"]["numeric"] == num
    explained = [p for p in info["notes"] if "Kutzbach" in p]  # information, not a problem (issue 14)
    assert len(explained) == 1
    sentence = explained[0]
    assert f"Kutzbach {kz}" in sentence and f"actual {num}" in sentence
    assert sentence.count(". ") == 0  # one sentence
    text = run_cli("check", mech_file(CASES[name][0]()))
    no_traceback(text)
    assert text.code == 0 and f"Kutzbach {kz}" in text.out and f"actual {num}" in text.out


def test_check_json_mobility_of_five_bar(mech_file):
    r = run_cli("check", mech_file(M.five_bar()), "--format", "json")
    assert r.code == 0, r
    mob = r.json()["mobility"]
    assert mob == {**mob, "kutzbach": 2, "form": "planar", "numeric": 2, "redundant": 0}
    assert not [p for p in r.json()["problems"] if "overconstrained" in p]


def test_screw_jaw_moves_by_lead():
    # the jaw moves one lead per spindle turn (Tr16x4: 4 mm, from memory of ISO 2904).
    # Sign: the spindle turns +theta about +x in the frame; the jaw cannot turn, so it turns
    # -theta relative to the spindle, and a right-hand thread then advances it -lead*theta/360.
    m = jointwise.from_dict(M.screw_jaw())
    p = m.pose({"spindle": 900.0})
    assert p.converged
    assert p.joints["way"] == pytest.approx(-4.0 * 900 / 360, abs=1e-9)
    assert p.links["jaw"][0, 3] == pytest.approx(-10.0, abs=1e-9)
    assert p.joints["nut"] == pytest.approx(-900.0, abs=1e-7)
    left = jointwise.from_dict(M.screw_jaw(hand="left")).pose({"spindle": 900.0})
    assert left.joints["way"] == pytest.approx(10.0, abs=1e-9)
    multi = jointwise.from_dict(M.screw_jaw(thread="Tr16x8(P4)")).pose({"spindle": 360.0})
    assert multi.joints["way"] == pytest.approx(-8.0, abs=1e-9)


def test_rssr_spatial_counts():
    # 6 (4 - 1) - (5 + 3 + 3 + 5) = 2: the input and the coupler's idle spin
    mob = jointwise.from_dict(M.rssr()).mobility()
    assert mob["form"] == "spatial"
    assert mob["kutzbach"] == 2 == kutzbach(4, [1, 3, 3, 1], False)
    assert mob["numeric"] == 2 and mob["redundant"] == 0
