"""The extension as users work (issue 10 items 1-4, 8, 9; issue 14 item 8): a value poses at
once, the field the list draws keys like any property, units in every dialog, limits clamp,
baked keys play, bad parents and bad numbers are refused by name.

Reference poses: the core's own ``Mechanism.pose`` of the same mechanism file (tests/test_loops.py
checks the core against closed forms)."""
from __future__ import annotations

import importlib
import math
import types

import bpy
import numpy as np
import pytest
from mathutils import Matrix

import workshop as ws
from conftest import MODULE


def _clamp(tmp_path, **kw):
    ws.make_clamp_objects(0.001)
    path = ws.clamp_file(tmp_path, **kw)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return path


def _expect(path, values):
    import jointwise
    return jointwise.load(str(path)).pose(values)


def _check_links(scene, pose, tol=1e-6):
    jw = scene.jointwise
    for link in jw.links:
        if link.name == jw.ground:
            continue
        home = np.array(link.home).reshape(4, 4)
        want = ws.expected_world(pose, link.name, home, 0.001)
        assert np.abs(ws.world(link.object) - want).max() < tol, link.name


def test_live_is_on_by_default_and_a_value_poses_at_once(fresh, tmp_path):
    path = _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    assert jw.live  # follow the animation: on by default
    jw.live = False  # a value poses at once even when not following the animation
    jw.joints["a"].value = math.radians(100)
    assert jw.converged, jw.message
    _check_links(fresh, _expect(path, {"a": 100.0}))
    assert jw.message.startswith("posed") and jw.message.endswith(" m")  # a status line with units


def test_switching_follow_on_poses_at_once_and_off_shows_the_pose_values(fresh, tmp_path):
    path = _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    jw.live = False
    it = jw.joints["a"]
    for f, deg in ((1, 90.0), (11, 110.0)):
        fresh.frame_set(f)
        it.angle = math.radians(deg)  # poses at once
        fresh.keyframe_insert('jointwise.joints["a"].angle', frame=f)
    _check_links(fresh, _expect(path, {"a": 110.0}))
    fresh.frame_set(1)
    # not following: the links stay, and the list shows the values of the pose on screen
    _check_links(fresh, _expect(path, {"a": 110.0}))
    assert math.degrees(it.value) == pytest.approx(110.0, abs=1e-4)
    jw.live = True  # switched on: poses from the animation at once
    assert math.degrees(it.value) == pytest.approx(90.0, abs=1e-4)
    _check_links(fresh, _expect(path, {"a": 90.0}))


def test_the_list_field_is_the_animatable_one_and_keys_bake(fresh, tmp_path):
    path = _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    # the field the joint list draws
    from test_panels import Recorder
    log = []
    bpy.types.JOINTWISE_UL_joints.draw_item(None, bpy.context, Recorder(log), jw, jw.joints[0], 0,
                                            jw, "joint_index", 0)
    drawn = [e[1] for e in log if e[0] == "prop"]
    assert drawn[0] == "angle"
    prop = jw.joints[0].bl_rna.properties["angle"]
    assert prop.is_animatable and prop.subtype == 'ANGLE' and prop.unit == 'ROTATION'
    lprop = jw.joints[0].bl_rna.properties["length"]
    assert lprop.is_animatable and lprop.subtype == 'DISTANCE' and lprop.unit == 'LENGTH'
    # key it as the host's I does (keyframe_insert on the drawn path), bake from it
    for f, deg in ((1, 90.0), (21, 130.0)):
        jw.joints["a"].angle = math.radians(deg)
        fresh.keyframe_insert('jointwise.joints["a"].angle', frame=f)
    for fc in ws.fcurves_of(fresh):
        for k in fc.keyframe_points:
            k.interpolation = 'LINEAR'
    # keyed joints are marked as held in the list
    log = []
    bpy.types.JOINTWISE_UL_joints.draw_item(None, bpy.context, Recorder(log), jw, jw.joints[0], 0,
                                            jw, "joint_index", 0)
    assert ("icon", "DECORATE_KEYFRAME") in log
    fresh.frame_start, fresh.frame_end = 1, 21
    assert bpy.ops.jointwise.bake() == {"FINISHED"}, jw.message  # no range: the scene's
    crank = jw.links["crank"].object
    keys = [fc for fc in ws.fcurves_of(crank) if fc.data_path == "location"]
    assert keys and [k.co[0] for k in keys[0].keyframe_points][::20] == [1.0, 21.0]
    fresh.frame_set(11)
    _check_links(fresh, _expect(path, {"a": 110.0}), tol=2e-6)


def test_dragging_a_keyed_value_says_the_animation_sets_it_back(fresh, tmp_path):
    _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    fresh.tool_settings.use_keyframe_insert_auto = False
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=1)
    jw.joints["a"].value = math.radians(100)
    assert jw.converged and "sets it back" in jw.message
    # auto-keying on: the changed keyed value is keyed at the current frame
    fresh.tool_settings.use_keyframe_insert_auto = True
    fresh.frame_set(9)
    jw.joints["a"].value = math.radians(105)
    (fc,) = ws.fcurves_of(fresh)
    assert [round(k.co[0]) for k in fc.keyframe_points] == [1, 9]
    assert fc.evaluate(9) == pytest.approx(math.radians(105), abs=1e-6)
    assert "auto-keying" in jw.message
    # not following the animation: a frame change keeps the pose on screen, so no warning
    fresh.tool_settings.use_keyframe_insert_auto = False
    jw.live = False
    jw.joints["a"].value = math.radians(102)
    assert jw.converged and "sets it back" not in jw.message, jw.message
    fresh.frame_set(5)
    assert math.degrees(jw.joints["a"].value) == pytest.approx(102.0, abs=1e-4)


def test_bake_without_a_range_uses_the_scenes(fresh, tmp_path):
    _clamp(tmp_path, drive="a")
    fresh.frame_start, fresh.frame_end = 5, 17
    assert bpy.ops.jointwise.bake(drive="a", value_from=math.radians(90),
                                  value_to=math.radians(120)) == {"FINISHED"}
    crank = fresh.jointwise.links["crank"].object
    fc = next(fc for fc in ws.fcurves_of(crank) if fc.data_path == "location")
    assert (fc.keyframe_points[0].co[0], fc.keyframe_points[-1].co[0]) == (5.0, 17.0)
    assert len(fc.keyframe_points) == 13


def test_dialogs_carry_units_and_pick_coordinates(fresh, tmp_path):
    _clamp(tmp_path, drive="a")
    for op, names in (("bake", ("value_from", "value_to")), ("trace_add", ("value_from", "value_to"))):
        props = getattr(bpy.ops.jointwise, op).get_rna_type().properties
        for n in names:
            assert props[n].subtype == 'ANGLE', (op, n)
        assert props["length_from"].subtype == 'DISTANCE'
        assert props["drive"].description
    props = bpy.ops.jointwise.coupling_add.get_rna_type().properties
    assert props["per_turn"].subtype == 'DISTANCE' and props["offset_length"].subtype == 'DISTANCE'
    assert props["offset"].subtype == 'ANGLE'
    ops = importlib.import_module(MODULE + ".operators")
    found = ops._coordinate_search(None, bpy.context, "")
    assert set(found) == {"a", "b", "c", "d"}
    assert ops._coordinate_search(None, bpy.context, "c") == ["c"]


def test_every_operator_and_field_has_a_tooltip_and_title_case_label(installed):
    ops = importlib.import_module(MODULE + ".operators")
    props = importlib.import_module(MODULE + ".properties")
    for cls in ops.CLASSES:
        assert cls.__doc__ and cls.__doc__.strip(), cls.__name__
        words = cls.bl_label.split()
        assert all(w[0].isupper() or w in ("to", "a", "of") for w in words), cls.bl_label
        ours = {n for k in cls.__mro__ if k.__module__.startswith(MODULE) for n in getattr(k, "__annotations__", {})}
        assert ours or not cls.__annotations__, cls.__name__
        mod, name = cls.bl_idname.split(".")
        for p in getattr(getattr(bpy.ops, mod), name).get_rna_type().properties:
            if p.identifier not in ours or p.is_hidden:
                continue
            assert p.description, f"{cls.bl_idname}.{p.identifier} has no tooltip"
    for cls in props.CLASSES:
        ours = set(getattr(cls, "__annotations__", {}))  # (other modules add settings of their own)
        assert len(ours) >= 3, cls.__name__
        for p in cls.bl_rna.properties:
            if p.identifier not in ours or p.is_hidden or p.type == 'COLLECTION':
                continue
            assert p.description, f"{cls.__name__}.{p.identifier} has no tooltip"


def test_button_labels_are_the_operator_labels(fresh, tmp_path):
    _clamp(tmp_path, drive="a")
    from test_panels import Recorder
    seen = []

    class Texts(Recorder):
        def _child(self, *a, **k):
            return Texts(self.log)
        row = column = box = split = _child

        def operator(self, idname, text=None, **k):
            seen.append((idname, text))
            return super().operator(idname, **k)
    for name in ("JOINTWISE_PT_mechanism", "JOINTWISE_PT_joints", "JOINTWISE_PT_bake",
                 "JOINTWISE_PT_couplings", "JOINTWISE_PT_traces"):
        getattr(bpy.types, name).draw(types.SimpleNamespace(layout=Texts([])), bpy.context)
    assert seen and all(text in (None, "") for _, text in seen), seen


def test_a_value_past_a_limit_poses_at_the_limit(fresh, tmp_path):
    path = _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    it = jw.joints["a"]
    it.use_limits = True
    it.limit_min, it.limit_max = math.radians(80), math.radians(110)
    it.value = math.radians(150)
    assert jw.converged, jw.message
    assert math.degrees(it.value) == pytest.approx(110.0, abs=1e-4)
    assert "limit" in jw.message and "110°" in jw.message and "150°" in jw.message
    _check_links(fresh, _expect(path, {"a": 110.0}))


def test_an_unreachable_value_leads_with_what_can_be_done(fresh, tmp_path):
    import jointwise
    path = _clamp(tmp_path, drive="d")
    jw = fresh.jointwise
    reach = jointwise.load(str(path))
    from jointwise.sweep import reach as reach_of
    lo, hi = reach_of(reach, "d")["intervals"][0]
    before = ws.world(jw.links["rocker"].object)
    jw.joints["d"].value = math.radians(hi + 20)
    assert not jw.converged
    msg = jw.message
    assert msg.startswith(f"d cannot reach {hi + 20:.4g}° here: reachable from"), msg
    assert f"{hi:.4g}°" in msg
    assert np.allclose(ws.world(jw.links["rocker"].object), before)  # nothing moved


def test_non_finite_value_is_refused_and_the_field_goes_back(fresh, tmp_path):
    _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    jw.joints["a"].value = math.radians(100)
    good = jw.joints["a"].value
    for bad in (float("nan"), float("inf"), -float("inf")):
        jw.joints["a"].value = bad
        assert jw.joints["a"].value == good
        assert "finite" in jw.message and not jw.converged


def test_after_a_ramp_bake_the_scene_plays_its_keys(fresh, tmp_path):
    path = _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    assert jw.live
    # an animated drive value that disagrees with the ramp
    jw.joints["a"].angle = math.radians(95)
    fresh.keyframe_insert('jointwise.joints["a"].angle', frame=1)
    assert bpy.ops.jointwise.bake(frame_start=1, frame_end=31, drive="a", value_from=math.radians(90),
                                  value_to=math.radians(150)) == {"FINISHED"}
    for f in (1, 16, 31):
        fresh.frame_set(f)
        deg = 90 + 60 * (f - 1) / 30
        _check_links(fresh, _expect(path, {"a": deg}), tol=2e-6)
        assert math.degrees(jw.joints["a"].value) == pytest.approx(deg, abs=1e-4)
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    assert "cleared" in jw.message  # the status follows: no stale "baked"
    fresh.frame_set(5)
    _check_links(fresh, _expect(path, {"a": 95.0}))  # following the animation again


def test_parent_scaled_unevenly_under_a_rotation_is_refused_by_name(fresh, tmp_path):
    _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    holder = bpy.data.objects.new("Holder", None)
    fresh.collection.objects.link(holder)
    holder.scale = (1.0, 3.0, 1.0)
    holder.rotation_euler = (0.0, 0.0, 0.0)
    coupler = jw.links["coupler"].object
    w = coupler.matrix_world.copy()
    coupler.parent = holder
    coupler.matrix_parent_inverse = Matrix.Identity(4)
    coupler.matrix_world = w
    holder.rotation_euler = (0.3, 0.2, 0.0)  # now the child is sheared
    bpy.context.view_layer.update()
    before = len(bpy.data.actions)
    with pytest.raises(RuntimeError, match="link 'coupler'.*'Holder'"):
        bpy.ops.jointwise.bake(frame_start=1, frame_end=5)
    assert len(bpy.data.actions) == before


def test_parent_scaled_to_zero_is_refused_by_name(fresh, tmp_path):
    _clamp(tmp_path, drive="a")
    jw = fresh.jointwise
    holder = bpy.data.objects.new("Flat", None)
    fresh.collection.objects.link(holder)
    coupler = jw.links["coupler"].object
    coupler.parent = holder
    holder.scale = (1.0, 0.0, 1.0)
    bpy.context.view_layer.update()
    with pytest.raises(RuntimeError, match="'Flat'") as info:
        bpy.ops.jointwise.bake(frame_start=1, frame_end=5)
    assert "unexpected" not in str(info.value) and "LinAlgError" not in str(info.value)


def test_old_files_load_with_anchors(installed, tmp_path):
    """A .blend saved before the rename (stored ``marker``, ``marker_home``, ``value``)."""
    import subprocess
    import pathlib
    root = pathlib.Path(__file__).resolve().parents[2]
    old = tmp_path / "old.blend"
    data = subprocess.run(["git", "-C", str(root), "show", "4f861ea:blend_samples/wagtail_rocker.blend"],
                          stdout=subprocess.PIPE, check=True).stdout
    old.write_bytes(data)
    bpy.ops.wm.open_mainfile(filepath=str(old))
    scene = bpy.context.scene
    jw = scene.jointwise
    for it in jw.joints:
        if it.type != "fixed":
            assert it.anchor is not None and it.anchor.get("jointwise_anchor") == it.joint, it.name
            assert "marker" not in it.keys() and "value" not in it.keys()
    assert bpy.ops.jointwise.pose() == {"FINISHED"}, jw.message
    paths = [fc.data_path for fc in ws.fcurves_of(scene)]
    assert paths and all(p.endswith(".angle") or p.endswith(".length") for p in paths), paths


def test_a_coupling_joining_two_loops_holds_as_the_core_does(fresh, tmp_path):
    """The extension asks the core's one holding rule (``Mechanism.held_coordinates``): a
    coupling makes two clamps one loop group, so setting the second rocker (passive)
    releases the first crank's drive there too, exactly as ``jointwise pose`` does.
    Reference: the core's ``Mechanism.pose`` of the same file."""
    ws.make_twin_clamp_objects(0.001)
    path = ws.twin_clamp_file(tmp_path)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = fresh.jointwise
    assert jw.joints["a1"].drive and not jw.joints["d2"].drive
    posing = importlib.import_module(MODULE + ".posing")
    sc = importlib.import_module(MODULE + ".scene")
    mech = sc.mechanism_from_scene(fresh)
    assert posing.held_names(fresh, mech, given=["d2"]) == ["d2"]  # a1 released: same group
    assert posing.held_names(fresh, mech) == ["a1"]
    jw.joints["d2"].value = math.radians(5.0)
    assert jw.converged, jw.message
    want = _expect(path, {"d2": 5.0})
    for c in ("a1", "d1", "a2", "d2"):
        assert math.degrees(jw.joints[c].value) == pytest.approx(want.joints[c], abs=1e-4), c
    _check_links(fresh, want)
    # the drive moves both clamps through the coupling, as the core poses it
    jw.joints["a1"].value = math.radians(100.0)
    assert jw.converged, jw.message
    _check_links(fresh, _expect(path, {"a1": 100.0}))


def test_mobility_is_worked_out_once_per_structure(fresh, tmp_path, monkeypatch):
    """A value change reads the mobility kept with the structure; editing a joint (its
    limits) makes a new structure, whose mobility is worked out once. Reference: Kutzbach's
    planar count for a four-bar, 3 (4 - 1) - 2 * 4 = 1 (e.g. Uicker, Pennock & Shigley,
    *Theory of Machines and Mechanisms*, sec. 1.7)."""
    _clamp(tmp_path, drive="a")
    import jointwise.solver as core_solver  # the count itself (the front keeps it per structure)
    calls = []
    real = core_solver.Solver.mobility

    def counted(self, *a, **k):
        calls.append(1)
        return real(self, *a, **k)
    monkeypatch.setattr(core_solver.Solver, "mobility", counted)
    jw = fresh.jointwise
    for deg in (95.0, 100.0, 105.0):
        jw.joints["a"].value = math.radians(deg)
        assert jw.converged, jw.message
    first = len(calls)
    assert first <= 1 and jw.mobility == 1  # at most once for the structure already built
    for deg in (110.0, 115.0, 120.0, 125.0):
        jw.joints["a"].value = math.radians(deg)
    assert len(calls) == first  # value changes: no mobility
    it = jw.joints["d"]
    it.use_limits, it.limit_min, it.limit_max = True, math.radians(-170), math.radians(170)
    jw.joints["a"].value = math.radians(120.0)
    assert jw.converged, jw.message
    assert len(calls) == first + 1 and jw.mobility == 1  # the edited structure: once
    for deg in (115.0, 110.0):
        jw.joints["a"].value = math.radians(deg)
    assert len(calls) == first + 1


def test_a_rate_measure_holds_the_lists_drives(fresh, tmp_path):
    """Two freedoms, two drives: the rate of c per a is taken with the other drive e held
    (the core's holding rule, asked with the list's Drive flags), live and in a bake.
    Reference: central differences of the core's poses with e held, h = 0.01 deg (error
    of order h^2)."""
    ws.make_five_bar_objects(0.001)
    path = ws.five_bar_file(tmp_path)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = fresh.jointwise
    assert jw.joints["a"].drive and jw.joints["e"].drive and "c_per_a" in jw.measures
    import jointwise
    mech = jointwise.load(str(path))
    h = 0.01

    def want(a_deg, e_deg):
        hi = mech.pose({"a": a_deg + h, "e": e_deg}).joints["c"]
        lo = mech.pose({"a": a_deg - h, "e": e_deg}).joints["c"]
        return (hi - lo) / (2 * h)  # deg per deg = rad per rad
    jw.joints["a"].value = math.radians(100.0)
    assert jw.converged, jw.message
    assert jw.measures["c_per_a"].value == pytest.approx(want(100.0, 90.0), abs=1e-5)
    # baked from keys of a (linear), e held by its Drive flag: the keyed rate at a sampled frame
    it = jw.joints["a"]
    for f, deg in ((1, 90.0), (11, 110.0)):
        fresh.frame_set(f)
        it.angle = math.radians(deg)
        fresh.keyframe_insert('jointwise.joints["a"].angle', frame=f)
    for kp in ws.fcurves_of(fresh)[0].keyframe_points:
        kp.interpolation = 'LINEAR'
    fresh.frame_start, fresh.frame_end = 1, 11
    assert bpy.ops.jointwise.bake() == {"FINISHED"}, jw.message
    fresh.frame_set(6)  # a = 100 deg
    assert jw.measures["c_per_a"].value == pytest.approx(want(100.0, 90.0), abs=1e-5)
    # a ramp of a is its loop's input (as --drive on the command line): e is released, and
    # the rate is the one along that motion (least norm), no longer the one with e held
    assert bpy.ops.jointwise.bake(frame_start=1, frame_end=11, drive="a", value_from=math.radians(90.0),
                                  value_to=math.radians(110.0)) == {"FINISHED"}, jw.message
    fresh.frame_set(6)
    assert abs(jw.measures["c_per_a"].value - want(100.0, 90.0)) > 1e-2


def test_a_value_change_solves_only_the_loop_it_moves(fresh, tmp_path, monkeypatch):
    """Two clamps, no coupling: two loop blocks. The next pose starts from the last one
    exactly (not from the list's 32-bit values), so a change of the first crank solves the
    first block only; the placements are the core's. Reference: the core's pose of the file."""
    ws.make_twin_clamp_objects(0.001)
    path = ws.twin_clamp_file(tmp_path, coupled=False)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = fresh.jointwise
    jw.joints["a2"].drive = True
    import jointwise.solver as core_solver
    calls = []
    real = core_solver.Solver._solve_block

    def counted(self, b, *a, **k):
        calls.append(b.index)
        return real(self, b, *a, **k)
    monkeypatch.setattr(core_solver.Solver, "_solve_block", counted)
    jw.joints["a1"].value = math.radians(95.0)
    assert jw.converged, jw.message
    for deg in (100.0, 105.0, 110.0):
        calls.clear()
        jw.joints["a1"].value = math.radians(deg)
        assert jw.converged, jw.message
        assert len(calls) == 1, calls
    _check_links(fresh, _expect(path, {"a1": 110.0, "a2": 90.0}))
