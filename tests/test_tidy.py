"""jointwise tidy and the tilt cause of check (core/tidy.py).

Reference: a planar four-bar's rocker angle from the closed-form circle intersection
(tests/mechanisms.four_bar_positions, any machine-design text, e.g. Norton, Design of
Machinery, ch. 4); a loop of four revolutes whose axes are not parallel is rigid
(spatial Kutzbach count 6*3 - 5*4 = -2).
"""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

import mechanisms as M
from jointwise import load
from jointwise.tidy import find_tilts, plan, TiltError

TILT = 0.17  # degrees


def _tilted(axis_deg=TILT, joint="rocker"):
    m = M.four_bar(20.0, 70.0, 50.0, 60.0, theta2_deg=60.0)
    t = math.radians(axis_deg)
    m["joints"][joint]["axis"] = [math.sin(t), 0.0, math.cos(t)]
    return m


def test_check_names_the_tilted_joint_and_its_tilt(cli, mech_file):
    f = mech_file(_tilted())
    r = cli("check", f)
    M.no_traceback(r)
    assert r.code == 0
    assert "problem: joint rocker: axis tilted 0.17 deg out of parallel with the axis of joint crank" in r.out
    j = cli("check", f, "--format", "json").json()
    causes = [p for p in j["problems"] if "tilted" in p]
    assert len(causes) == 1 and causes[0].startswith("joint rocker: axis tilted 0.17 deg")
    assert j["mobility"]["numeric"] == 0  # the tilt is what locks it
    tilts = find_tilts(load(f))
    assert [(t.joint, t.reference) for t in tilts] == [("rocker", "crank")]
    assert tilts[0].degrees == pytest.approx(TILT, rel=1e-9)


def test_check_of_an_exact_four_bar_has_no_tilt(cli, mech_file):
    j = cli("check", mech_file(M.four_bar(20.0, 70.0, 50.0, 60.0)), "--format", "json").json()
    assert not [p for p in j["problems"] if "tilted" in p] and j["mobility"]["numeric"] == 1


def test_tilted_four_bar_locks_then_tidy_fixes_it_and_it_sweeps_a_full_turn(cli, mech_file, tmp_path):
    src = mech_file(_tilted())
    locked = cli("sweep", src, "--drive", "crank", "--from", "60", "--to", "420", "--steps", "37")
    assert "did not converge" in locked.err
    out = tmp_path / "fixed.toml"
    r = cli("tidy", src, "--out", out)
    M.no_traceback(r)
    assert r.code == 0, r
    assert "joints.rocker.axis turned 0.17 deg" in r.out and "-> [0.0, 0.0, 1.0]" in r.out
    # only the one axis line changed
    before = src.read_text().splitlines()
    after = out.read_text().splitlines()
    changed = [(a, b) for a, b in zip(before, after) if a != b]
    assert len(before) == len(after) and len(changed) == 1
    assert changed[0][1] == "axis = [0.0, 0.0, 1.0]"
    assert cli("check", out, "--format", "json").json()["mobility"]["numeric"] == 1
    s = cli("sweep", out, "--drive", "crank", "--from", "60", "--to", "420", "--steps", "361",
            "--format", "json")
    assert s.code == 0, s
    rows = s.json()["poses"]
    assert len(rows) == 361 and all(row["converged"] for row in rows)
    crank = np.array([row["joints"]["crank"] for row in rows])
    rocker = np.array([row["joints"]["rocker"] for row in rows])
    assert crank[-1] == pytest.approx(420.0)
    for k in range(0, 361, 30):
        pos = M.four_bar_positions(20.0, 70.0, 50.0, 60.0, crank[k])
        want = pos[2]
        got = rocker[k]
        assert abs(((got - want) + 180) % 360 - 180) < 1e-6, (crank[k], got, want)


def test_tidy_refuses_beyond_the_tolerance_and_writes_nothing(cli, mech_file, tmp_path):
    src = mech_file(_tilted())
    out = tmp_path / "fixed.toml"
    r = cli("tidy", src, "--out", out, "--angle-tolerance", "0.1")
    M.no_traceback(r)
    assert r.code == 3
    assert "rocker" in r.err and "0.17 deg" in r.err and "tolerance of 0.1 deg" in r.err
    assert not out.exists()
    # the default tolerance is 2 degrees
    r = cli("tidy", mech_file(_tilted(2.5), "t25.toml"), "--out", out)
    assert r.code == 3 and "2.5 deg" in r.err and "tolerance of 2 deg" in r.err
    assert not out.exists()
    r = cli("tidy", mech_file(_tilted(1.9), "t19.toml"), "--out", out)
    assert r.code == 0 and out.exists()


def test_tidy_bad_file_exits_2(cli, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("format = 1\n[mechanism]\n")
    r = cli("tidy", bad, "--out", tmp_path / "o.toml")
    M.no_traceback(r)
    assert r.code == 2 and "mechanism.ground" in r.err
    assert not (tmp_path / "o.toml").exists()
    r = cli("tidy", tmp_path / "missing.toml", "--out", tmp_path / "o.toml")
    assert r.code == 2
    r = cli("tidy", bad)
    assert r.code == 2 and "--out" in r.err


def test_tidy_leaves_a_spatial_loop_alone(cli, mech_file, tmp_path):
    src = mech_file(M.rssr())
    out = tmp_path / "o.toml"
    r = cli("tidy", src, "--out", out)
    assert r.code == 0 and "already exact" in r.out
    assert out.read_text() == src.read_text()


def test_tidy_makes_a_slide_perpendicular_and_writes_shortest_round_trip_numbers(mech_file, tmp_path, cli):
    m = M.slider_crank(20.0, 70.0, theta_deg=40.0)
    t = math.radians(0.3)
    m["joints"]["slide"]["axis"] = [math.cos(t), 0.0, math.sin(t)]  # tilted out of the plane
    src = mech_file(m)
    tilts = find_tilts(load(src))
    assert [(x.joint, x.relation) for x in tilts] == [("slide", "perpendicular")]
    assert tilts[0].degrees == pytest.approx(0.3, rel=1e-9)
    out = tmp_path / "o.toml"
    assert cli("tidy", src, "--out", out).code == 0
    line = next(ln for ln in out.read_text().splitlines() if ln.startswith("axis = [1.0"))
    nums = line[line.index("[") + 1:line.index("]")].split(", ")
    assert all(n == repr(float(n)) for n in nums)  # shortest round-trip form
    assert json.loads("[" + ", ".join(nums) + "]") == [1.0, 0.0, 0.0]
    assert find_tilts(load(out)) == []


def test_tidy_keeps_comments_and_json_stays_json(cli, mech_file, tmp_path):
    src = mech_file(_tilted())
    text = "# Fennwick Row Workshop test rocker\n" + src.read_text().replace(
        "[joints.rocker]", "[joints.rocker]  # the tilted one")
    src.write_text(text)
    out = tmp_path / "o.toml"
    assert cli("tidy", src, "--out", out).code == 0
    assert out.read_text().startswith("# Fennwick Row Workshop") and "# the tilted one" in out.read_text()
    js = mech_file(_tilted(), "m.json")
    assert cli("tidy", js, "--out", tmp_path / "o.toml").code == 2
    assert cli("tidy", js, "--out", tmp_path / "o.json").code == 0
    assert json.loads((tmp_path / "o.json").read_text())["joints"]["rocker"]["axis"] == [0.0, 0.0, 1.0]


def test_plan_raises_tilt_error_naming_every_joint_beyond():
    from jointwise import from_dict
    mech = from_dict(_tilted(3.0))
    with pytest.raises(TiltError, match="joint rocker: axis tilted 3 deg") as e:
        plan(mech, 2.0)
    assert [t.joint for t in e.value.tilts] == ["rocker"]
    assert [t.joint for t in plan(mech, 3.5)] == ["rocker"]


def test_tidy_writes_through_a_link_and_leaves_it_a_link(cli, mech_file, tmp_path):
    # --out may be a link, a pipe or a device (/dev/null): written in place, never
    # replaced by a rename (core/outputs.py); checked here with a link, which takes the
    # same path as a device without risking the machine's /dev/null
    src = mech_file(_tilted())
    target = tmp_path / "real.toml"
    target.write_text("old\n")
    link = tmp_path / "link.toml"
    link.symlink_to(target)
    r = cli("tidy", src, "--out", link)
    M.no_traceback(r)
    assert r.code == 0, r
    assert link.is_symlink() and "axis = [0.0, 0.0, 1.0]" in target.read_text()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.endswith(".toml")) == \
        sorted({"link.toml", "real.toml", src.name} & {p.name for p in tmp_path.iterdir()})
