"""Sweep engine: continuation on one branch, flags, schedules, follow.

References
----------
* F. Freudenstein, "Approximate synthesis of four-bar linkages", Trans. ASME 77 (1955)
  853-861: K1 cos t4 - K2 cos t2 + K3 = cos(t2 - t4), K1 = d/a, K2 = d/c,
  K3 = (a^2 - b^2 + c^2 + d^2) / (2 a c); solved as the half-angle quadratic
  A tan^2(t4/2) + B tan(t4/2) + C = 0 (the form in standard machine-design texts).
* The coupler angle from the companion equation K1 cos t3 + K4 cos t2 + K5 = cos(t2 - t3),
  K4 = d/b, K5 = (c^2 - d^2 - a^2 - b^2) / (2 a b).
"""
import math
import os
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(__file__))
from sweep_fixtures import (RSSR, fourbar_points, fourbar_toml, load, rssr_rocker,  # noqa: E402
                            rssr_toml)

import jointwise  # noqa: E402
from jointwise.sweep import follow, sweep, sweep_schedule  # noqa: E402

A, B, C, D = 30.0, 90.0, 70.0, 100.0


def freudenstein(t2, a=A, b=B, c=C, d=D, sign=-1.0):
    """Rocker and coupler angles (rad) of the open branch (Freudenstein 1955)."""
    K1, K2, K3 = d / a, d / c, (a * a - b * b + c * c + d * d) / (2 * a * c)
    ct, st = np.cos(t2), np.sin(t2)
    Aq = ct - K1 - K2 * ct + K3
    Bq = -2 * st
    Cq = K1 - (K2 + 1) * ct + K3
    t4 = 2 * np.arctan2(-Bq + sign * np.sqrt(Bq * Bq - 4 * Aq * Cq), 2 * Aq)
    K4, K5 = d / b, (c * c - d * d - a * a - b * b) / (2 * a * b)
    Dq = ct - K1 + K4 * ct + K5
    Eq = -2 * st
    Fq = K1 + (K4 - 1) * ct + K5
    t3 = 2 * np.arctan2(-Eq + sign * np.sqrt(Eq * Eq - 4 * Dq * Fq), 2 * Dq)
    return t4, t3


def wrapdeg(x):
    return (np.asarray(x) + 180.0) % 360.0 - 180.0


@pytest.mark.parametrize("n", [37, 2001])
def test_crank_rocker_full_turn_matches_freudenstein(n):
    m = load(fourbar_toml())
    vals = np.linspace(60, 420, n)
    sw = sweep(m, "crank", vals)
    assert sw.converged.all() and not sw.singular.any()
    t4, t3 = freudenstein(np.radians(vals))
    assert np.abs(wrapdeg(sw.joints["rocker"] - np.degrees(t4))).max() < 1e-7
    # coupler absolute angle = crank + elbow
    assert np.abs(wrapdeg(sw.joints["crank"] + sw.joints["elbow"] - np.degrees(t3))).max() < 1e-7
    assert np.all(np.isfinite(sw.q))
    assert sw.links["rocker"].shape == (n, 4, 4)
    assert sw.residual.max() <= 1e-9


def test_coupler_point_path_matches_closed_form():
    tip = (40.0, 60.0, 0.0)
    meas = f'[measures.tip]\ntype = "point"\nlink = "coupler"\nat = [{tip[0]}, {tip[1]}, 0]\n'
    m = load(fourbar_toml(measures=meas))
    vals = np.linspace(0, 360, 721)
    sw = sweep(m, "crank", vals)
    assert sw.converged.all()
    # closed form: P = A(t2) + Rot(t3 - t3_home) (P_home - A_home), t3 from Freudenstein
    A0, B0 = fourbar_points(A, B, C, D, 60.0)
    t3h = math.atan2(B0[1] - A0[1], B0[0] - A0[0])
    t4, t3 = freudenstein(np.radians(vals))
    th = np.radians(vals)
    Ax, Ay = A * np.cos(th), A * np.sin(th)
    dx, dy = tip[0] - A0[0], tip[1] - A0[1]
    ang = t3 - t3h
    Px = Ax + np.cos(ang) * dx - np.sin(ang) * dy
    Py = Ay + np.sin(ang) * dx + np.cos(ang) * dy
    P = sw.measures["tip"]
    assert P.shape == (721, 3)
    assert np.abs(P[:, 0] - Px).max() < 1e-7 and np.abs(P[:, 1] - Py).max() < 1e-7
    assert np.abs(P[:, 2]).max() < 1e-9


def test_rssr_spatial_matches_closed_form():
    m = load(rssr_toml())
    vals = np.linspace(0, 360, 3001)
    sw = sweep(m, "crank", vals)
    assert sw.converged.all()
    ref = np.degrees(rssr_rocker(np.radians(vals)))
    assert np.abs(wrapdeg(sw.joints["arm"] - ref)).max() < 1e-7


def test_parallelogram_through_change_point_stays_parallelogram_and_flags_it():
    """Parallelogram a = c, b = d: the rocker turns with the crank (t4 = t2) except on the
    antiparallelogram branch that meets it where all links are collinear (t2 = 0, 180 deg):
    there the passive Jacobian loses rank, a dead point (change point)."""
    m = load(fourbar_toml(a=40, b=100, c=40, d=100, theta2=60.0))
    vals = np.linspace(60, 300, 481)  # passes 180 on a sample
    sw = sweep(m, "crank", vals)
    assert sw.converged.all()
    assert np.abs(wrapdeg(sw.joints["rocker"] - vals)).max() < 1e-6
    near = np.abs(vals - 180) < 1.0
    assert sw.singular[near].any()
    assert not sw.singular[np.abs(vals - 180) > 20].any()
    # the crossing falls between samples: still flagged (V-shaped minimum)
    vals2 = np.linspace(60.3, 299.9, 401)
    assert not np.any(np.isclose(vals2, 180.0))
    sw2 = sweep(m, "crank", vals2)
    assert sw2.converged.all()
    assert np.abs(wrapdeg(sw2.joints["rocker"] - vals2)).max() < 1e-6
    assert sw2.singular[np.abs(vals2 - 180) < 1.0].any()
    assert not sw2.singular[np.abs(vals2 - 180) > 20].any()


def test_unreachable_steps_are_flagged_finite_and_repeat_last_good():
    m = load(fourbar_toml())
    vals = np.linspace(100, 160, 61)  # the rocker locks at about 143.8 deg
    sw = sweep(m, "rocker", vals)
    bad = ~sw.converged
    assert bad.any() and sw.converged[0]
    assert np.all(np.isfinite(sw.q))
    first = int(np.flatnonzero(bad)[0])
    for c in m.coordinates:
        assert np.all(sw.joints[c][first:] == sw.joints[c][first - 1])
    assert first in sw.reasons


def test_follow_never_raises_and_carries_on():
    m = load(fourbar_toml())
    rocker = np.concatenate([np.linspace(110, 150, 20), np.linspace(150, 120, 20)])
    sw = follow(m, {"rocker": rocker})
    assert sw.converged[0] and not sw.converged.all()
    assert sw.converged[-1]  # back within reach: picked up again
    assert np.all(np.isfinite(sw.q))
    assert abs(sw.joints["rocker"][-1] - 120) < 1e-9


def test_follow_holds_file_drive_like_pose():
    m = load(fourbar_toml())
    sw = follow(m, {"crank": np.array([60.0, 70.0, 80.0])})
    for i, v in enumerate([60.0, 70.0, 80.0]):
        p = m.pose({"crank": v})
        assert abs(sw.joints["rocker"][i] - p.joints["rocker"]) < 1e-8


def test_mechanism_methods_delegate():
    m = load(fourbar_toml())
    sw = m.sweep("crank", [60, 61, 62])
    assert isinstance(sw.values, np.ndarray) and len(sw) == 3
    sw2 = m.follow({"crank": [60, 61]})
    assert sw2.converged.all()


def test_schedule_keys_linear_and_eased():
    m = load(fourbar_toml())
    sw = sweep_schedule(m, {"crank": [(0, 60), (1, 120, "eased"), (2, 60)]}, 21)
    assert sw.converged.all()
    cr = sw.joints["crank"]
    assert abs(cr[0] - 60) < 1e-12 and abs(cr[10] - 120) < 1e-12 and abs(cr[20] - 60) < 1e-12
    u = 0.5
    assert abs(cr[5] - (60 + 60 * (3 * u * u - 2 * u ** 3))) < 1e-9  # smoothstep segment
    assert abs(cr[15] - 90) < 1e-9  # linear segment
    with pytest.raises(jointwise.JointwiseError, match="increase"):
        sweep_schedule(m, {"crank": [(1, 60), (0, 70)]}, 5)


def test_schedule_csv(tmp_path):
    m = load(fourbar_toml())
    p = tmp_path / "plan.csv"
    p.write_text("step,crank\n0,60\n1,65\n2,70\n")
    sw = sweep_schedule(m, str(p))
    assert sw.converged.all() and len(sw) == 3
    bad = tmp_path / "bad.csv"
    bad.write_text("crank\n60\nsixty\n")
    with pytest.raises(jointwise.SpecError, match=r"bad\.csv: row 3, column 1 \(crank\)"):
        sweep_schedule(m, str(bad))
    bad.write_text("crank,nothing\n60,1\n")
    with pytest.raises(jointwise.SpecError, match="nothing"):
        sweep_schedule(m, str(bad))


def test_drive_releases_file_drive_and_set_holds_others():
    m = load(fourbar_toml())  # crank has drive = true in the file
    sw = sweep(m, "rocker", [110, 115, 120])
    assert sw.converged.all()
    assert abs(sw.joints["crank"][2] - sw.joints["crank"][0]) > 1  # the crank moved
    assert abs(sw.joints["rocker"][1] - 115) < 1e-12


def test_batched_equals_sequential_pose():
    """The rod of an RSSR has an idle spin about its own line; compare where it carries
    the two ball centres, and the crank and arm placements."""
    m = load(rssr_toml())
    vals = np.linspace(0, 90, 400)
    sw = sweep(m, "crank", vals)
    prev = None
    for i in (0, 133, 399):
        p = m.pose({"crank": float(vals[i])}, start=prev)
        assert abs(wrapdeg(sw.joints["arm"][i] - p.joints["arm"])) < 1e-7
        for k in ("crank", "arm"):
            assert np.abs(sw.links[k][i] - p.links[k]).max() < 1e-7
        for jn in ("ballA", "ballB"):
            x = np.append(m.joints[jn].point, 1.0)
            assert np.abs(sw.links["rod"][i] @ x - p.links["rod"] @ x).max() < 1e-7
