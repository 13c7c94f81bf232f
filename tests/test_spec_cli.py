"""Mechanism files and the command line, through the real console script.

Exit codes and output shapes are those fixed in the Interface sections of issues 2
and 3 (0 success, 2 bad command line or file, 3 cannot assemble / outside limits;
messages on stderr, no traceback).  Pose references are independent: products of
``scipy.spatial.transform.Rotation`` turns built here, and closed-form four-bar
positions (circle intersections in ``tests/mechanisms.py``).
"""
from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import jointwise

import mechanisms as M
from mechanisms import no_traceback, run_cli


def rot_about(axis, deg, p):
    a = np.asarray(axis, dtype=float)
    R = Rotation.from_rotvec(a / np.linalg.norm(a) * math.radians(deg)).as_matrix()
    T = np.eye(4)
    T[:3, :3] = R
    T[:3, 3] = np.asarray(p) - R @ np.asarray(p)
    return T


def vise():
    """HF-3 bench vise, a joint named ``screw`` (helical) in a vise.toml."""
    d = M.base("HF-3 bench vise", links=["spindle", "jaw"])
    d["joints"]["bearing"] = M.revolute("frame", "spindle", (0, 0), axis=(1, 0, 0))
    d["joints"]["screw"] = {"type": "helical", "parent": "spindle", "child": "jaw",
                            "point": [0.0, 0.0, 0.0], "axis": [1.0, 0.0, 0.0], "thread": "Tr16x4"}
    return d


def bad(cli_result, code, *needles):
    no_traceback(cli_result)
    assert cli_result.code == code, cli_result
    assert cli_result.out == "", cli_result
    for n in needles:
        assert n in cli_result.err, (n, cli_result.err)


# -- the exact message form of issue 2 item 5 ---------------------------------------------------------
def test_zero_length_axis_exact_message(mech_file):
    d = vise()
    d["joints"]["screw"]["axis"] = [0, 0, 0]
    r = run_cli("check", mech_file(d, "vise.toml"))
    bad(r, 2, "vise.toml: joints.screw.axis: axis has zero length")


# -- validation errors, each through the CLI with exit 2 --------------------------------------------------
def _mutations():
    def unknown_top(d):
        d["formt"] = 1
        return "formt", "did you mean 'format'"

    def unknown_joint_key(d):
        d["joints"]["screw"]["axsi"] = [1, 0, 0]
        return "joints.screw.axsi", "did you mean 'axis'"

    def unknown_mech_key(d):
        d["mechanism"]["groud"] = "frame"
        return "mechanism.groud", "did you mean 'ground'"

    def unknown_link_key(d):
        d["links"]["jaw"]["objet"] = "Jaw"
        return "links.jaw.objet", "did you mean 'object'"

    def unknown_type(d):
        d["joints"]["bearing"]["type"] = "revolut"
        return "joints.bearing.type", "did you mean 'revolute'"

    def missing_link(d):
        d["joints"]["bearing"]["parent"] = "fram"
        return "joints.bearing.parent", "'fram'"

    def missing_child_key(d):
        del d["joints"]["bearing"]["child"]
        return "joints.bearing.child", "missing"

    def parent_is_child(d):
        d["joints"]["bearing"]["child"] = "frame"
        return "joints.bearing", "parent equals child"

    def loose_link(d):
        d["links"]["anvil"] = {}
        return "not connected to ground", "anvil"

    def no_ground(d):
        del d["mechanism"]["ground"]
        return "mechanism.ground", "missing"

    def ground_not_link(d):
        d["mechanism"]["ground"] = "bench"
        return "mechanism.ground", "'bench'"

    def universal_not_perp(d):
        d["joints"]["bearing"] = {"type": "universal", "parent": "frame", "child": "spindle",
                                  "point": [0, 0, 0], "axis": [1, 0, 0], "axis2": [1, 1, 0]}
        return "joints.bearing", "perpendicular"

    def universal_no_axis2(d):
        d["joints"]["bearing"] = {"type": "universal", "parent": "frame", "child": "spindle",
                                  "point": [0, 0, 0], "axis": [1, 0, 0]}
        return "joints.bearing.axis2", "missing"

    def zero_axis2(d):
        d["joints"]["bearing"] = {"type": "universal", "parent": "frame", "child": "spindle",
                                  "point": [0, 0, 0], "axis": [1, 0, 0], "axis2": [0, 0, 0]}
        return "joints.bearing.axis2", "zero length"

    def bad_unit(d):
        d["mechanism"]["length_unit"] = "mmm"
        return "mechanism.length_unit", "did you mean 'mm'"

    def text_number(d):
        d["joints"]["bearing"]["home"] = "ten"
        return "joints.bearing.home", "number"

    def home_outside_limits(d):
        d["joints"]["bearing"]["limits"] = [10, 20]
        return "joints.bearing.limits", "outside the limits"

    def two_lead_ways(d):
        d["joints"]["screw"]["lead"] = 4
        return "joints.screw", "exactly one of"

    def bad_thread(d):
        d["joints"]["screw"]["thread"] = "M11"
        return "joints.screw.thread", "M11"

    def helical_key_on_revolute(d):
        d["joints"]["bearing"]["lead"] = 2
        return "joints.bearing.lead", "only helical"

    def bad_format(d):
        d["format"] = 7
        return "format", "7"

    def vector_len(d):
        d["joints"]["bearing"]["point"] = [0, 0]
        return "joints.bearing.point", "[x, y, z]"

    return {f.__name__: f for f in (
        unknown_top, unknown_joint_key, unknown_mech_key, unknown_link_key, unknown_type,
        missing_link, missing_child_key, parent_is_child, loose_link, no_ground, ground_not_link,
        universal_not_perp, universal_no_axis2, zero_axis2, bad_unit, text_number,
        home_outside_limits, two_lead_ways, bad_thread, helical_key_on_revolute, bad_format,
        vector_len)}


MUTATIONS = _mutations()


@pytest.mark.parametrize("suffix", [".toml", ".json"])
@pytest.mark.parametrize("name", sorted(MUTATIONS))
def test_validation_error_exit_2(name, suffix, mech_file):
    d = vise()
    key, hint = MUTATIONS[name](d)
    path = mech_file(d, "vise" + suffix)
    r = run_cli("check", path)
    bad(r, 2, "vise" + suffix, key, hint)
    # the Python API raises SpecError (a ValueError) with the same text
    with pytest.raises(jointwise.SpecError) as exc:
        jointwise.load(path)
    assert key in str(exc.value) and isinstance(exc.value, ValueError)


def test_toml_rejects_duplicate_link_table(tmp_path):
    p = tmp_path / "dup.toml"
    p.write_text(M.dumps_toml(vise()) + "\n[links.jaw]\n")
    r = run_cli("check", p)
    bad(r, 2, "dup.toml", "TOML")


def test_json_rejects_duplicate_link(tmp_path):
    # Python's json keeps the last duplicate key; a sane loader rejects it like TOML does
    text = json.dumps(vise())
    text = text.replace('"links": {', '"links": {"jaw": {"object": "Old jaw"}, ', 1)
    p = tmp_path / "dup.json"
    p.write_text(text)
    assert text.count('"jaw"') >= 2
    r = run_cli("check", p)
    bad(r, 2, "dup.json", "links.jaw")


@pytest.mark.parametrize("token,where", [("NaN", "point"), ("Infinity", "axis"), ("-Infinity", "home")])
def test_json_non_finite_rejected(tmp_path, token, where):
    d = vise()
    d["joints"]["bearing"]["point"] = [0, 0, 0]
    text = json.dumps(d)
    if where == "home":
        text = text.replace('"home": 0.0', f'"home": {token}', 1)
    elif where == "axis":
        text = text.replace('"axis": [1.0, 0.0, 0.0]', f'"axis": [1.0, {token}, 0.0]', 1)
    else:
        text = text.replace('"point": [0, 0, 0]', f'"point": [0, {token}, 0]', 1)
    assert token in text
    p = tmp_path / "nf.json"
    p.write_text(text)
    bad(run_cli("check", p), 2, "nf.json", f"joints.bearing.{where}", "finite")


@pytest.mark.parametrize("token", ["inf", "-inf", "nan", "+nan"])
def test_toml_non_finite_rejected(tmp_path, token):
    d = vise()
    d["joints"]["bearing"]["home"] = 12345.0
    text = M.dumps_toml(d).replace("home = 12345.0", f"home = {token}")
    assert token in text
    p = tmp_path / "nf.toml"
    p.write_text(text)
    bad(run_cli("check", p), 2, "nf.toml", "joints.bearing.home", "finite")


def test_not_toml_and_missing_file(tmp_path):
    p = tmp_path / "junk.toml"
    p.write_text("this is [ not toml")
    bad(run_cli("check", p), 2, "junk.toml")
    bad(run_cli("check", tmp_path / "nowhere.toml"), 2, "nowhere.toml")
    q = tmp_path / "junk.json"
    q.write_text("{not json")
    bad(run_cli("check", q), 2, "junk.json", "JSON")


# -- command line -----------------------------------------------------------------------------------
@pytest.mark.parametrize("args", [(), ("frobnicate",), ("pose",), ("check", "a.toml", "--format", "xml"),
                                  ("pose", "a.toml", "--set", "novalue"),
                                  ("pose", "a.toml", "--set", "x=abc"), ("pose", "a.toml", "--set", "x=nan")])
def test_bad_command_line_exit_2(args, tmp_path):
    r = run_cli(*args, cwd=tmp_path)
    no_traceback(r)
    assert r.code == 2, r
    assert r.err.strip()


@pytest.mark.parametrize("args", [("--help",), ("check", "--help"), ("pose", "--help")])
def test_help(args):
    r = run_cli(*args)
    assert r.code == 0, r
    assert "usage" in r.out.lower()
    if args == ("--help",):
        assert "check" in r.out and "pose" in r.out
    if "pose" in args:
        assert "--set" in r.out and "NAME=VALUE" in r.out


def test_set_unknown_coordinate_exit_2(mech_file):
    r = run_cli("pose", mech_file(vise()), "--set", "screww=10")
    bad(r, 2, "screww", "did you mean 'screw'")


# -- JSON output shapes ----------------------------------------------------------------------------------
def test_check_json_shape(mech_file):
    r = run_cli("check", mech_file(M.four_bar(1, 3, 2.5, 3)), "--format", "json")
    assert r.code == 0, r
    no_traceback(r)
    info = r.json()
    for k in ("links", "joints", "coordinates", "loops"):
        assert type(info[k]) is int
    assert (info["links"], info["joints"], info["coordinates"], info["loops"]) == (4, 4, 4, 1)
    assert info["driven"] == ["crank"]
    assert isinstance(info["problems"], list) and all(isinstance(p, str) for p in info["problems"])
    mob = info["mobility"]
    assert set(mob) >= {"kutzbach", "form", "numeric", "redundant"}
    assert all(type(mob[k]) is int for k in ("kutzbach", "numeric", "redundant"))
    assert mob["form"] in ("planar", "spatial")
    assert isinstance(info["home_closure"], float) and info["home_closure"] <= 1e-9


def test_check_text(mech_file):
    r = run_cli("check", mech_file(M.four_bar(1, 3, 2.5, 3), "crank.toml"))
    assert r.code == 0, r
    assert "crank.toml" in r.out and "loops 1" in r.out


def test_pose_json_shape_and_link_matrix_maps_home_points(mech_file):
    a, b, c, d = 1.0, 3.0, 2.5, 3.0
    path = mech_file(M.four_bar(a, b, c, d, 60.0))
    r = run_cli("pose", path, "--set", "crank=130", "--format", "json")
    assert r.code == 0, r
    out = r.json()
    assert set(out) >= {"converged", "residual", "singular", "joints", "links"}
    assert out["converged"] is True and isinstance(out["residual"], float) and out["residual"] <= 1e-9
    assert isinstance(out["singular"], bool)
    assert set(out["joints"]) == {"crank", "pin_a", "pin_b", "rocker"}
    assert out["joints"]["crank"] == pytest.approx(130.0)
    assert set(out["links"]) == {"frame", "crank_arm", "coupler", "rocker_arm"}
    for mat in out["links"].values():
        assert len(mat) == 4 and all(len(row) == 4 for row in mat)
    L = {k: np.array(v) for k, v in out["links"].items()}
    np.testing.assert_allclose(L["frame"], np.eye(4), atol=1e-12)
    (ax0, ay0), (bx0, by0), _ = M.four_bar_positions(a, b, c, d, 60.0)
    (ax1, ay1), (bx1, by1), th4 = M.four_bar_positions(a, b, c, d, 130.0)
    # reference: circle-intersection positions at crank 130 deg
    np.testing.assert_allclose(L["crank_arm"] @ [ax0, ay0, 0, 1], [ax1, ay1, 0, 1], atol=1e-8)
    np.testing.assert_allclose(L["coupler"] @ [ax0, ay0, 0, 1], [ax1, ay1, 0, 1], atol=1e-8)
    np.testing.assert_allclose(L["coupler"] @ [bx0, by0, 0, 1], [bx1, by1, 0, 1], atol=1e-8)
    np.testing.assert_allclose(L["rocker_arm"] @ [bx0, by0, 0, 1], [bx1, by1, 0, 1], atol=1e-8)
    assert out["joints"]["rocker"] == pytest.approx(th4, abs=1e-7)


def test_pose_text(mech_file):
    r = run_cli("pose", mech_file(M.four_bar(1, 3, 2.5, 3, 60.0)), "--set", "crank=100")
    assert r.code == 0, r
    assert "converged" in r.out and "crank" in r.out


def test_json_file_same_as_toml(mech_file):
    d = M.four_bar(1, 3, 2.5, 3, 60.0)
    outs = []
    for name in ("same.toml", "same.json"):
        r = run_cli("pose", mech_file(d, name), "--set", "crank=200", "--format", "json")
        assert r.code == 0, r
        outs.append(r.json())
    assert outs[0]["joints"] == pytest.approx(outs[1]["joints"])
    for k in outs[0]["links"]:
        np.testing.assert_allclose(outs[0]["links"][k], outs[1]["links"][k], atol=1e-12)
    check = run_cli("check", mech_file(d, "same.json"), "--format", "json")
    assert check.code == 0 and check.json()["loops"] == 1


# -- open chain and branching tree vs products of scipy rotations ------------------------------------
def _reference_tree(d, values):
    """Displacement of every link: parent's displacement times a scipy turn about the joint."""
    out = {d["mechanism"]["ground"]: np.eye(4)}
    pending = dict(d["joints"])
    while pending:
        for name, j in list(pending.items()):
            if j["parent"] in out:
                out[j["child"]] = out[j["parent"]] @ rot_about(j["axis"], values.get(name, 0.0) - j["home"],
                                                               j["point"])
                del pending[name]
    return out


@pytest.mark.parametrize("builder,n", [(M.serial_chain, 7), (M.branching_tree, 12)])
def test_pose_open_chain_and_tree_vs_scipy(builder, n, mech_file):
    d = builder(n)
    rng = np.random.default_rng(n)
    values = {name: float(v) for name, v in zip(d["joints"], rng.uniform(-170, 170, n))}
    args = []
    for k, v in values.items():
        args += ["--set", f"{k}={v!r}"]
    r = run_cli("pose", mech_file(d), *args, "--format", "json")
    assert r.code == 0, r
    out = r.json()
    ref = _reference_tree(d, values)
    for link, T in ref.items():
        np.testing.assert_allclose(np.array(out["links"][link]), T, atol=1e-9, err_msg=link)
    # unset coordinates stay at home
    part = dict(list(values.items())[:2])
    m = jointwise.from_dict(d)
    p = m.pose(part)
    for name in list(values)[2:]:
        assert p.joints[name] == pytest.approx(0.0)
    ref = _reference_tree(d, part)
    for link, T in ref.items():
        np.testing.assert_allclose(p.links[link], T, atol=1e-9)


def test_pose_home_values_offset(mech_file):
    d = M.serial_chain(3)
    for j in d["joints"].values():
        j["home"] = 25.0
    m = jointwise.from_dict(d)
    p = m.pose({})
    for T in p.links.values():
        np.testing.assert_allclose(T, np.eye(4), atol=1e-12)
    p = m.pose({"q1": 55.0})
    ref = _reference_tree(d, {"q0": 25.0, "q1": 55.0, "q2": 25.0})
    for link, T in ref.items():
        np.testing.assert_allclose(p.links[link], T, atol=1e-9)


# -- limits ---------------------------------------------------------------------------------------------
def test_held_value_outside_limits_exit_3(mech_file):
    d = M.serial_chain(2)
    d["joints"]["q1"]["limits"] = [-45.0, 60.0]
    path = mech_file(d, "arm.toml")
    r = run_cli("pose", path, "--set", "q1=75", "--format", "json")
    bad(r, 3, "arm.toml", "q1", "-45", "60")
    with pytest.raises(jointwise.LimitError) as exc:
        jointwise.load(path).pose({"q1": 75})
    assert isinstance(exc.value, jointwise.AssemblyError)
    ok = run_cli("pose", path, "--set", "q1=59.5")
    assert ok.code == 0, ok


def test_units_radian_and_metre(mech_file):
    d = M.serial_chain(2)
    d["mechanism"]["angle_unit"] = "rad"
    d["mechanism"]["length_unit"] = "m"
    m = jointwise.from_dict(d)
    p = m.pose({"q0": math.pi / 2})
    ref = _reference_tree(d, {"q0": 90.0})
    for link, T in ref.items():
        np.testing.assert_allclose(p.links[link], T, atol=1e-12)
    assert p.joints["q0"] == pytest.approx(math.pi / 2)


def test_loops_detected_in_check(mech_file):
    r = run_cli("check", mech_file(M.watt_six_bar()), "--format", "json")
    assert r.code == 0, r
    assert r.json()["loops"] == 2
    r = run_cli("check", mech_file(M.branching_tree(9)), "--format", "json")
    assert r.json()["loops"] == 0
