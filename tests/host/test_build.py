"""Building the Lintel clamp in the scene with the add-joint operator (no file), live
posing on frame change, and removing a joint without re-targeting animation."""
from __future__ import annotations

import math

import bpy
import numpy as np
import pytest

import workshop as ws

TOL = 1e-5


def select(*objs, active):
    for o in bpy.context.scene.objects:
        o.select_set(False)
    for o in objs:
        o.select_set(True)
    bpy.context.view_layer.objects.active = active


def build_clamp_by_hand(scene):
    objs = ws.make_clamp_objects(0.001)
    homes = {n: ws.world(o) for n, o in objs.items()}
    cur = scene.cursor
    cur.rotation_mode = 'XYZ'
    cur.rotation_euler = (0, 0, 0)
    steps = [("a", None, "Crank", ws.A, True), ("b", "Crank", "Coupler", ws.B, False),
             ("c", "Coupler", "Rocker", ws.C, False), ("d", None, "Rocker", ws.D, False)]
    for name, parent, child, point, drive in steps:
        cur.location = tuple(point * 0.001)
        sel = [objs[child]] + ([objs[parent]] if parent else [])
        select(*sel, active=objs[child])
        r = bpy.ops.jointwise.joint_add(name=name, type="revolute", axis_source="CURSOR", drive=drive)
        assert r == {"FINISHED"}
    return objs, homes


def test_add_joints_then_pose_matches_core(fresh, tmp_path):
    import jointwise
    objs, homes = build_clamp_by_hand(fresh)
    jw = fresh.jointwise
    assert [l.name for l in jw.links] == ["ground", "Crank", "Coupler", "Rocker"]
    assert jw.joints["a"].parent == "ground" and jw.joints["c"].parent == "Coupler"
    mech = jointwise.load(ws.clamp_file(tmp_path))  # the same clamp from its file (home a = 90)
    jw.live = True
    for delta in (30.0, 140.0, 275.0):
        jw.joints["a"].value = math.radians(delta)
        assert jw.converged, jw.message
        pose = mech.pose({"a": 90.0 + delta})
        for link, oname in (("crank", "Crank"), ("coupler", "Coupler"), ("rocker", "Rocker")):
            want = ws.expected_world(pose, link, homes[oname], 0.001)
            assert np.allclose(ws.world(objs[oname]), want, atol=TOL), oname


def test_live_posing_follows_frames(fresh, tmp_path):
    import jointwise
    objs, homes = build_clamp_by_hand(fresh)
    jw = fresh.jointwise
    mech = jointwise.load(ws.clamp_file(tmp_path))
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=1)
    jw.joints["a"].value = math.radians(360)
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=21)
    jw.live = True
    for f in (5, 11, 21, 2):
        fresh.frame_set(f)
        assert jw.converged, jw.message
        pose = mech.pose({"a": 90.0 + math.degrees(jw.joints["a"].value)})
        for link, oname in (("coupler", "Coupler"), ("rocker", "Rocker")):
            want = ws.expected_world(pose, link, homes[oname], 0.001)
            assert np.allclose(ws.world(objs[oname]), want, atol=TOL), (f, oname)
    jw.live = False
    before = ws.world(objs["Rocker"])
    fresh.frame_set(11)
    assert np.allclose(ws.world(objs["Rocker"]), before)  # live off: nothing moves


def test_remove_joint_keeps_animation_on_its_coordinate(fresh, tmp_path):
    objs, homes = build_clamp_by_hand(fresh)
    jw = fresh.jointwise
    jw.joints["c"].value = 0.25
    fresh.keyframe_insert('jointwise.joints["c"].angle', frame=1)
    assert bpy.ops.jointwise.joint_remove(name="b") == {"FINISHED"}
    assert [j.name for j in jw.joints] == ["a", "c", "d"]
    paths = [fc.data_path for fc in ws.fcurves_of(fresh)]
    assert paths == ["jointwise.joints[1].angle"]
    assert "b" not in [o.get("jointwise_anchor") for o in bpy.data.objects]


def test_undo_of_add_joint(fresh, tmp_path):
    objs = ws.make_clamp_objects(0.001)
    bpy.ops.ed.undo_push(message="objects made")
    select(objs["Crank"], active=objs["Crank"])
    bpy.ops.jointwise.joint_add(name="a", type="revolute", axis_source="GLOBAL_Z")
    assert len(bpy.context.scene.jointwise.joints) == 1
    bpy.ops.ed.undo_push(message="joint added")
    bpy.ops.ed.undo()
    assert len(bpy.context.scene.jointwise.joints) == 0


def test_coupling_add_and_export(fresh, tmp_path):
    import tomllib
    ws.make_vise_objects(0.001)
    bpy.ops.jointwise.mechanism_import(filepath=str(ws.vise_file(tmp_path)))
    with pytest.raises(RuntimeError, match="not a joint coordinate"):
        bpy.ops.jointwise.coupling_add(leader="nope", follower="slide")
    out = tmp_path / "x.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    assert tomllib.loads(out.read_text())["mechanism"]["ground"] == "body"


def test_moving_an_anchor_moves_the_joint(fresh):
    """The anchor is the joint frame: moved and turned with the ordinary tools, it changes
    the axis the link turns about (reference: mathutils rotation about that line)."""
    from mathutils import Matrix, Vector
    crank = ws.cube("Crank", (0.1, 0, 0), (0.05, 0.01, 0.01))
    home = crank.matrix_world.copy()
    select(crank, active=crank)
    bpy.ops.jointwise.joint_add(name="pivot", type="revolute", axis_source="GLOBAL_Z", drive=True)
    jw = fresh.jointwise
    anchor = jw.joints["pivot"].anchor
    p = Vector((0.02, -0.03, 0.01))
    axis = Vector((1, 1, 2)).normalized()
    anchor.matrix_world = Matrix.Translation(p) @ axis.to_track_quat('Z', 'Y').to_matrix().to_4x4()
    bpy.context.view_layer.update()
    jw.live = True
    jw.joints["pivot"].value = 0.8
    assert jw.converged, jw.message
    want = Matrix.Translation(p) @ Matrix.Rotation(0.8, 4, axis) @ Matrix.Translation(-p) @ home
    assert np.allclose(np.array(crank.matrix_world), np.array(want), atol=1e-5)
