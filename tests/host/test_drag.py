"""Dragging a link object or a handle (issue 11): the mechanism follows.

Reference: the core's pose by target of the sample's own mechanism file, from the values the
scene showed, for the same target (tests/test_targets.py checks the core against closed
forms). Samples are in millimetres, 1 BU = 1 mm, so file lengths equal scene lengths."""
import math
import os

import numpy as np
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
SAMPLES = os.path.join(ROOT, "blend_samples")

#: (sample, dragged link, drive offset in file units, extra offset of the target in mm)
CASES = [
    ("wagtail_rocker", "coupler", 25.0, (0.4, -0.3, 0.5)),
    ("wagtail_rocker", "rocker", -15.0, (0.0, 0.0, 0.0)),
    ("dipper_pump", "plunger", 40.0, (0.0, 0.2, 0.0)),
    ("linnet_vise", "jaw", 900.0, (0.0, 0.0, 0.0)),
    ("heron_shaft", "output", 30.0, (0.2, 0.1, -0.1)),
    ("heron_twin_shaft", "middle", 20.0, (0.0, 0.0, 0.0)),
    ("plover_lift", "platform", 720.0, (0.3, 0.0, 0.0)),
]


def _open(name, baked=False):
    """A sample; its baked link keys cleared (they would place the links) unless ``baked``."""
    import bpy
    bpy.ops.wm.open_mainfile(filepath=os.path.join(SAMPLES, name + ".blend"))
    scene = bpy.context.scene
    assert scene.unit_settings.scale_length == pytest.approx(0.001)
    assert scene.jointwise.file_length_unit == "mm"
    if not baked:
        assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}
    return scene


def _world(obj):
    return np.array(obj.matrix_world, dtype=float)


def _home(link):
    return np.array(link.home, dtype=float).reshape(4, 4)


def _ground(scene):
    jw = scene.jointwise
    g = jw.links[jw.ground]
    if g.object is None:
        return np.eye(4)
    return _world(g.object) @ np.linalg.inv(_home(g))


def _values_file(scene, mech):
    """The scene's solved values in file units (deg, mm)."""
    out = {}
    for c in mech.coordinates:
        item = scene.jointwise.joints[c]
        v = float(item.last)
        out[c] = math.degrees(v) if mech.coordinate_kind(c) == "angle" else v
    return out


def _set_world(obj, m):
    import bpy
    from mathutils import Matrix
    obj.matrix_world = Matrix(np.asarray(m).tolist())
    bpy.context.view_layer.update()


def _check_scene_matches(scene, mech, ref, tol=2e-3):
    jw = scene.jointwise
    g = _ground(scene)
    for link in jw.links:
        if link.name == jw.ground:
            continue
        want = g @ np.asarray(ref.links[link.name]) @ _home(link)
        got = _world(link.object)
        assert np.abs(got[:3, 3] - want[:3, 3]).max() < tol, (link.name, got, want)
        assert np.abs(got[:3, :3] - want[:3, :3]).max() < 1e-5, (link.name, got, want)
    for c in mech.coordinates:
        v = float(jw.joints[c].value)
        v = math.degrees(v) if mech.coordinate_kind(c) == "angle" else v
        assert v == pytest.approx(ref.joints[c], abs=1e-3), c


@pytest.mark.parametrize("name, link, delta, off", CASES)
def test_dragging_a_link_object_matches_the_core(installed, name, link, delta, off):
    import jointwise
    scene = _open(name)
    jw = scene.jointwise
    mech = jointwise.load(os.path.join(SAMPLES, name + ".toml"))
    start = _values_file(scene, mech)
    drive = mech.driven[0]
    aim = mech.pose({drive: start[drive] + delta}, start=start)
    d = np.array(aim.links[link])
    d[:3, 3] += off
    obj = jw.links[link].object
    _set_world(obj, _ground(scene) @ d @ _home(jw.links[link]))
    ref = mech.pose(start=start, targets={link: d})
    assert jw.converged, jw.message
    assert jw.message.startswith(f"dragged {link}"), jw.message
    _check_scene_matches(scene, mech, ref)
    if not any(off):  # on the mechanism's own path: reached, the drive moved by delta
        assert ref.reached
        assert ref.joints[drive] == pytest.approx(start[drive] + delta, abs=1e-4)


def test_dragging_twice_follows_on(installed):
    import jointwise
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    mech = jointwise.load(os.path.join(SAMPLES, "wagtail_rocker.toml"))
    obj = jw.links["coupler"].object
    for k in range(1, 6):
        start = _values_file(scene, mech)
        d = np.array(mech.pose({"crank_pin": 60.0 + 12.0 * k}, start=start).links["coupler"])
        _set_world(obj, _ground(scene) @ d @ _home(jw.links["coupler"]))
        ref = mech.pose(start=start, targets={"coupler": d})
        _check_scene_matches(scene, mech, ref)
    assert math.degrees(jw.joints["crank_pin"].value) == pytest.approx(120.0, abs=1e-3)


def test_the_moved_link_snaps_onto_the_nearest_placement(installed):
    scene = _open("linnet_vise")
    jw = scene.jointwise
    jaw = jw.links["jaw"].object
    before = _world(jaw)
    aim = before.copy()
    aim[:3, 3] += (5.0, 3.0, 0.0)   # 5 mm along the screw, 3 mm across: the slide allows only x
    _set_world(jaw, aim)
    got = _world(jaw)
    assert got[0, 3] == pytest.approx(before[0, 3] + 5.0, abs=1e-3)
    assert got[1, 3] == pytest.approx(before[1, 3], abs=1e-4)
    # Tr16x4 right hand: 5 mm of jaw travel = 1.25 turns the other way (see tests/test_targets.py)
    assert math.degrees(jw.joints["screw_bearing"].value) == pytest.approx(-450.0, abs=1e-2)
    assert "3 mm from where it was put" in jw.message


def test_ground_cannot_be_dragged(installed):
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    before = {it.name: float(it.value) for it in jw.joints}
    frame = jw.links[jw.ground].object
    m = _world(frame)
    m[:3, 3] += (10.0, 0.0, 0.0)
    _set_world(frame, m)
    assert {it.name: float(it.value) for it in jw.joints} == before
    assert not jw.message.startswith("dragged")


def test_dragging_poses_whether_following_the_animation_or_not(installed):
    # like a changed value, a drag poses at once; "live" only says whether frame changes
    # pose from the animation
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    jw.live = False
    before = float(jw.joints["crank_pin"].value)
    obj = jw.links["coupler"].object
    m = _world(obj)
    m[:3, 3] += (2.0, 0.0, 0.0)
    _set_world(obj, m)
    assert float(jw.joints["crank_pin"].value) != before
    assert jw.message.startswith("dragged coupler"), jw.message


def test_auto_keying_keys_the_held_values(installed):
    import bpy
    import jointwise
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    scene.frame_set(30)
    scene.tool_settings.use_keyframe_insert_auto = True
    mech = jointwise.load(os.path.join(SAMPLES, "wagtail_rocker.toml"))
    start = _values_file(scene, mech)
    d = np.array(mech.pose({"crank_pin": start["crank_pin"] + 20.0}, start=start).links["rocker"])
    _set_world(jw.links["rocker"].object, _ground(scene) @ d @ _home(jw.links["rocker"]))
    scene.tool_settings.use_keyframe_insert_auto = False
    from bl_ext.user_default.jointwise import animation
    curves = animation.coordinate_fcurves(scene)
    assert "crank_pin" in curves, "no F-curve for the drive"
    dragged = float(jw.joints["crank_pin"].last)
    assert math.degrees(dragged) == pytest.approx(start["crank_pin"] + 20.0, abs=1e-3)
    assert curves["crank_pin"][0].evaluate(30) == pytest.approx(dragged, abs=1e-5)
    # the key holds the drag over a frame change
    scene.frame_set(31)
    scene.frame_set(30)
    assert float(jw.joints["crank_pin"].value) == pytest.approx(dragged, abs=1e-5)
    assert bpy.context.scene is scene


def _handle_to(scene, mech, handle, link, at, crank, start):
    """Move ``handle`` to where point ``at`` of ``link`` is at crank_pin = ``crank`` (deg):
    (that point in ground coordinates, the handle's new world matrix)."""
    aim = mech.pose({"crank_pin": crank}, start=start).links[link]
    p = (aim @ np.append(at, 1.0))[:3]
    m = _world(handle)
    m[:3, 3] = (_ground(scene) @ np.append(p, 1.0))[:3]
    _set_world(handle, m)
    return p, m


def test_handle_drags_a_point_measure(installed):
    import bpy
    import jointwise
    scene = _open("wagtail_rocker")
    jw = scene.jointwise
    mech = jointwise.load(os.path.join(SAMPLES, "wagtail_rocker.toml"))
    at = np.array(mech.measures["sign_hook"].a[1])
    assert bpy.ops.jointwise.handle_add(measure="sign_hook") == {"FINISHED"}
    handle = bpy.data.objects["handle sign_hook"]
    start = _values_file(scene, mech)
    g = _ground(scene)
    coupler_now = np.linalg.inv(g) @ _world(jw.links["coupler"].object) @ np.linalg.inv(_home(jw.links["coupler"]))
    assert np.allclose(_world(handle)[:3, 3], (g @ coupler_now @ np.append(at, 1))[:3], atol=1e-3)
    # move the handle to where the point is at crank 95 deg: the crank comes there
    p, m = _handle_to(scene, mech, handle, "coupler", at, 95.0, start)
    ref = mech.pose(start=start, targets={"sign_hook": p})
    assert ref.reached
    _check_scene_matches(scene, mech, ref)
    assert math.degrees(jw.joints["crank_pin"].value) == pytest.approx(95.0, abs=1e-3)
    assert np.allclose(_world(handle)[:3, 3], m[:3, 3], atol=2e-3)   # on the point
    # off the curve: the handle snaps onto the nearest point of it
    m2 = m.copy()
    m2[:3, 3] += (0.0, 0.0, 4.0)
    start = _values_file(scene, mech)
    _set_world(handle, m2)
    ref = mech.pose(start=start, targets={"sign_hook": (np.linalg.inv(g) @ m2[:, 3])[:3]})
    assert not ref.reached and ref.target_error["sign_hook"] == pytest.approx(4.0, abs=1e-3)
    _check_scene_matches(scene, mech, ref)
    assert np.allclose(_world(handle)[:3, 3], m[:3, 3], atol=2e-3)


@pytest.mark.parametrize("measure, why", [
    ("sign_hok", "no point measure named 'sign_hok'"),
    ("transmission", "'transmission' is an angle measure, not a point measure"),
])
def test_handle_for_an_unknown_measure_is_refused(installed, measure, why):
    import bpy
    scene = _open("wagtail_rocker")
    n = len(bpy.data.objects)
    with pytest.raises(RuntimeError, match=why):
        bpy.ops.jointwise.handle_add(measure=measure)
    assert len(bpy.data.objects) == n
    assert scene.jointwise.joints


def _with_handle(measure, before=None):
    """wagtail_rocker with a handle on ``measure`` (``before(scene, mech)`` runs first):
    (scene, mech, handle)."""
    import bpy
    import jointwise
    scene = _open("wagtail_rocker")
    mech = jointwise.load(os.path.join(SAMPLES, "wagtail_rocker.toml"))
    if before is not None:
        before(scene, mech)
    assert bpy.ops.jointwise.handle_add(measure=measure) == {"FINISHED"}
    return scene, mech, bpy.data.objects[f"handle {measure}"]


def test_handle_follows_a_value_pose(installed):
    scene, mech, handle = _with_handle("sign_hook")
    jw = scene.jointwise
    jw.joints["crank_pin"].value = math.radians(130.0)
    want = mech.pose({"crank_pin": 130.0}).links["coupler"] @ np.append(mech.measures["sign_hook"].a[1], 1.0)
    assert np.allclose(_world(handle)[:3, 3], (_ground(scene) @ want)[:3], atol=2e-3)
    # the value pose moved the handle: that is no drag
    assert math.degrees(jw.joints["crank_pin"].value) == pytest.approx(130.0, abs=1e-4)


def test_baked_links_are_not_dragged(installed):
    # the baked keys place the links on every frame: moving one drags nothing
    scene = _open("wagtail_rocker", baked=True)
    jw = scene.jointwise
    before = {it.name: float(it.value) for it in jw.joints}
    obj = jw.links["coupler"].object
    m = _world(obj)
    m[:3, 3] += (2.0, 0.0, 0.0)
    _set_world(obj, m)
    assert {it.name: float(it.value) for it in jw.joints} == before
    assert not jw.message.startswith("dragged")


def _add_point_measure(scene, name, link, at):
    """A point measure added to the scene's Measures list (as the panel's Add Measure does)."""
    item = scene.jointwise.measures.add()
    item.name = name
    item.kind = 'POINT'
    item.link_a = link
    item.at_a = [float(v) for v in at]
    return item


def test_handle_follows_a_measure_of_the_list_and_drags_it(installed):
    # a point measure the file does not have, added to scene.jointwise.measures (the
    # interface of issue 10): the handle sits at its location and dragging it solves for
    # that measure's own definition; reference: the core's pose by target for the same
    # point on the file's mechanism
    from jointwise.mechanism import Measure
    at = np.array([30.0, 40.0, 0.0])  # on the rocker at home, scene units = mm

    def add(scene, mech):
        _add_point_measure(scene, "rocker_tip", "rocker", at)
        mech.measures["rocker_tip"] = Measure("rocker_tip", "point", a=("rocker", tuple(at)))
    scene, mech, handle = _with_handle("rocker_tip", add)
    jw = scene.jointwise
    jw.joints["crank_pin"].value = jw.joints["crank_pin"].value  # pose: the list's location is fresh
    assert np.allclose(_world(handle)[:3, 3], list(jw.measures["rocker_tip"].location), atol=1e-3)
    start = _values_file(scene, mech)
    p, m = _handle_to(scene, mech, handle, "rocker", at, start["crank_pin"] + 20.0, start)
    ref = mech.pose(start=start, targets={"rocker_tip": p})
    assert ref.reached
    assert jw.message.startswith("dragged rocker_tip"), jw.message
    _check_scene_matches(scene, mech, ref)
    assert math.degrees(jw.joints["crank_pin"].value) == pytest.approx(start["crank_pin"] + 20.0, abs=1e-3)
    # handle, measure location and the point all agree after the drag
    assert np.allclose(list(jw.measures["rocker_tip"].location), m[:3, 3], atol=2e-3)
    assert np.allclose(_world(handle)[:3, 3], m[:3, 3], atol=2e-3)


def test_handle_uses_the_lists_definition_when_it_changes(installed):
    # the measure's point edited in the list: the handle goes to the new point on the next
    # pose and a drag solves for the new point
    from jointwise.mechanism import Measure
    scene, mech, handle = _with_handle("sign_hook")
    jw = scene.jointwise
    new_at = np.array(mech.measures["sign_hook"].a[1]) + (10.0, -5.0, 0.0)
    jw.measures["sign_hook"].at_a = new_at.tolist()
    jw.joints["crank_pin"].value = math.radians(100.0)
    assert np.allclose(_world(handle)[:3, 3], list(jw.measures["sign_hook"].location), atol=1e-3)
    mech.measures["sign_hook"] = Measure("sign_hook", "point", a=("coupler", tuple(new_at)))
    start = _values_file(scene, mech)
    p, _ = _handle_to(scene, mech, handle, "coupler", new_at, 115.0, start)
    assert math.degrees(jw.joints["crank_pin"].value) == pytest.approx(115.0, abs=1e-3)
    _check_scene_matches(scene, mech, mech.pose(start=start, targets={"sign_hook": p}))


def test_a_handle_whose_measure_left_the_list_drags_nothing(installed):
    # the measure removed from the Measures list: moving its handle poses nothing, the
    # handle goes back and the status says why
    scene, mech, handle = _with_handle("sign_hook")
    jw = scene.jointwise
    before = {it.name: float(it.value) for it in jw.joints}
    was = _world(handle)
    jw.measures.remove(jw.measures.find("sign_hook"))
    m = was.copy()
    m[:3, 3] += (5.0, 0.0, 0.0)
    _set_world(handle, m)
    assert {it.name: float(it.value) for it in jw.joints} == before
    assert not jw.converged
    assert "no point measure named 'sign_hook' in the Measures list" in jw.message, jw.message
    assert np.allclose(_world(handle), was, atol=1e-4)
