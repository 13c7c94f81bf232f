"""Corbel vise: a screw-driven jaw (helical Tr16x4 spindle + collar revolute + jaw slide in
one loop), in a scene whose unit scale is 0.001 (1 BU = 1 mm, so 1 mm in the file = 1 BU).
Reference: the core's ``Mechanism.pose`` of the same file, and the lead: 4 mm per turn
(ISO 2904 Tr16x4, single start)."""
from __future__ import annotations

import math

import bpy
import numpy as np
import pytest

import workshop as ws

TOL = 1e-4  # BU are millimetres here: 1e-4 mm


def setup_vise(scene, tmp_path, **kw):
    scene.unit_settings.system = 'METRIC'
    scene.unit_settings.scale_length = 0.001
    objs = ws.make_vise_objects(1.0)
    homes = {n: ws.world(o) for n, o in objs.items()}
    path = ws.vise_file(tmp_path, **kw)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return objs, homes, path


def test_vise_units_and_lead(fresh, tmp_path):
    objs, homes, path = setup_vise(fresh, tmp_path)
    jw = fresh.jointwise
    feed = jw.joints["feed"]
    assert feed.type == "helical" and feed.kind == "angle"
    assert feed.lead == pytest.approx(4.0)  # 4 mm = 4 BU at unit scale 0.001
    assert jw.joints["slide"].kind == "length"
    assert jw.joints["slide"].limit_max == pytest.approx(60.0)
    m = np.array(jw.joints["feed"].anchor.matrix_world)
    assert np.allclose(m[:3, 3], [0, 0, 20]) and np.allclose(m[:3, 2], [1, 0, 0], atol=1e-7)


def test_vise_pose_by_value_matches_core(fresh, tmp_path):
    import jointwise
    objs, homes, path = setup_vise(fresh, tmp_path)
    mech = jointwise.load(path)
    jw = fresh.jointwise
    jw.live = True
    for turns in (0.25, 2.5, 7.0, -1.5):
        jw.joints["feed"].value = 2 * math.pi * turns
        assert jw.converged, jw.message
        pose = mech.pose({"feed": 360.0 * turns})
        for link, oname in (("spindle", "Spindle"), ("jaw", "Jaw")):
            want = ws.expected_world(pose, link, homes[oname], 1.0)
            assert np.allclose(ws.world(objs[oname]), want, atol=TOL), oname
        # the jaw advances one lead per turn, without turning
        jaw = ws.world(objs["Jaw"])
        assert jaw[0, 3] - homes["Jaw"][0, 3] == pytest.approx(4.0 * turns, abs=TOL)
        assert np.allclose(jaw[:3, :3], homes["Jaw"][:3, :3], atol=1e-5)
        assert jw.joints["slide"].value == pytest.approx(4.0 * turns, abs=TOL)


def test_vise_limit_is_refused_and_scene_kept(fresh, tmp_path):
    objs, homes, path = setup_vise(fresh, tmp_path)
    jw = fresh.jointwise
    jw.live = True
    jw.joints["feed"].value = 2 * math.pi * 3  # 12 mm: fine
    before = {n: ws.world(o) for n, o in objs.items()}
    jw.joints["feed"].value = 2 * math.pi * 20  # 80 mm: beyond the slide's 60 mm
    assert not jw.converged
    assert "slide" in jw.message, jw.message
    assert jw.joints["feed"].value == pytest.approx(2 * math.pi * 3, abs=1e-5)
    for n, o in objs.items():
        assert np.allclose(ws.world(o), before[n], atol=1e-7)


def test_vise_bake_matches_core(fresh, tmp_path):
    import jointwise
    objs, homes, path = setup_vise(fresh, tmp_path)
    mech = jointwise.load(path)
    r = bpy.ops.jointwise.bake(frame_start=1, frame_end=25, drive="feed", value_from=0.0,
                               value_to=2 * math.pi * 6)
    assert r == {"FINISHED"}
    for f in (1, 9, 25):
        fresh.frame_set(f)
        turns = 6 * (f - 1) / 24
        pose = mech.pose({"feed": 360.0 * turns})
        for link, oname in (("spindle", "Spindle"), ("jaw", "Jaw")):
            want = ws.expected_world(pose, link, homes[oname], 1.0)
            assert np.allclose(ws.world(objs[oname]), want, atol=TOL), (f, oname)
    # the spindle (quaternion mode) turns six times: keys stay continuous
    q = [fc for fc in ws.fcurves_of(objs["Spindle"]) if fc.data_path == "rotation_quaternion"]
    vals = np.array([[fc.evaluate(f) for fc in sorted(q, key=lambda c: c.array_index)] for f in range(1, 26)])
    assert (np.einsum("ij,ij->i", vals[1:], vals[:-1]) > 0).all()


def test_vise_export_keeps_thread(fresh, tmp_path):
    import jointwise
    import tomllib
    objs, homes, path = setup_vise(fresh, tmp_path)
    out = tmp_path / "out.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    data = tomllib.loads(out.read_text())
    assert data["joints"]["feed"]["thread"] == "Tr16x4"
    assert data["joints"]["slide"]["limits"] == [-10.0, 60.0]
    b = jointwise.load(out)
    a = jointwise.load(path)
    pa, pb = a.pose({"feed": 900.0}), b.pose({"feed": 900.0})
    assert np.allclose(pa.links["jaw"], pb.links["jaw"], atol=1e-6)


@pytest.mark.parametrize("unit,metres", [("mm", 0.001), ("cm", 0.01), ("m", 1.0), ("in", 0.0254)])
@pytest.mark.parametrize("scale", [1.0, 0.001, 0.01])
def test_file_units_into_scene_units(fresh, tmp_path, unit, metres, scale):
    """BU = value x metres(unit) / unit_settings.scale_length, for points, limits, leads
    (JSON form of the file this time)."""
    import json
    fresh.unit_settings.scale_length = scale
    ws.cube("Block", (0, 0, 0))
    ws.cube("Nut", (0, 0, 0))
    data = {"format": 1, "mechanism": {"length_unit": unit, "angle_unit": "rad", "ground": "world"},
            "links": {"world": {}, "block": {"object": "Block"}, "nut": {"object": "Nut"}},
            "joints": {"slide": {"type": "prismatic", "parent": "world", "child": "block",
                                 "point": [10, 20, 30], "axis": [0, 0, 1], "limits": [-5, 5]},
                       "screw": {"type": "helical", "parent": "block", "child": "nut",
                                 "point": [10, 20, 30], "axis": [0, 0, 1], "lead": 2}}}
    path = tmp_path / "units.json"
    path.write_text(json.dumps(data))
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = fresh.jointwise
    k = metres / scale
    m = np.array(jw.joints["slide"].anchor.matrix_world)
    assert np.allclose(m[:3, 3], np.array([10, 20, 30]) * k, rtol=1e-6)
    assert jw.joints["slide"].limit_max == pytest.approx(5 * k, rel=1e-6)
    assert jw.joints["screw"].lead == pytest.approx(2 * k, rel=1e-6)
    jw.live = True
    jw.joints["screw"].value = 2 * math.pi  # one turn: one lead along Z
    assert jw.converged, jw.message
    assert ws.world(bpy.data.objects["Nut"])[2, 3] == pytest.approx(2 * k, rel=1e-5)
