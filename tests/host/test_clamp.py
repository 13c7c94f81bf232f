"""Lintel clamp (four-bar crank-rocker) through the operators, checked against the core's
own ``Mechanism.pose`` of the same file (the reference), in a metre scene (1 mm = 0.001)."""
from __future__ import annotations

import math

import bpy
import numpy as np
import pytest

import workshop as ws

TOL = 1e-5  # float32 storage of matrices and values


def setup_clamp(tmp_path, **kw):
    objs = ws.make_clamp_objects(0.001)
    homes = {name: ws.world(o) for name, o in objs.items()}
    path = ws.clamp_file(tmp_path, **kw)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return objs, homes, path


LINK_OBJECT = {"crank": "Crank", "coupler": "Coupler", "rocker": "Rocker"}


def check_against_core(objs, homes, mech, values, unit=0.001):
    pose = mech.pose(values)
    for link, oname in LINK_OBJECT.items():
        want = ws.expected_world(pose, link, homes[oname], unit)
        got = ws.world(objs[oname])
        assert np.allclose(got, want, atol=TOL), f"{oname}: {got} != {want}"
    return pose


def test_import_binds_links_and_makes_anchors(fresh, tmp_path):
    objs, homes, path = setup_clamp(tmp_path)
    jw = fresh.jointwise
    assert [l.name for l in jw.links] == ["frame", "crank", "coupler", "rocker"]
    assert jw.links["crank"].object == objs["Crank"]
    assert jw.links["frame"].object is None  # the world is the ground
    assert [j.name for j in jw.joints] == ["a", "b", "c", "d"]
    a = jw.joints["a"]
    assert a.drive and a.kind == "angle"
    assert a.value == pytest.approx(math.radians(90), abs=1e-6)
    # anchor placed at the joint point converted mm -> m, Z along the axis
    m = np.array(jw.joints["c"].anchor.matrix_world)
    assert np.allclose(m[:3, 3], ws.C * 0.001, atol=1e-7)
    assert np.allclose(m[:3, 2], [0, 0, 1], atol=1e-7)
    # nothing moved by the import
    for name, o in objs.items():
        assert np.allclose(ws.world(o), homes[name], atol=1e-9)


def test_live_pose_by_value_matches_core(fresh, tmp_path):
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    mech = jointwise.load(path)
    jw = fresh.jointwise
    jw.live = True
    for deg in (120.0, 200.0, 300.0, 45.0):
        jw.joints["a"].value = math.radians(deg)
        assert jw.converged, jw.message
        check_against_core(objs, homes, mech, {"a": deg})
    # solved (passive) values are written back, in radians
    pose = mech.pose({"a": 45.0})
    for c in "bcd":  # equal up to whole turns (continuation may have gone round)
        d = jw.joints[c].value - math.radians(pose.joints[c])
        assert abs(d - 2 * math.pi * round(d / (2 * math.pi))) < 1e-5
    assert jw.mobility in (1, -1)


def test_interface_keyframe_path_and_bake_matches_core(fresh, tmp_path):
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    mech = jointwise.load(path)
    jw = fresh.jointwise
    jw.joints["a"].value = math.radians(90)
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=1)
    jw.joints["a"].value = math.radians(450)
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=41)
    assert bpy.ops.jointwise.bake(frame_start=1, frame_end=41) == {"FINISHED"}
    jw.live = False
    for f in (1, 7, 20, 33, 41):
        fresh.frame_set(f)
        deg = math.degrees(jw.joints["a"].value)
        check_against_core(objs, homes, mech, {"a": deg})
    # keys: one per frame, linear, continuous rotations
    coupler = ws.fcurves_of(objs["Coupler"])
    paths = sorted({(fc.data_path, fc.array_index) for fc in coupler})
    assert ("rotation_quaternion", 3) in paths and ("location", 0) in paths
    assert all(len(fc.keyframe_points) == 41 for fc in coupler)
    assert all(k.interpolation == 'LINEAR' for fc in coupler for k in fc.keyframe_points)
    q = np.array([[fc.evaluate(f) for fc in sorted(
        (c for c in coupler if c.data_path == "rotation_quaternion"), key=lambda c: c.array_index)]
        for f in range(1, 42)])
    assert (np.einsum("ij,ij->i", q[1:], q[:-1]) > 0).all(), "quaternion sign flip"
    crank = ws.fcurves_of(objs["Crank"])
    ez = next(fc for fc in crank if fc.data_path == "rotation_euler" and fc.array_index == 2)
    vals = np.array([ez.evaluate(f) for f in range(1, 42)])
    assert np.abs(np.diff(vals)).max() < math.radians(20), "Euler wrap"
    assert vals[-1] - vals[0] == pytest.approx(2 * math.pi, abs=1e-4)  # a full crank turn
    rocker = ws.fcurves_of(objs["Rocker"])
    assert {fc.data_path for fc in rocker} == {"location", "rotation_euler"}
    # clear
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    assert ws.fcurves_of(objs["Coupler"]) == []


def test_bake_ramp_of_one_drive(fresh, tmp_path):
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    mech = jointwise.load(path)
    r = bpy.ops.jointwise.bake(frame_start=10, frame_end=20, drive="a",
                               value_from=math.radians(90), value_to=math.radians(190))
    assert r == {"FINISHED"}
    fresh.frame_set(15)
    check_against_core(objs, homes, mech, {"a": 140.0})


def test_save_reload_keeps_mechanism_and_motion(fresh, tmp_path):
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    mech = jointwise.load(path)
    bpy.ops.jointwise.bake(frame_start=1, frame_end=11, drive="a", value_from=math.radians(90),
                           value_to=math.radians(190))
    blend = tmp_path / "lintel.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(blend))
    bpy.ops.wm.open_mainfile(filepath=str(blend))
    scene = bpy.context.scene
    jw = scene.jointwise
    objs = {n: bpy.data.objects[n] for n in objs}
    assert jw.links["coupler"].object == objs["Coupler"]
    scene.frame_set(6)
    check_against_core(objs, homes, mech, {"a": 140.0})
    # the stored mechanism still poses by value after reload (renamed object too)
    bpy.ops.jointwise.bake_clear()
    objs["Coupler"].name = "Coupler (renamed)"
    jw.live = True
    jw.joints["a"].value = math.radians(250)
    assert jw.converged, jw.message
    check_against_core(objs, homes, mech, {"a": 250.0})


def test_export_round_trip(fresh, tmp_path):
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    out = tmp_path / "exported.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    a, b = jointwise.load(path), jointwise.load(out)
    assert b.length_unit == "mm" and b.angle_unit == "deg"
    for deg in (90.0, 180.0, 333.0):
        pa, pb = a.pose({"a": deg}), b.pose({"a": deg})
        for link in LINK_OBJECT:
            assert np.allclose(pa.links[link], pb.links[link], atol=1e-4)


def test_home_set_and_restore(fresh, tmp_path):
    objs, homes, path = setup_clamp(tmp_path)
    jw = fresh.jointwise
    jw.live = True
    jw.joints["a"].value = math.radians(150)
    posed = {n: ws.world(o) for n, o in objs.items()}
    assert bpy.ops.jointwise.home_restore() == {"FINISHED"}
    for n, o in objs.items():
        assert np.allclose(ws.world(o), homes[n], atol=TOL)
    assert jw.joints["a"].value == pytest.approx(math.radians(90), abs=1e-6)
    # new home at the posed placement: posing to 150 degrees again reproduces it
    jw.joints["a"].value = math.radians(150)
    assert bpy.ops.jointwise.home_set() == {"FINISHED"}
    assert jw.joints["a"].home == pytest.approx(math.radians(150), abs=1e-6)
    jw.joints["a"].value = math.radians(90)
    bpy.ops.jointwise.home_restore()
    for n, o in objs.items():
        assert np.allclose(ws.world(o), posed[n], atol=TOL)


def test_ground_object_carries_the_mechanism(fresh, tmp_path):
    import jointwise
    from mathutils import Matrix
    objs, homes, path = setup_clamp(tmp_path, frame_object=True)
    mech = jointwise.load(path)
    jw = fresh.jointwise
    g = Matrix.Translation((0.5, 0.2, 0.1)) @ Matrix.Rotation(0.7, 4, 'Z')
    objs["Frame"].matrix_world = g @ objs["Frame"].matrix_world
    bpy.context.view_layer.update()
    jw.live = True
    jw.joints["a"].value = math.radians(160)
    assert jw.converged, jw.message
    pose = mech.pose({"a": 160.0})
    G = np.array(g)
    for link, oname in LINK_OBJECT.items():
        want = G @ ws.expected_world(pose, link, homes[oname], 0.001)
        assert np.allclose(ws.world(objs[oname]), want, atol=TOL)


def test_undo_of_bake(fresh, tmp_path):
    objs, homes, path = setup_clamp(tmp_path)
    bpy.ops.ed.undo_push(message="clamp imported")
    bpy.ops.jointwise.bake(frame_start=1, frame_end=5, drive="a", value_from=1.0, value_to=2.0)
    assert ws.fcurves_of(bpy.data.objects["Coupler"])
    bpy.ops.ed.undo_push(message="baked")
    bpy.ops.ed.undo()
    assert ws.fcurves_of(bpy.data.objects["Coupler"]) == []


def test_children_follow_and_parented_links(fresh, tmp_path):
    """A plain child object (a clamp pad on the rocker) follows its link by parenting, and
    a link parented to another link (the coupler under the crank) is placed and baked right."""
    import jointwise
    objs = ws.make_clamp_objects(0.001)
    pad = ws.cube("Pad", (0.07, 0.05, 0), (0.01, 0.01, 0.01))
    pad.parent = objs["Rocker"]
    pad.matrix_parent_inverse = objs["Rocker"].matrix_world.inverted()
    objs["Coupler"].parent = objs["Crank"]
    objs["Coupler"].matrix_parent_inverse = objs["Crank"].matrix_world.inverted()
    bpy.context.view_layer.update()
    homes = {n: ws.world(o) for n, o in objs.items()}
    pad_home = ws.world(pad)
    path = ws.clamp_file(tmp_path)
    bpy.ops.jointwise.mechanism_import(filepath=str(path))
    mech = jointwise.load(path)
    jw = fresh.jointwise
    jw.live = True
    jw.joints["a"].value = math.radians(210)
    pose = check_against_core(objs, homes, mech, {"a": 210.0})
    assert np.allclose(ws.world(pad), ws.expected_world(pose, "rocker", pad_home, 0.001), atol=TOL)
    jw.live = False
    bpy.ops.jointwise.bake(frame_start=1, frame_end=9, drive="a", value_from=math.radians(90),
                           value_to=math.radians(330))
    fresh.frame_set(5)
    check_against_core(objs, homes, mech, {"a": 210.0})
    assert np.allclose(ws.world(pad), ws.expected_world(pose, "rocker", pad_home, 0.001), atol=TOL)


def test_reimport_keeps_animation_on_names(fresh, tmp_path):
    objs, homes, path = setup_clamp(tmp_path)
    fresh.keyframe_insert('jointwise.joints["d"].angle', frame=1)
    assert [fc.data_path for fc in ws.fcurves_of(fresh)] == ["jointwise.joints[3].angle"]
    text = path.read_text()
    # the same file with joint d listed first: d becomes item 0
    head, rest = text.split("[joints.a]", 1)
    a_to_c, d = rest.split("[joints.d]", 1)
    path.write_text(head + "[joints.d]" + d + "\n[joints.a]" + a_to_c)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    assert fresh.jointwise.joints[0].name == "d"
    assert [fc.data_path for fc in ws.fcurves_of(fresh)] == ["jointwise.joints[0].angle"]


def test_dragging_a_passive_joint_moves_the_loop(fresh, tmp_path):
    """With the crank as drive, setting the rocker angle releases the crank (same loop)."""
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    jw = fresh.jointwise
    jw.live = True
    jw.joints["d"].value = math.radians(10)
    assert jw.converged, jw.message
    mech = jointwise.load(ws.clamp_file(tmp_path, drive="d"))
    check_against_core(objs, homes, mech, {"d": 10.0})
    assert jw.joints["a"].value != pytest.approx(math.radians(90), abs=1e-3)  # the crank moved


def test_bake_remembers_and_clear_restores_an_earlier_action(fresh, tmp_path):
    objs, homes, path = setup_clamp(tmp_path)
    crank = objs["Crank"]
    crank.keyframe_insert("location", frame=1)
    own = crank.animation_data.action
    own_name = own.name
    for _ in range(2):  # baking twice replaces our own bake, still remembering the user's
        assert bpy.ops.jointwise.bake(frame_start=1, frame_end=4, drive="a", value_from=1.6,
                                      value_to=2.0) == {"FINISHED"}
        assert crank.animation_data.action.get("jointwise_bake")
    assert len([a for a in bpy.data.actions if a.get("jointwise_bake")]) == 3  # one per link object
    assert own.use_fake_user  # set aside, but kept through save/reload
    blend = tmp_path / "kept.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(blend))
    bpy.ops.wm.open_mainfile(filepath=str(blend))
    crank = bpy.data.objects["Crank"]
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    assert crank.animation_data.action.name == own_name
    assert not crank.animation_data.action.use_fake_user
    assert [fc.data_path for fc in ws.fcurves_of(crank)] == ["location"] * 3
    assert not [a for a in bpy.data.actions if a.get("jointwise_bake")]


def test_bake_ramp_of_a_passive_coordinate_releases_the_animated_drive(fresh, tmp_path):
    # the crank "a" is the file's drive and is animated; a ramp of the rocker "d" makes the
    # rocker the input of that loop (as --drive does on the command line)
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    mech = jointwise.load(path)
    jw = fresh.jointwise
    jw.joints["a"].value = math.radians(90)
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=1)
    jw.joints["a"].value = math.radians(180)
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=9)
    d0 = mech.pose({"a": 90.0}).joints["d"]
    r = bpy.ops.jointwise.bake(frame_start=1, frame_end=9, drive="d", value_from=math.radians(d0),
                               value_to=math.radians(d0 + 8.0))
    assert r == {"FINISHED"}, jw.message
    fresh.frame_set(5)
    want = mech.pose({"d": d0 + 4.0}, start=mech.pose({"a": 90.0}))
    for link, oname in LINK_OBJECT.items():
        got = ws.world(objs[oname])
        assert np.allclose(got, ws.expected_world(want, link, homes[oname], 0.001), atol=TOL), oname


def test_export_of_an_unchanged_import_keeps_the_file_numbers(fresh, tmp_path):
    # float32 anchors hold ~7 digits; an unchanged mechanism must export the file's own numbers
    import tomllib
    objs, homes, path = setup_clamp(tmp_path)
    out = tmp_path / "again.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    src = tomllib.loads(path.read_text())["joints"]
    got = tomllib.loads(out.read_text())["joints"]
    for name, j in src.items():
        for key in ("point", "axis"):
            assert got[name][key] == j[key], (name, key, got[name][key], j[key])
    # a anchor moved for real is exported where it now is
    jw = fresh.jointwise
    jw.joints["d"].anchor.location.x += 0.002  # 2 mm in a metre scene
    bpy.ops.jointwise.home_set()
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    moved = tomllib.loads(out.read_text())["joints"]["d"]["point"]
    assert abs(moved[0] - (src["d"]["point"][0] + 2.0)) < 1e-3



def test_bake_reads_keys_of_the_key_button(fresh, tmp_path):
    # the joint list's key button keys the value on the scene; the bake follows those keys
    import jointwise
    objs, homes, path = setup_clamp(tmp_path)
    mech = jointwise.load(path)
    jw = fresh.jointwise
    index = list(jw.joints.keys()).index("a")
    for frame, deg in ((1, 90.0), (11, 190.0)):
        fresh.frame_set(frame)
        jw.joints["a"].value = math.radians(deg)
        assert bpy.ops.jointwise.value_key(index=index) == {"FINISHED"}
    for fc in ws.fcurves_of(fresh):
        for k in fc.keyframe_points:
            k.interpolation = 'LINEAR'
    assert bpy.ops.jointwise.bake(frame_start=1, frame_end=11) == {"FINISHED"}, jw.message
    fresh.frame_set(6)
    check_against_core(objs, homes, mech, {"a": 140.0})
