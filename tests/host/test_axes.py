"""Joint axes from the model (axis_from_selection in Edit Mode) and tidy axes (axes_tidy),
in real Blender.

References: the generated cylinder's own axis and rim centre (its object matrix, built
from a seeded random rotation: scipy-free, mathutils Euler), and the core's tidy rules
(tests/test_tidy.py checks those against a closed-form four-bar)."""
from __future__ import annotations

import math
import os
import random

import bpy
import numpy as np
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
SAMPLES = os.path.join(ROOT, "blend_samples")


def _select(*objs, active):
    for o in bpy.context.scene.objects:
        o.select_set(False)
    for o in objs:
        o.select_set(True)
    bpy.context.view_layer.objects.active = active


def _shaft_with_joint(scene, rng, noise=0.0):
    """A cylinder (the shaft) at a random pose, a joint from the ground to it whose axis
    is deliberately wrong (global X), and the shaft's true axis and rim centres (world)."""
    from mathutils import Euler, Matrix, Vector
    loc = Vector([rng.uniform(-2, 2) for _ in range(3)])
    rot = Euler([rng.uniform(-math.pi, math.pi) for _ in range(3)], 'XYZ')
    bpy.ops.mesh.primitive_cylinder_add(vertices=32, radius=0.25, depth=1.0, location=loc, rotation=rot)
    shaft = bpy.context.active_object
    shaft.name = "fennwick_shaft"
    if noise:
        for v in shaft.data.vertices:
            v.co += Vector([rng.gauss(0, noise) for _ in range(3)])
    bpy.context.view_layer.update()
    _select(shaft, active=shaft)
    assert bpy.ops.jointwise.joint_add(name="shaft_bearing", type="revolute",
                                       axis_source="GLOBAL_X") == {"FINISHED"}
    mw = np.array(shaft.matrix_world)
    axis = mw[:3, 2] / np.linalg.norm(mw[:3, 2])
    top = (mw @ np.array([0, 0, 0.5, 1.0]))[:3]
    return shaft, axis, top


def _edit(shaft, mode):
    _select(shaft, active=shaft)
    bpy.ops.object.mode_set(mode='EDIT')
    bpy.context.tool_settings.mesh_select_mode = (mode == 'VERT', False, mode == 'FACE')
    bpy.ops.mesh.select_all(action='DESELECT')
    bpy.ops.object.mode_set(mode='OBJECT')


def _anchor_frame(scene):
    m = scene.jointwise.joints["shaft_bearing"].anchor
    w = np.array(m.matrix_world)
    return w[:3, 2] / np.linalg.norm(w[:3, 2]), w[:3, 3]


def _line_distance(p, point, axis):
    d = p - point
    return float(np.linalg.norm(d - np.dot(d, axis) * axis))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_axis_from_a_rim_of_vertices(fresh, seed):
    rng = random.Random(seed)
    shaft, axis, top = _shaft_with_joint(fresh, rng, noise=0.001 if seed > 1 else 0.0)
    _edit(shaft, 'VERT')
    for v in shaft.data.vertices:  # the top rim
        v.select = v.co.z > 0.25
    bpy.ops.object.mode_set(mode='EDIT')
    assert bpy.ops.jointwise.axis_from_selection() == {"FINISHED"}
    bpy.ops.object.mode_set(mode='OBJECT')
    z, p = _anchor_frame(fresh)
    tol_angle = 1e-5 if seed == 1 else 0.5  # degrees: float32 vertices; 1 mm noise on a 0.25 m rim
    tol_point = 1e-5 if seed == 1 else 0.002
    assert math.degrees(math.acos(min(1.0, abs(float(z @ axis))))) < tol_angle
    assert _line_distance(p, top, axis) < tol_point * (1 if seed == 1 else 3)
    # the joint point is where the old one (the shaft's origin) drops onto the fitted axis
    centre = np.array(shaft.matrix_world)[:3, 3]
    assert np.linalg.norm(p - centre) < tol_point * (1 if seed == 1 else 3)
    assert "fit residual" in fresh.jointwise.message
    # the joint now turns the shaft about its own axis: posing keeps the rim centre put
    fresh.jointwise.live = True
    fresh.jointwise.joints["shaft_bearing"].value = 1.0
    assert fresh.jointwise.converged, fresh.jointwise.message
    bpy.context.view_layer.update()
    mw = np.array(shaft.matrix_world)
    assert np.linalg.norm((mw @ np.array([0, 0, 0.5, 1.0]))[:3] - top) < (1e-4 if seed == 1 else 0.01)


def test_axis_from_the_side_faces(fresh):
    rng = random.Random(7)
    shaft, axis, top = _shaft_with_joint(fresh, rng)
    _edit(shaft, 'FACE')
    for f in shaft.data.polygons:
        f.select = abs(f.normal.z) < 1e-3  # the side faces, not the caps
    bpy.ops.object.mode_set(mode='EDIT')
    assert bpy.ops.jointwise.axis_from_selection() == {"FINISHED"}
    bpy.ops.object.mode_set(mode='OBJECT')
    z, p = _anchor_frame(fresh)
    assert math.degrees(math.acos(min(1.0, abs(float(z @ axis))))) < 1e-4
    assert _line_distance(p, top, axis) < 1e-5


def test_axis_from_selection_refuses_clearly(fresh):
    rng = random.Random(4)
    shaft, axis, top = _shaft_with_joint(fresh, rng)
    before = np.array(fresh.jointwise.joints["shaft_bearing"].anchor.matrix_world)
    with pytest.raises(RuntimeError, match="Edit Mode"):
        bpy.ops.jointwise.axis_from_selection()
    _edit(shaft, 'VERT')
    picked = [v for v in shaft.data.vertices if v.co.z > 0.25][:2]
    for v in picked:
        v.select = True
    bpy.ops.object.mode_set(mode='EDIT')
    with pytest.raises(RuntimeError, match="at least three points"):
        bpy.ops.jointwise.axis_from_selection()
    bpy.ops.object.mode_set(mode='OBJECT')
    # one vertical line of the side: collinear
    for v in shaft.data.vertices:
        v.select = abs(v.co.x - 0.25) < 1e-6 and abs(v.co.y) < 1e-6
    assert sum(v.select for v in shaft.data.vertices) == 2
    _edit(shaft, 'FACE')
    for f in shaft.data.polygons:
        f.select = True  # sides and both caps: the normals share no axis
    bpy.ops.object.mode_set(mode='EDIT')
    with pytest.raises(RuntimeError, match="do not share an axis"):
        bpy.ops.jointwise.axis_from_selection()
    bpy.ops.object.mode_set(mode='OBJECT')
    assert np.allclose(np.array(fresh.jointwise.joints["shaft_bearing"].anchor.matrix_world), before)


def test_axes_tidy_unlocks_a_tilted_sample(installed, tmp_path):
    """The wagtail rocker with its rocker pivot tilted 0.17 deg locks; Tidy Axes makes it
    exact and the crank turns a full turn again."""
    import jointwise
    from mathutils import Matrix
    bpy.ops.wm.open_mainfile(filepath=os.path.join(SAMPLES, "wagtail_rocker.blend"))
    scene = bpy.context.scene
    jw = scene.jointwise
    jw.live = True
    item = jw.joints["rocker_pivot"]
    m = item.anchor
    at = m.matrix_world.translation.copy()  # turn the frame 0.17 deg about Y through its own point
    m.matrix_world = (Matrix.Translation(at) @ Matrix.Rotation(math.radians(0.17), 4, 'Y')
                      @ Matrix.Translation(-at) @ m.matrix_world.copy())
    bpy.context.view_layer.update()
    jw.joints["crank_pin"].value = math.radians(150)
    assert not jw.converged  # locked by the tilt
    with pytest.raises(RuntimeError, match=r"rocker_pivot.*0\.17.*tolerance of 0\.1"):
        bpy.ops.jointwise.axes_tidy(tolerance=math.radians(0.1))
    with pytest.raises(RuntimeError, match=r"0\.1°; nothing changed \(raise the angle tolerance"):
        bpy.ops.jointwise.axes_tidy(tolerance=math.radians(0.1))  # worded from the tilts' fields
    assert bpy.ops.jointwise.axes_tidy() == {"FINISHED"}
    assert "rocker_pivot turned 0.17°" in jw.message
    mech = jointwise.load(os.path.join(SAMPLES, "wagtail_rocker.toml"))
    for deg in (150, 240, 330, 419):
        jw.joints["crank_pin"].value = math.radians(deg)
        assert jw.converged, (deg, jw.message)
        want = mech.pose({"crank_pin": deg})
        assert math.degrees(jw.joints["rocker_pivot"].value) == pytest.approx(
            want.joints["rocker_pivot"], abs=1e-3)
    assert bpy.ops.jointwise.axes_tidy() == {"FINISHED"}
    assert "already exact" in jw.message
