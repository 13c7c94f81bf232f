"""What goes wrong must say what and where, and leave the scene as it was."""
from __future__ import annotations

import math

import bpy
import numpy as np
import pytest

import workshop as ws


def placements():
    return {o.name: ws.world(o) for o in bpy.context.scene.objects}


def same(a, b, tol=1e-7):
    return a.keys() == b.keys() and all(np.allclose(a[k], b[k], atol=tol) for k in a)


def clamp(tmp_path, **kw):
    ws.make_clamp_objects(0.001)
    path = ws.clamp_file(tmp_path, **kw)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return path


def test_import_names_the_missing_object(fresh, tmp_path):
    ws.make_clamp_objects(0.001)
    bpy.data.objects.remove(bpy.data.objects["Rocker"])
    path = ws.clamp_file(tmp_path)
    with pytest.raises(RuntimeError, match=r"lintel\.toml.*'rocker'.*'Rocker'"):
        bpy.ops.jointwise.mechanism_import(filepath=str(path))
    assert len(fresh.jointwise.joints) == 0
    assert not [o for o in bpy.data.objects if o.get("jointwise_anchor")]


def test_import_zero_length_axis_in_file(fresh, tmp_path):
    ws.make_clamp_objects(0.001)
    before = placements()
    path = ws.clamp_file(tmp_path, axis_a=(0, 0, 0))
    with pytest.raises(RuntimeError, match=r"joints\.a\.axis.*zero length"):
        bpy.ops.jointwise.mechanism_import(filepath=str(path))
    assert len(fresh.jointwise.joints) == 0
    assert same(before, placements())


def test_import_bad_file_names_file_and_key(fresh, tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text('format = 1\n[mechanism]\nground = "base"\n[links.base]\n[joints.x]\ntype = "wobbly"\n')
    with pytest.raises(RuntimeError, match=r"broken\.toml.*joints\.x"):
        bpy.ops.jointwise.mechanism_import(filepath=str(path))
    with pytest.raises(RuntimeError, match=r"cannot import nothing-here\.toml"):
        bpy.ops.jointwise.mechanism_import(filepath=str(tmp_path / "nothing-here.toml"))


def test_deleted_link_object(fresh, tmp_path):
    clamp(tmp_path)
    jw = fresh.jointwise
    bpy.data.objects.remove(bpy.data.objects["Coupler"])
    before = placements()
    with pytest.raises(RuntimeError, match=r"link 'coupler'.*missing.*'Coupler'"):
        bpy.ops.jointwise.pose()
    jw.live = True
    jw.joints["a"].value = math.radians(150)
    assert not jw.converged and "coupler" in jw.message
    assert jw.joints["a"].value == pytest.approx(math.radians(90), abs=1e-6)
    assert same(before, placements())
    with pytest.raises(RuntimeError, match="coupler"):
        bpy.ops.jointwise.bake(frame_start=1, frame_end=3)


def test_anchor_scaled_to_zero(fresh, tmp_path):
    clamp(tmp_path)
    jw = fresh.jointwise
    jw.joints["b"].anchor.scale = (0, 0, 0)
    bpy.context.view_layer.update()
    before = placements()
    with pytest.raises(RuntimeError, match=r"joint 'b'.*zero length"):
        bpy.ops.jointwise.pose()
    jw.live = True
    jw.joints["a"].value = math.radians(150)
    assert not jw.converged and "zero length" in jw.message
    assert same(before, placements())


def _rocker_reach(tmp_path):
    """The first rocker angle (deg, from home, in 1-degree steps) the core refuses."""
    import jointwise
    mech = jointwise.load(ws.clamp_file(tmp_path, drive="d"))
    prev = None
    for deg in range(0, 181):
        try:
            prev = mech.pose({"d": float(deg)}, start=prev)
        except jointwise.AssemblyError:
            return deg
    raise AssertionError("rocker reaches every angle?")


def test_unreachable_value_leaves_scene_and_says_why(fresh, tmp_path):
    reach = _rocker_reach(tmp_path)
    clamp(tmp_path, drive="d")
    jw = fresh.jointwise
    jw.live = True
    jw.joints["d"].value = math.radians(reach - 5)
    assert jw.converged, jw.message
    before = placements()
    values = {it.name: it.value for it in jw.joints}
    jw.joints["d"].value = math.radians(reach + 20)
    assert not jw.converged
    assert "assemble" in jw.message or "close" in jw.message, jw.message
    assert same(before, placements())
    assert {it.name: it.value for it in jw.joints} == pytest.approx(values, abs=1e-7)


def test_bake_over_dead_point_writes_nothing_and_names_frame(fresh, tmp_path):
    reach = _rocker_reach(tmp_path)  # first refused whole degree
    clamp(tmp_path, drive="d")
    jw = fresh.jointwise
    # one degree per frame from home: frame 1 = 0 deg, frame f = f - 1 deg
    jw.joints["d"].value = 0.0
    fresh.keyframe_insert('jointwise.joints["d"].angle', frame=1)
    fresh.keyframe_insert('jointwise.joints["d"].angle', frame=101)
    for fc in ws.fcurves_of(fresh):
        for k in fc.keyframe_points:
            k.interpolation = 'LINEAR'
        # the far key past the dead point, written on the curve (typing it poses at once,
        # and an unreachable value is refused)
        fc.keyframe_points[1].co[1] = math.radians(100)
        fc.update()
    before = placements()
    with pytest.raises(RuntimeError, match=r"frame (\d+)") as info:
        bpy.ops.jointwise.bake(frame_start=1, frame_end=101)
    import re
    frame = int(re.search(r"frame (\d+)", str(info.value)).group(1))
    # the dead point lies between reach - 1 and reach degrees: frames reach .. reach + 1
    assert reach <= frame <= reach + 1, (frame, reach)
    assert "no keys were written" in str(info.value)
    for name in ("Crank", "Coupler", "Rocker"):
        assert ws.fcurves_of(bpy.data.objects[name]) == []
    assert same(before, placements())
    assert f"frame {frame}" in jw.message


def test_empty_scene_operators_report(fresh, tmp_path):
    with pytest.raises(RuntimeError, match="no mechanism"):
        bpy.ops.jointwise.pose()
    with pytest.raises(RuntimeError, match="no mechanism"):
        bpy.ops.jointwise.home_set()
    with pytest.raises(RuntimeError, match="no mechanism"):
        bpy.ops.jointwise.bake(frame_start=1, frame_end=2)
    with pytest.raises(RuntimeError, match="empty"):
        bpy.ops.jointwise.bake(frame_start=5, frame_end=2)


def _vise_in_mm(scene, tmp_path):
    """The Corbel vise (screw Tr16x4, jaw slide limited to [-10, 60] mm) in a scene shown in
    millimetres (1 BU = 1 mm): the scene mechanism works in radians and BU."""
    scene.unit_settings.system = "METRIC"
    scene.unit_settings.length_unit = "MILLIMETERS"
    scene.unit_settings.scale_length = 0.001
    ws.make_vise_objects(1.0)
    path = ws.vise_file(tmp_path)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return scene.jointwise


def test_a_refused_value_is_worded_in_display_units(fresh, tmp_path):
    """A value change the core refuses: the message is worded from the failure's fields in
    the scene's display units (the core computed in radians and BU), the scene unchanged.
    The vise's lead is 4 mm a turn (ISO 2904 Tr16x4): 20 turns ask 80 mm of the slide."""
    jw = _vise_in_mm(fresh, tmp_path)
    jw.live = True
    jw.joints["feed"].value = 2 * math.pi * 3  # 12 mm of jaw travel: fine
    assert jw.converged, jw.message
    before, values = placements(), {it.name: it.value for it in jw.joints}
    jw.joints["feed"].value = 2 * math.pi * 20  # 80 mm: past the slide's 60 mm
    assert not jw.converged
    assert "feed cannot reach 7200° here" in jw.message, jw.message
    assert "slide reaches its limit 60 mm (limits [-10 mm, 60 mm])" in jw.message, jw.message
    assert " rad" not in jw.message and " m " not in jw.message, jw.message
    assert same(before, placements())
    assert {it.name: it.value for it in jw.joints} == pytest.approx(values, abs=1e-7)
    fresh.unit_settings.length_unit = "CENTIMETERS"  # the words follow the display unit
    jw.joints["feed"].value = 2 * math.pi * 20
    assert "[-1 cm, 6 cm]" in jw.message, jw.message


def test_a_refused_angle_is_worded_in_degrees(fresh, tmp_path):
    reach = _rocker_reach(tmp_path)
    clamp(tmp_path, drive="d")
    jw = fresh.jointwise
    jw.live = True
    jw.joints["d"].value = math.radians(reach + 20)
    assert not jw.converged
    assert f"d cannot reach {reach + 20}° here" in jw.message, jw.message
    assert " rad" not in jw.message, jw.message


def test_a_refused_bake_frame_is_worded_in_display_units(fresh, tmp_path):
    jw = _vise_in_mm(fresh, tmp_path)
    before = placements()
    with pytest.raises(RuntimeError) as info:  # 20 turns over 21 frames: 4 mm a frame, past 60 mm
        bpy.ops.jointwise.bake(frame_start=1, frame_end=21, drive="feed", value_from=0.0,
                               value_to=2 * math.pi * 20)
    text = str(info.value)
    assert "slide" in text and "[-10 mm, 60 mm]" in text, text
    assert "no keys were written" in text and " rad" not in text, text
    assert "[-10 mm, 60 mm]" in jw.message and not jw.converged, jw.message
    assert same(before, placements())


def test_a_refused_drag_is_worded_in_display_units(fresh, tmp_path, monkeypatch):
    """A drag the core refuses for a limit (its reason in the scene mechanism's BU): the
    message gives the slide's numbers in the display unit. The refusal is made by the test
    (a drag toward a limit stops at it), so the wording path itself is what is checked."""
    import jointwise
    from jointwise.errors import LimitError, Reason
    from mathutils import Matrix
    jw = _vise_in_mm(fresh, tmp_path)
    jw.joints["feed"].value = 2 * math.pi  # posed once: the drag knows where it put the jaw

    def refuse(*a, **k):
        raise LimitError(reason=Reason("limit", joint="slide", value=72.5, bounds=(-10.0, 60.0), unit="m",
                                       held=False))
    monkeypatch.setattr(jointwise.Mechanism, "pose", refuse)
    jaw = bpy.data.objects["Jaw"]
    before = placements()
    m = ws.world(jaw)
    m[0, 3] += 5.0
    jaw.matrix_world = Matrix(m.tolist())
    bpy.context.view_layer.update()  # the drag handler sees the moved link
    assert jw.message == ("dragging jaw: the closed placement puts slide at 72.5 mm, outside its "
                          "limits [-10 mm, 60 mm]"), jw.message
    assert not jw.converged
    assert same(before, placements())


def test_a_held_motion_law_follower_is_refused_in_plain_words(installed):
    """Typing a value into a motion law's follower (the kittiwake sample's Geneva wheel) is
    refused with the reason only: it is not a matter of reach, so no "cannot reach" lead."""
    import os
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    bpy.ops.wm.open_mainfile(filepath=os.path.join(root, "blend_samples", "kittiwake_index.blend"))
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    jw = bpy.context.scene.jointwise
    before, values = placements(), {it.name: it.value for it in jw.joints}
    jw.joints["table_spindle"].value += math.radians(20.0)
    assert not jw.converged
    assert jw.message == ("table_spindle follows a motion law and cannot be held; hold its leader "
                          "drive_shaft instead"), jw.message
    assert same(before, placements())
    assert {it.name: it.value for it in jw.joints} == pytest.approx(values, abs=1e-7)
