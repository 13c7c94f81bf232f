"""Measures in the scene: live values after every pose, F-curves from a bake that play back,
import and export, measures added in the UI.

Reference: the core's own sweep of the sample's mechanism file (``Mechanism.sweep``; its
measures are checked against closed forms in tests/test_measures.py), converted by hand
to host units (mm file, 1 BU = 1 mm in the samples; angles degrees -> radians)."""
from __future__ import annotations

import math
import os
import tomllib

import bpy
import numpy as np
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
SAMPLES = os.path.join(ROOT, "blend_samples")


def _open(name):
    bpy.ops.wm.open_mainfile(filepath=os.path.join(SAMPLES, name + ".blend"))
    return bpy.context.scene


def _mech(name):
    import jointwise
    return jointwise.load(os.path.join(SAMPLES, name + ".toml"))


def _bu_per_mm(scene):
    return 0.001 / scene.unit_settings.scale_length


def test_sample_measures_are_listed_with_their_kinds(installed):
    scene = _open("wagtail_rocker")
    ms = scene.jointwise.measures
    assert {m.name: m.kind for m in ms} == {"transmission": "ANGLE", "sign_hook": "POINT",
                                           "rocker_speed": "RATE"}


def test_live_values_follow_a_pose(installed):
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    mech = _mech("wagtail_rocker")
    k = _bu_per_mm(scene)
    for deg in (60.0, 95.0, 200.0):
        jw.joints["crank_pin"].value = math.radians(deg)
        bpy.ops.jointwise.pose()
        assert jw.converged, jw.message
        sw = mech.sweep("crank_pin", np.linspace(60.0, deg, 41) if deg > 60 else [60.0, 60.0])
        want = {n: np.asarray(v)[-1] for n, v in sw.measures.items()}
        assert jw.measures["transmission"].value == pytest.approx(math.radians(want["transmission"]), abs=1e-6)
        assert np.allclose(jw.measures["sign_hook"].location, np.asarray(want["sign_hook"]) * k, atol=1e-4)
        assert jw.measures["rocker_speed"].value == pytest.approx(want["rocker_speed"], abs=1e-5)
        home = np.array(mech.measures["sign_hook"].a[1]) * k
        assert jw.measures["sign_hook"].value == pytest.approx(
            np.linalg.norm(np.asarray(want["sign_hook"]) * k - home), abs=1e-4)


def test_bake_keys_measures_that_play_back_against_the_core_sweep(installed):
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    mech = _mech("wagtail_rocker")
    k = _bu_per_mm(scene)
    f0, f1 = scene.frame_start, scene.frame_end
    assert bpy.ops.jointwise.bake(frame_start=f0, frame_end=f1) == {"FINISHED"}, jw.message
    jw.live = False
    ad = scene.animation_data
    from bl_ext.user_default.jointwise import animation
    paths = {(fc.data_path, fc.array_index) for fc in animation.scene_fcurves(scene)}
    assert ('jointwise.measures["transmission"].value', 0) in paths
    assert {('jointwise.measures["sign_hook"].location', i) for i in range(3)} <= paths
    assert ad is not None
    # the crank value of each frame, as the animation sets it
    frames = list(range(f0, f1 + 1))
    crank = []
    for f in frames:
        scene.frame_set(f)
        crank.append(math.degrees(jw.joints["crank_pin"].value))
    sw = mech.sweep("crank_pin", crank)
    assert np.all(sw.converged)
    for i in (0, 17, len(frames) // 2, len(frames) - 1):
        scene.frame_set(frames[i])
        assert jw.measures["transmission"].value == pytest.approx(
            math.radians(sw.measures["transmission"][i]), abs=1e-5)
        assert jw.measures["rocker_speed"].value == pytest.approx(sw.measures["rocker_speed"][i], abs=1e-4)
        assert np.allclose(jw.measures["sign_hook"].location, np.asarray(sw.measures["sign_hook"][i]) * k,
                           atol=1e-3)
    # clearing the bake removes the measures' keys too
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    assert not [fc for fc in animation.scene_fcurves(scene) if fc.data_path.startswith("jointwise.measures[")]


def test_measures_export_with_the_files_numbers_and_added_ones(installed, tmp_path):
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    out = tmp_path / "w.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    data = tomllib.loads(out.read_text())
    src = tomllib.loads(open(os.path.join(SAMPLES, "wagtail_rocker.toml"), encoding="utf-8").read())
    assert data["measures"] == src["measures"]
    # a distance added from Python: the frame's origin to the coupler pin (world, now, BU)
    k = _bu_per_mm(scene)
    pin = np.array([10.0, 17.320508075689, 0.0]) * k
    assert bpy.ops.jointwise.measure_add(name="pin_reach", kind='DISTANCE', link_a="frame", at_a=(0, 0, 0),
                                         link_b="crank", at_b=tuple(pin)) == {"FINISHED"}
    m = jw.measures["pin_reach"]
    assert m.kind == "DISTANCE" and m.value == pytest.approx(20.0 * k, rel=1e-6)  # the crank is 20 mm
    jw.joints["crank_pin"].value = math.radians(130)
    bpy.ops.jointwise.pose()
    assert m.value == pytest.approx(20.0 * k, rel=1e-5)  # a point on the crank stays 20 mm from its pivot
    assert bpy.ops.jointwise.measure_add(name="crank_turn", kind='ANGLE', link_a="frame", axis_a=(1, 0, 0),
                                         link_b="crank", axis_b=(1, 0, 0)) == {"FINISHED"}
    # directions are given as they lie now: both along world X, so 0 now, 70 deg at crank 60
    assert jw.measures["crank_turn"].value == pytest.approx(0.0, abs=1e-3)
    jw.joints["crank_pin"].value = math.radians(60)
    bpy.ops.jointwise.pose()
    assert jw.measures["crank_turn"].value == pytest.approx(math.radians(70), abs=1e-5)
    out2 = tmp_path / "w2.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out2)) == {"FINISHED"}
    d2 = tomllib.loads(out2.read_text())
    assert d2["measures"]["pin_reach"]["type"] == "distance"
    assert d2["measures"]["pin_reach"]["b"]["at"] == pytest.approx([10.0, 17.32051, 0.0], abs=1e-4)
    import jointwise
    again = jointwise.load(str(out2))
    assert set(again.measures) == {"transmission", "sign_hook", "rocker_speed", "pin_reach", "crank_turn"}
    assert bpy.ops.jointwise.measure_remove(name="pin_reach") == {"FINISHED"}
    assert "pin_reach" not in jw.measures
    with pytest.raises(RuntimeError, match="not a link"):
        bpy.ops.jointwise.measure_add(name="bad", kind='POINT', link_a="nope")


def test_rate_measure_added_from_the_ui_defaults(installed):
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    jw.joint_index = jw.joints.find("rocker_pivot")
    assert bpy.ops.jointwise.measure_add(name="speed2", kind='RATE') == {"FINISHED"}
    m = jw.measures["speed2"]
    assert (m.of, m.per) == ("rocker_pivot", "crank_pin")
    assert m.value == pytest.approx(jw.measures["rocker_speed"].value, rel=1e-6)
