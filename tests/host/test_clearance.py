"""Clearance along the motion (jointwise.clearance) in real Blender, against geometry
worked out by hand: boxes on a slide, an icosphere over a plate, a sample four-bar with a
post placed on its coupler curve (compared with the core's own poses)."""
from __future__ import annotations

import csv
import importlib
import math
import pathlib

import bpy
import numpy as np
import pytest

import workshop as ws

MODULE = "bl_ext.user_default.jointwise"
ROOT = pathlib.Path(__file__).resolve().parents[2]


def ext(name):
    return importlib.import_module(f"{MODULE}.{name}")


# The Fennwick Row slide bench: unit cube "Left" fixed at the origin (its own link, held
# to the world by a fixed joint), unit cube "Right" on a slide along X with its centre at
# x = 3 at home, so the facing sides are 2 apart. Right is not jointed to Left directly.
# The slide value is keyed 0 -> -3 over frames 1..11 (linear): 0.3 per frame, so by hand
#   gap(f) = 2 - 0.3 (f - 1):  gap(7) = 0.2, gap(8) = -0.1  -> first contact at frame 8,
# overlapping at 8..10 (the checks stop at 10: at 11 the two cubes coincide exactly).
BENCH = """format = 1
[mechanism]
name = "Fennwick Row slide bench"
length_unit = "m"
angle_unit = "deg"
ground = "world"

[links.world]
[links.stand]
object = "Left"
[links.carriage]
object = "Right"
{links}
[joints.hold]
type = "fixed"
parent = "world"
child = "stand"
point = [0, 0, 0]
axis = [0, 0, 1]

[joints.s]
type = "prismatic"
parent = "world"
child = "carriage"
point = [3, 0, 0]
axis = [1, 0, 0]
drive = true
{joints}
"""


def bench(tmp_path, links="", joints="", **kw):
    objs = {"Left": ws.cube("Left", (0, 0, 0)), "Right": ws.cube("Right", (3, 0, 0))}
    for name, make in kw.items():
        objs[name] = make()
    path = pathlib.Path(tmp_path) / "bench.toml"
    path.write_text(BENCH.format(links=links, joints=joints))
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return objs


def key_linear(scene, name, frames_values):
    jw = scene.jointwise
    for f, v in frames_values:
        jw.joints[name].value = v
        kind = jw.joints[name].kind  # the animatable field: angle or length
        scene.keyframe_insert(f'jointwise.joints["{name}"].{kind}', frame=f)
    for fc in ext("animation").scene_fcurves(scene):
        for k in fc.keyframe_points:
            k.interpolation = 'LINEAR'
        fc.update()


def gap_by_hand(f):
    return 2.0 - 0.3 * (f - 1)


def pair(jw, a, b):
    for it in jw.clearance:
        if {it.object_a, it.object_b} == {a, b}:
            return it
    raise AssertionError(f"no result for {a} / {b}: {[it.name for it in jw.clearance]}")


def test_cubes_first_contact_at_the_hand_computed_frame(fresh, tmp_path):
    bench(tmp_path)
    key_linear(fresh, "s", [(1, 0.0), (11, -3.0)])
    jw = fresh.jointwise
    before = tuple(bpy.data.objects["Right"].location)  # (a typed value poses at once)
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=10) == {"FINISHED"}
    assert len(jw.clearance) == 1
    it = pair(jw, "Left", "Right")
    assert it.contact and it.flagged
    assert it.contact_frames == "8-10"
    assert it.min_frame == 8 and it.min_gap == 0.0
    # the points lie where the two overlap at frame 8: Left spans x in [-0.5, 0.5],
    # Right in [0.4, 1.4]
    for p in (it.point_a, it.point_b):
        assert -0.5 - 1e-6 <= p[0] <= 1.4 + 1e-6 and max(abs(p[1]), abs(p[2])) <= 0.5 + 1e-6
    # a timeline marker at the first frame of the contact interval
    marks = [(m.name, m.frame) for m in fresh.timeline_markers]
    assert marks == [("contact Left / Right", 8)]
    # nothing was keyed on the link objects, nothing moved
    assert ws.fcurves_of(bpy.data.objects["Right"]) == []
    assert tuple(bpy.data.objects["Right"].location) == pytest.approx(before, abs=1e-6)


@pytest.mark.parametrize("last", [1, 3, 5, 7])
def test_cubes_gap_before_contact_to_1e_6(fresh, tmp_path, last):
    bench(tmp_path)
    key_linear(fresh, "s", [(1, 0.0), (11, -3.0)])
    jw = fresh.jointwise
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=last) == {"FINISHED"}
    it = pair(jw, "Left", "Right")
    assert not it.contact and it.contact_frames == ""
    assert it.min_frame == last  # they only come closer
    assert abs(it.min_gap - gap_by_hand(last)) < 1e-6
    # the nearest points: on Left's face x = 0.5, on Right's face x = 0.5 + gap
    assert it.point_a[0] == pytest.approx(0.5, abs=1e-6)
    assert it.point_b[0] == pytest.approx(0.5 + gap_by_hand(last), abs=1e-6)
    assert not it.flagged
    assert len(fresh.timeline_markers) == 0


def test_gap_flags_pairs_closer_than_it_and_ramp(fresh, tmp_path):
    bench(tmp_path)
    jw = fresh.jointwise
    # a ramp of the slide, 0 -> -1.8 over frames 1..7: the same motion as the keys above
    r = bpy.ops.jointwise.clearance(frame_start=1, frame_end=7, drive="s", value_from=0.0,
                                    value_to=-1.8, gap=0.25)
    assert r == {"FINISHED"}
    it = pair(jw, "Left", "Right")
    assert abs(it.min_gap - 0.2) < 1e-6 and it.min_frame == 7
    assert it.flagged and not it.contact
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=7, drive="s", value_from=0.0,
                                       value_to=-1.8, gap=0.15) == {"FINISHED"}
    assert not pair(jw, "Left", "Right").flagged


def test_scene_range_when_none_given(fresh, tmp_path):
    bench(tmp_path)
    key_linear(fresh, "s", [(1, 0.0), (11, -3.0)])
    fresh.frame_start, fresh.frame_end = 2, 6
    assert bpy.ops.jointwise.clearance() == {"FINISHED"}
    it = pair(fresh.jointwise, "Left", "Right")
    assert it.min_frame == 6 and abs(it.min_gap - gap_by_hand(6)) < 1e-6


def _pin():
    # a pin through Right (always inside it): jointed directly to the carriage
    return ws.cube("Pin", (3, 0, 0), (0.3, 0.3, 2.0))


def _handle():
    empty = bpy.data.objects.new("Handle", None)
    bpy.context.scene.collection.objects.link(empty)
    return empty


PIN_LINKS = """[links.pin]
object = "Pin"
[links.handle]
object = "Handle"
"""
PIN_JOINTS = """[joints.pin_turn]
type = "revolute"
parent = "carriage"
child = "pin"
point = [3, 0, 0]
axis = [0, 0, 1]
[joints.handle_turn]
type = "revolute"
parent = "carriage"
child = "handle"
point = [3, 0, 0]
axis = [1, 0, 0]
"""


def test_jointed_pairs_skipped_and_link_without_mesh_noted(fresh, tmp_path):
    bench(tmp_path, PIN_LINKS, PIN_JOINTS, Pin=_pin, Handle=_handle)
    key_linear(fresh, "s", [(1, 0.0), (11, -3.0)])
    jw = fresh.jointwise
    before = tuple(bpy.data.objects["Right"].location)  # (a typed value poses at once)
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=10) == {"FINISHED"}
    names = {frozenset((it.object_a, it.object_b)) for it in jw.clearance}
    # Pin / Right share joint pin_turn: skipped; the empty has no mesh: skipped with a note
    assert names == {frozenset(("Left", "Right")), frozenset(("Left", "Pin"))}
    assert "handle" in jw.clearance_note and "no mesh" in jw.clearance_note
    # the pin (x in [2.85, 3.15] at home, moving 0.3 per frame) reaches Left's side x = 0.5
    # when 2.85 - 0.3 (f - 1) < 0.5: f > 8.83 -> frames 9-10
    assert pair(jw, "Left", "Pin").contact_frames == "9-10"
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=10, include_jointed=True) == {"FINISHED"}
    it = pair(jw, "Pin", "Right")
    assert it.contact_frames == "1-10" and it.min_frame == 1
    # worst first: touching pairs first, earliest contact first
    assert [(i.contact, i.min_frame) for i in jw.clearance] == [(True, 1), (True, 8), (True, 9)]


def test_part_wholly_inside_another_counts_as_touching(fresh, tmp_path):
    # the pin fully inside Right (no faces cross): the inside test must catch it
    def small_pin():
        return ws.cube("Pin", (3, 0, 0), (0.2, 0.2, 0.2))
    bench(tmp_path, PIN_LINKS.split("[links.handle]")[0], PIN_JOINTS.split("[joints.handle_turn]")[0],
          Pin=small_pin)
    jw = fresh.jointwise
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=2, drive="s", value_from=0,
                                       value_to=0.1, include_jointed=True) == {"FINISHED"}
    assert pair(jw, "Pin", "Right").contact_frames == "1-2"


def test_csv_written_atomically_and_failures_leave_results(fresh, tmp_path):
    bench(tmp_path)
    key_linear(fresh, "s", [(1, 0.0), (11, -3.0)])
    jw = fresh.jointwise
    out = tmp_path / "gaps.csv"
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=10, filepath=str(out)) == {"FINISHED"}
    rows = list(csv.DictReader(out.open()))
    assert len(rows) == 1
    assert rows[0]["object_a"] == "Left" and rows[0]["contact_frames"] == "8-10"
    assert float(rows[0]["min_gap"]) == 0.0 and int(rows[0]["min_frame"]) == 8
    before = [(it.name, it.min_gap, it.contact_frames) for it in jw.clearance]
    markers = [(m.name, m.frame) for m in fresh.timeline_markers]
    # an unknown ramp coordinate, an empty range, a folder that does not exist: refused,
    # nothing changed, no file left behind
    bad = tmp_path / "no such folder" / "gaps.csv"
    for kw in (dict(drive="nope", value_to=1.0), dict(frame_start=5, frame_end=4),
               dict(frame_start=1, frame_end=7, filepath=str(bad))):
        with pytest.raises(RuntimeError):
            bpy.ops.jointwise.clearance(**kw)
        assert [(it.name, it.min_gap, it.contact_frames) for it in jw.clearance] == before
        assert [(m.name, m.frame) for m in fresh.timeline_markers] == markers
    assert not bad.parent.exists()
    assert sorted(p.name for p in tmp_path.iterdir() if p.suffix in (".csv", ".tmp")) == ["gaps.csv"]


def test_cancelled_run_writes_nothing(fresh, tmp_path):
    bench(tmp_path, PIN_LINKS.split("[links.handle]")[0], PIN_JOINTS.split("[joints.handle_turn]")[0],
          Pin=_pin)
    key_linear(fresh, "s", [(1, 0.0), (11, -3.0)])
    jw = fresh.jointwise
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=5) == {"FINISHED"}
    before = [(it.name, it.min_gap, it.min_frame, it.contact_frames) for it in jw.clearance]
    cl = ext("clearance")
    # the same steps the modal operator runs, stopped after the first pair (as Esc does)
    check = cl.Check(fresh, np.arange(1, 11))
    calls = []

    def stop():
        calls.append(1)
        return len(calls) >= 2
    with pytest.raises(cl.Cancelled):
        check.run(stop=stop)
    assert 0 < len(check.results) < len(check.pairs)
    assert [(it.name, it.min_gap, it.min_frame, it.contact_frames) for it in jw.clearance] == before
    assert len(fresh.timeline_markers) == 0
    # a frame that cannot be solved fails the whole run the same way
    jw.joints["s"].use_limits = True
    jw.joints["s"].limit_min, jw.joints["s"].limit_max = -1.0, 1.0
    with pytest.raises(RuntimeError, match="frame"):
        bpy.ops.jointwise.clearance(frame_start=1, frame_end=10)
    assert [(it.name, it.min_gap, it.min_frame, it.contact_frames) for it in jw.clearance] == before


def test_edge_to_edge_minimum_found(fresh, tmp_path):
    # Left turned 45 deg about Z: its +X extreme is a vertical edge at x = sqrt(2)/2.
    # Right turned 45 deg about Y: its -X extreme is an edge along Y at x = c - sqrt(2)/2.
    # The two edges cross at right angles, so by hand the smallest distance is
    # c - sqrt(2), between the edges' middles, while every vertex is much farther
    # (vertex-to-face alone would report about 0.42 for c - sqrt(2) = 0.1).
    c = math.sqrt(2) + 0.1
    left = ws.cube("Left", (0, 0, 0), turn=math.pi / 4)
    right = ws.cube("Right", (3, 0, 0))
    right.rotation_euler = (0, math.pi / 4, 0)
    bpy.context.view_layer.update()
    path = tmp_path / "bench.toml"
    path.write_text(BENCH.format(links="", joints=""))
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = fresh.jointwise
    # slide value 0 -> c - 3 - 0.2 over frames 1..5, then a check over 1..4: at frame 4
    # Right's centre is at 3 + 3/4 (c - 3.2) ... by hand: x(f) = 3 + (f - 1) (c - 3.2) / 4
    x = [3 + (f - 1) * (c - 3.2) / 4 for f in range(1, 6)]
    r = bpy.ops.jointwise.clearance(frame_start=1, frame_end=5, drive="s", value_from=0.0,
                                    value_to=c - 3.2)
    assert r == {"FINISHED"}
    it = pair(jw, "Left", "Right")
    # frame 5: centre at c - 0.2, so the edges would overlap by 0.1: contact at 5 only
    assert it.contact_frames == "5"
    r = bpy.ops.jointwise.clearance(frame_start=1, frame_end=4, drive="s", value_from=0.0,
                                    value_to=(c - 3.2) * 3 / 4)
    it = pair(jw, "Left", "Right")
    assert it.min_frame == 4
    want = x[3] - math.sqrt(2)
    assert abs(it.min_gap - want) < 1e-6
    np.testing.assert_allclose(it.point_a, (math.sqrt(2) / 2, 0, 0), atol=1e-6)
    np.testing.assert_allclose(it.point_b, (x[3] - math.sqrt(2) / 2, 0, 0), atol=1e-6)


def icosphere(name, radius, subdivisions, centre):
    import bmesh
    bm = bmesh.new()
    bmesh.ops.create_icosphere(bm, subdivisions=subdivisions, radius=radius)
    mesh = bpy.data.meshes.new(name)
    bm.to_mesh(mesh)
    bm.free()
    obj = bpy.data.objects.new(name, mesh)
    bpy.context.scene.collection.objects.link(obj)
    obj.location = centre
    bpy.context.view_layer.update()
    return obj


PLATE = """format = 1
[mechanism]
name = "Fennwick Row plate bench"
length_unit = "m"
angle_unit = "deg"
ground = "world"

[links.world]
[links.plate]
object = "Plate"
[links.ball]
object = "Ball"

[joints.hold]
type = "fixed"
parent = "world"
child = "plate"
point = [0, 0, 0]
axis = [0, 0, 1]

[joints.s]
type = "prismatic"
parent = "world"
child = "ball"
point = [-4, 0, {h}]
axis = [1, 0, 0]
drive = true
"""


@pytest.mark.parametrize("subdivisions", [1, 2, 3])
def test_icosphere_passing_a_plate(fresh, tmp_path, subdivisions):
    # Plate: 4 x 4, 0.1 thick, top face at z = 0. Ball: icosphere of radius R whose
    # centre passes at height h over the plate, from x = -4 to x = 4 (frames 1..33).
    # A sphere would clear the plate by h - R; the icosphere lies between its inner
    # radius r_in (the nearest face plane) and R, so the smallest gap is within
    # R - r_in of h - R (the faceting error). Exactly, for this convex mesh over the top
    # face it is h minus the mesh's reach straight down (its lowest vertex).
    R, h = 0.5, 0.8
    ws.cube("Plate", (0, 0, -0.05), (4, 4, 0.1))
    ball = icosphere("Ball", R, subdivisions, (-4, 0, h))
    path = tmp_path / "plate.toml"
    path.write_text(PLATE.format(h=h))
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=33, drive="s", value_from=0.0,
                                       value_to=8.0) == {"FINISHED"}
    it = pair(fresh.jointwise, "Ball", "Plate")
    v = np.array([tuple(p.co) for p in ball.data.vertices], dtype=float)
    tris = [tuple(p.vertices) for p in ball.data.polygons]
    normals = np.cross(v[[t[1] for t in tris]] - v[[t[0] for t in tris]],
                       v[[t[2] for t in tris]] - v[[t[0] for t in tris]])
    normals /= np.linalg.norm(normals, axis=1)[:, None]
    r_in = float(np.abs(np.einsum("ij,ij->i", normals, v[[t[0] for t in tris]])).min())
    if subdivisions == 1:
        # a regular icosahedron: inradius / circumradius = sqrt(3) (3 + sqrt 5) / (3 sqrt(10 + 2 sqrt 5))
        # (in- and circumradius of the regular icosahedron, a (3 + sqrt 5) sqrt(3) / 12 and
        # a sqrt(10 + 2 sqrt 5) / 4; standard solid geometry)
        ratio = math.sqrt(3) * (3 + math.sqrt(5)) / (3 * math.sqrt(10 + 2 * math.sqrt(5)))
        # Blender builds the icosahedron from a table of six-digit coordinates: 1e-4
        assert r_in / R == pytest.approx(ratio, rel=1e-4)
    assert not it.contact
    assert abs(it.min_gap - (h - R)) <= (R - r_in) + 1e-6
    assert abs(it.min_gap - (h + v[:, 2].min())) < 1e-6
    # the ball is over the plate then: its centre's x within the plate less its radius
    x_centre = -4 + 8 * (it.min_frame - 1) / 32
    assert abs(x_centre) <= 2 - R + 1e-9
    on_plate = it.point_a if it.object_a == "Plate" else it.point_b
    assert on_plate[2] == pytest.approx(0.0, abs=1e-6)


def _post(name, centre_xy, radius, z0, z1, n=64):
    """A capped upright prism of ``n`` sides, vertices on the circle of ``radius``."""
    t = np.linspace(0, 2 * math.pi, n, endpoint=False)
    ring = [(radius * math.cos(a), radius * math.sin(a)) for a in t]
    verts = [(x, y, z0) for x, y in ring] + [(x, y, z1) for x, y in ring]
    faces = [(i, (i + 1) % n, n + (i + 1) % n, n + i) for i in range(n)]
    faces += [tuple(reversed(range(n))), tuple(range(n, 2 * n))]
    mesh = bpy.data.meshes.new(name)
    mesh.from_pydata(verts, [], faces)
    obj = bpy.data.objects.new(name, mesh)
    bpy.context.scene.collection.objects.link(obj)
    obj.location = (centre_xy[0], centre_xy[1], 0.0)
    bpy.context.view_layer.update()
    return obj


def test_sample_post_on_the_coupler_curve(installed, tmp_path):
    """Wagtail rocker sample: a post placed on the path of the coupler point (sign_hook)
    between two frames. The coupler carries an upright pin of radius 1.4 mm (24 sides)
    at that point (blend_samples/build.py); the post has radius 2 mm (64 sides) and
    stands only above the coupler's bars, so only the pin can reach it. The pin and the
    post touch exactly at the frames where the point's distance to the post's axis,
    from the core's poses of the sample's keyed crank values, is below the reach
    1.4 + 2 mm (less the sides' faceting, a band no frame falls in: checked)."""
    import jointwise
    r = bpy.ops.wm.open_mainfile(filepath=str(ROOT / "blend_samples" / "wagtail_rocker.blend"))
    assert r == {"FINISHED"}
    import addon_utils
    if not addon_utils.check(MODULE)[1]:
        bpy.ops.preferences.addon_enable(module=MODULE)
    scene = bpy.context.scene
    jw = scene.jointwise
    mech = jointwise.load(ROOT / "blend_samples" / "wagtail_rocker.toml")
    hook = np.append(np.asarray(mech.measures["sign_hook"].a[1], float), 1.0)
    # the ground object sits at its home (so core millimetres are scene units here)
    sc = ext("scene")
    np.testing.assert_allclose(sc.ground_displacement(scene), np.eye(4), atol=1e-6)
    assert scene.unit_settings.scale_length == pytest.approx(0.001)
    # crank values per frame as the scene animates them; hook path from the core
    curves = ext("animation").coordinate_fcurves(scene)
    fc = curves["crank_pin"][0]
    frames = np.arange(scene.frame_start, scene.frame_end + 1)
    deg = [math.degrees(fc.evaluate(f)) for f in frames]
    path, prev = [], None
    for a in deg:
        prev = mech.pose({"crank_pin": a}, start=prev)
        path.append((prev.links["coupler"] @ hook)[:2])
    path = np.array(path)
    # the post: on the curve halfway between frames 37 and 38 (by the crank angle)
    mid = mech.pose({"crank_pin": 0.5 * (deg[36] + deg[37])}, start=None).links["coupler"] @ hook
    post = _post("Post", mid[:2], 2.0, 7.0, 12.0)
    for o in scene.objects:
        o.select_set(False)
    post.select_set(True)
    bpy.context.view_layer.objects.active = post
    assert bpy.ops.jointwise.joint_add(name="post_hold", type='fixed') == {"FINISHED"}
    reach = 1.4 + 2.0
    inner = 1.4 * math.cos(math.pi / 24) + 2.0 * math.cos(math.pi / 64)
    d = np.linalg.norm(path - mid[:2], axis=1)
    assert not np.any((d > inner - 1e-6) & (d < reach + 1e-6)), "a frame in the faceting band"
    want = [int(f) for f in frames[d < reach]]
    assert want, "the post must be reached"
    r = bpy.ops.jointwise.clearance()
    assert r == {"FINISHED"}
    px = importlib.import_module(f"{MODULE}.proximity")
    it = pair(jw, "rocker_coupler", "Post")
    assert it.contact
    assert px.frames_from_text(it.contact_frames) == want
    assert any(m.frame == want[0] and "Post" in m.name for m in scene.timeline_markers)
    # the post is fixed to the frame: that pair is jointed and skipped
    assert all({i.object_a, i.object_b} != {"rocker_frame", "Post"} for i in jw.clearance)
    # the sample's own parts: the four-bar's links touch only where they are jointed
    for i in jw.clearance:
        if "Post" not in (i.object_a, i.object_b):
            assert not i.contact, i.name


def test_panel_lists_pairs_and_a_click_goes_to_the_pair(fresh, tmp_path):
    import types
    from test_panels import Recorder
    bench(tmp_path, PIN_LINKS.split("[links.handle]")[0], PIN_JOINTS.split("[joints.handle_turn]")[0],
          Pin=_pin)
    key_linear(fresh, "s", [(1, 0.0), (11, -3.0)])
    panel = bpy.types.JOINTWISE_PT_clearance
    log = []
    panel.draw(types.SimpleNamespace(layout=Recorder(log)), bpy.context)
    assert ("label", "No results yet") in log and ("operator", "jointwise.clearance") in log
    fresh.unit_settings.system = 'METRIC'
    fresh.unit_settings.length_unit = 'MILLIMETERS'
    assert bpy.ops.jointwise.clearance(frame_start=1, frame_end=7) == {"FINISHED"}
    jw = fresh.jointwise
    log = []
    panel.draw(types.SimpleNamespace(layout=Recorder(log)), bpy.context)
    labels = [text for kind, text in log if kind == "label"]
    # worst first, in display units: Left / Right come within 0.2 m = 200 mm at frame 7
    assert labels[0].startswith("Left / Right: 200") and "mm" in labels[0] and labels[0].endswith("frame 7")
    assert ("list", "JOINTWISE_UL_clearance") in log
    # a click on the row: the frame of the smallest gap, the two objects selected
    fresh.frame_set(1)
    jw.clearance_index = 0
    assert fresh.frame_current == 7
    assert {o.name for o in bpy.context.selected_objects} == {"Left", "Right"}
    assert bpy.context.view_layer.objects.active.name == jw.clearance[0].object_a
    # the same from the row's button
    fresh.frame_set(1)
    assert bpy.ops.jointwise.clearance_show(index=1) == {"FINISHED"}
    assert fresh.frame_current == jw.clearance[1].min_frame
    assert bpy.ops.jointwise.clearance_clear() == {"FINISHED"}
    assert len(jw.clearance) == 0 and len(fresh.timeline_markers) == 0


# A small Fennwick Row "Hedgerow" display stand: five arms on upright pivots 1.6 apart,
# each arm a stretched UV sphere (12 x 6: 120 triangles, 2 long, 0.8 wide, 0.6 thick,
# pivot near one end) turning at its own steady rate. Neighbours at the same height sweep
# into each other, an arm 0.7 up passes over its neighbours, one 0.45 up half overlaps
# them in height, arms three apart never meet: pairs that touch, come close, stay apart.
ARM_HEIGHTS = (0.0, 0.0, 0.7, 0.0, 0.45)
ARM_TURNS = (0.5, -0.75, 1.0, -0.5, 0.6)   # turns over the frames


def arm_row(tmp_path, frames):
    import bmesh
    bm = bmesh.new()
    bmesh.ops.create_uvsphere(bm, u_segments=12, v_segments=6, radius=1.0)
    for v in bm.verts:
        v.co.x = v.co.x + 0.8
        v.co.y *= 0.4
        v.co.z *= 0.3
    mesh = bpy.data.meshes.new("arm")
    bm.to_mesh(mesh)
    bm.free()
    lines = ['format = 1', '[mechanism]', 'name = "Hedgerow display stand"', 'length_unit = "m"',
             'angle_unit = "deg"', 'ground = "stand"', '[links.stand]']
    for i, z in enumerate(ARM_HEIGHTS):
        obj = bpy.data.objects.new(f"Arm{i}", mesh)
        bpy.context.scene.collection.objects.link(obj)
        obj.location = (1.6 * i, 0, z)
        obj.rotation_euler = (0, 0, math.radians(37.0 * i))
        lines += [f'[links.arm{i}]', f'object = "Arm{i}"']
    for i, z in enumerate(ARM_HEIGHTS):
        lines += [f'[joints.pivot{i}]', 'type = "revolute"', 'parent = "stand"', f'child = "arm{i}"',
                  f'point = [{1.6 * i}, 0, {z}]', 'axis = [0, 0, 1]', 'drive = true']
    bpy.context.view_layer.update()
    path = pathlib.Path(tmp_path) / "hedgerow.toml"
    path.write_text("\n".join(lines) + "\n")
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    scene = bpy.context.scene
    for i, turns in enumerate(ARM_TURNS):
        key_linear(scene, f"pivot{i}", [(1, 0.0), (frames, 2 * math.pi * turns)])
    return scene


def _mesh_distance(va, ta, vb, tb):
    """Distance between two triangle meshes that do not cross, by brute force: every
    vertex against every triangle of the other, every edge against every edge (the
    smallest distance between two triangles is one of those: Ericson, Real-Time
    Collision Detection, 2005, §5.1.9)."""
    px = ext("proximity")

    def edges(t):
        return np.array(sorted({tuple(sorted((int(t[k][i]), int(t[k][(i + 1) % 3]))))
                                for k in range(len(t)) for i in range(3)}))

    best = math.inf
    for v, (w, t) in ((va, (vb, tb)), (vb, (va, ta))):
        p = v[:, None, :]
        q = px.triangle_closest_points(p, w[t[:, 0]][None], w[t[:, 1]][None], w[t[:, 2]][None])
        best = min(best, float(np.linalg.norm(p - q, axis=2).min()))
    ea, eb = edges(ta), edges(tb)
    d, _, _ = px.segment_closest_points(va[ea[:, 0]][:, None], va[ea[:, 1]][:, None],
                                        vb[eb[:, 0]][None], vb[eb[:, 1]][None])
    return min(best, float(d.min()))


def test_pruned_search_equals_every_frame_checked(fresh, tmp_path):
    """The branch and bound over frames (groups' spheres, bounds from the motion between
    frames, vertex and edge queries only where they can matter) gives the same
    contact frames, smallest gap and its frame as checking every frame in full: at each
    frame, full trees of both meshes overlapped, and the distance by brute force over
    all vertex-triangle and edge-edge pairs (:func:`_mesh_distance`)."""
    from mathutils.bvhtree import BVHTree
    frames = 48
    scene = arm_row(tmp_path, frames)
    cl = ext("clearance")
    px = ext("proximity")
    check = cl.Check(scene, np.arange(1, frames + 1)).run()
    rows = {(d["object_a"], d["object_b"]): d for d in check.rows()}
    assert len(rows) == 10
    bodies = {b.name: b for b in check.bodies}
    # the bodies' placements are the scene's own: the arms posed at a frame by the
    # animation sit where the check puts them
    for f in (1, 17, frames):
        scene.frame_set(f)
        for b in bodies.values():
            obj = bpy.data.objects[b.name]
            local = np.array([tuple(v.co) for v in obj.data.vertices])
            m = np.array(obj.matrix_world)
            np.testing.assert_allclose(local @ m[:3, :3].T + m[:3, 3],
                                       px.transform_points(b.rel[f - 1], b.verts), atol=1e-5)
    kinds = set()
    for (na, nb), row in rows.items():
        a, b = bodies[na], bodies[nb]
        contact, gaps = [], []
        for i in range(frames):
            va = px.transform_points(a.rel[i], a.verts)
            vb = px.transform_points(b.rel[i], b.verts)
            ta = BVHTree.FromPolygons(va.tolist(), a.tris.tolist())
            tb = BVHTree.FromPolygons(vb.tolist(), b.tris.tolist())
            if ta.overlap(tb):
                contact.append(i + 1)
                gaps.append(0.0)
            else:
                gaps.append(_mesh_distance(va, a.tris, vb, b.tris))
        assert row["contact_frames"] == px.contact_text(contact), (na, nb)
        gaps = np.array(gaps)
        if contact:
            kinds.add("touching")
            assert row["contact"] and row["min_gap"] == 0.0 and row["min_frame"] == contact[0]
            continue
        k = int(np.argmin(gaps))
        # no tie between frames in this scene, so the frame is defined
        assert np.sort(gaps)[1] - gaps[k] > 1e-5, (na, nb)
        # to 1e-6: the objects' own world matrices, from which the placements are
        # reckoned, are single precision
        assert abs(row["min_gap"] - gaps[k]) < 1e-6, (na, nb, row["min_gap"], gaps[k])
        assert row["min_frame"] == k + 1, (na, nb)
        pa, pb = np.array(row["point_a"]), np.array(row["point_b"])
        assert abs(np.linalg.norm(pa - pb) - gaps[k]) < 1e-6
        kinds.add("close" if gaps[k] < 0.5 else "apart")
    # the scene holds every kind of pair
    assert kinds == {"touching", "close", "apart"}
