"""Samples as shipped: they solve at any frame and follow a dragged passive joint.

Reference: the core's poses of the sample's own mechanism file (tests/test_loops.py
checks those against closed forms)."""
import math
import os

import numpy as np
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
SAMPLES = os.path.join(ROOT, "blend_samples")


def _open(name):
    import bpy
    bpy.ops.wm.open_mainfile(filepath=os.path.join(SAMPLES, name + ".blend"))
    return bpy.context.scene


@pytest.mark.parametrize("frame", [9, 50, 115])
def test_twin_shaft_solves_away_from_home(installed, frame):
    # an overconstrained double Hooke's loop: float32 anchors read through moved links
    # must not lock it
    import bpy
    scene = _open("heron_twin_shaft")
    scene.frame_set(frame)
    assert bpy.ops.jointwise.pose() == {"FINISHED"}, scene.jointwise.message
    assert scene.jointwise.converged


def test_twin_shaft_bakes_from_a_frame_away_from_home(installed):
    import bpy
    scene = _open("heron_twin_shaft")
    scene.frame_set(50)
    assert bpy.ops.jointwise.bake(frame_start=1, frame_end=120) == {"FINISHED"}, scene.jointwise.message


def test_dragging_a_passive_joint_of_an_animated_sample_follows(installed):
    import jointwise
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    mech = jointwise.load(os.path.join(SAMPLES, "wagtail_rocker.toml"))
    scene.frame_set(1)
    jw.live = True
    jw.joints["rocker_pivot"].value = math.radians(10)
    assert jw.converged, jw.message
    want = mech.pose({"rocker_pivot": 10.0})
    assert math.degrees(jw.joints["crank_pin"].value) == pytest.approx(want.joints["crank_pin"], abs=1e-3)


def test_baked_sample_exports_to_gltf_as_one_clip_without_jointwise(installed, tmp_path):
    # README quickstart step 5: the baked keys play without jointwise installed
    import json

    import bpy
    _open("plover_lift")
    module = installed
    bpy.ops.preferences.addon_disable(module=module)
    try:
        out = tmp_path / "lift.gltf"
        r = bpy.ops.export_scene.gltf(filepath=str(out), export_format="GLTF_SEPARATE", export_animations=True,
                                      export_animation_mode="SCENE", export_anim_scene_split_object=False)
        assert r == {"FINISHED"}
        doc = json.loads(out.read_text())
        assert len(doc["animations"]) == 1
        moving = {n["name"] for n in doc["nodes"]} & {"lift_foot", "lift_platform", "lift_arm_a2"}
        targets = {doc["nodes"][c["target"]["node"]]["name"] for c in doc["animations"][0]["channels"]}
        assert moving and moving <= targets
    finally:
        bpy.ops.preferences.addon_enable(module=module)


@pytest.mark.parametrize("name", ["linnet_vise", "wagtail_rocker", "dipper_pump", "heron_shaft",
                                  "heron_twin_shaft", "plover_lift"])
def test_sample_keeps_the_file_geometry_for_export(installed, name):
    # a stale .blend (built before the scene kept the file's own numbers) fails here
    import json
    import tomllib
    scene = _open(name)
    with open(os.path.join(SAMPLES, name + ".toml"), "rb") as fh:
        joints = tomllib.load(fh)["joints"]
    stored = json.loads(scene.jointwise.geometry_json or "{}")
    for jn, j in joints.items():
        for key in ("point", "axis", "axis2"):
            if key in j:
                assert stored[jn][key] == j[key], (jn, key)


def test_the_lift_screw_past_its_end_poses_at_the_end(installed):
    """plover_lift's screw stops at 45000 deg, where the foot's slide ends too (125 turns of
    the M16's 2 mm lead: 250 mm). A value past it poses at the end and says so, although
    the stored limits are 32-bit floats that round the two ends apart. Reference: the
    core's pose of the sample's file at 45000 deg."""
    import bpy
    import jointwise
    scene = _open("plover_lift")
    jw = scene.jointwise
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    jw.live = False  # the screw is keyed: pose what is typed, not the animation
    it = jw.joints["screw_bearing"]
    it.value = math.radians(50000.0)
    assert jw.converged, jw.message
    assert "limit 45000°" in jw.message and "asked 50000°" in jw.message
    assert math.degrees(it.value) == pytest.approx(45000.0, abs=0.01)
    want = jointwise.load(os.path.join(SAMPLES, "plover_lift.toml")).pose({"screw_bearing": 44999.99})
    foot = jw.joints["foot_slide"].value / scene.unit_settings.scale_length * 1e-3  # mm
    assert foot == pytest.approx(want.joints["foot_slide"], abs=1e-3)


def test_a_cross_angle_at_its_fold_says_to_move_another_joint(installed):
    # heron_shaft at home: the cross's angle cross.1 is at a turning point (it runs from 0 to
    # -60 deg and back as the input turns; reach says locked by a dead point on both sides),
    # so a value for it alone is refused with what to do instead, and the scene keeps its
    # pose; once the input has turned (90 deg) the same value poses
    import bpy
    import jointwise
    scene = _open("heron_shaft")
    jw = scene.jointwise
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    jw.live = False
    before = {o.name: [list(r) for r in o.matrix_world] for o in scene.objects}
    jw.joints["cross.1"].value = math.radians(-20.0)
    assert not jw.converged
    assert "cannot move on its own from here" in jw.message and "move another joint first" in jw.message
    assert abs(jw.joints["cross.1"].value) < 1e-9
    assert {o.name: [list(r) for r in o.matrix_world] for o in scene.objects} == before
    jw.joints["input_bearing"].value = math.radians(90.0)
    jw.joints["cross.1"].value = math.radians(-20.0)
    assert jw.converged, jw.message
    want = jointwise.load(os.path.join(SAMPLES, "heron_shaft.toml")).pose({"input_bearing": 90.0})
    assert want.converged
