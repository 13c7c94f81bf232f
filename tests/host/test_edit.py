"""A joint's type, parent and child changed after adding it (properties and Edit Joint)."""
from __future__ import annotations

import bpy
import numpy as np
import pytest

import workshop as ws


def _select(*objs, active):
    for o in bpy.context.scene.objects:
        o.select_set(False)
    for o in objs:
        o.select_set(True)
    bpy.context.view_layer.objects.active = active


def _two_parts(scene):
    base = ws.cube("fennwick_base", (0, 0, 0), (0.2, 0.2, 0.02))
    arm = ws.cube("fennwick_arm", (0.1, 0, 0.05), (0.1, 0.02, 0.02))
    post = ws.cube("fennwick_post", (-0.1, 0, 0.05), (0.02, 0.02, 0.1))
    bpy.context.view_layer.update()
    _select(arm, active=arm)
    assert bpy.ops.jointwise.joint_add(name="pivot", type="revolute", axis_source="GLOBAL_Z") == {"FINISHED"}
    _select(post, active=post)
    assert bpy.ops.jointwise.joint_add(name="post_fix", type="fixed") == {"FINISHED"}
    return base, arm, post


def test_type_set_from_python_changes_the_coordinates(fresh):
    jw = fresh.jointwise
    base, arm, post = _two_parts(fresh)
    jw.joints["pivot"].type = 'prismatic'
    assert [(it.name, it.kind, it.type) for it in jw.joints if it.joint == "pivot"] == [("pivot", "length", "prismatic")]
    jw.joints["pivot"].type = 'cylindrical'
    items = [(it.name, it.kind, it.slot) for it in jw.joints if it.joint == "pivot"]
    assert items == [("pivot.1", "angle", 1), ("pivot.2", "length", 2)]
    # the slide of the cylindrical joint moves the arm along the frame's Z (GLOBAL_Z)
    home = np.array(arm.matrix_world)
    jw.live = True
    jw.joints["pivot.2"].value = 0.03
    bpy.ops.jointwise.pose()
    assert jw.converged, jw.message
    moved = np.array(arm.matrix_world)
    assert np.allclose(moved[:3, 3] - home[:3, 3], [0, 0, 0.03], atol=1e-6)


def test_parent_and_child_change_and_the_frame_follows_its_parent(fresh):
    jw = fresh.jointwise
    base, arm, post = _two_parts(fresh)
    anchor = jw.joints["pivot"].anchor
    world = np.array(anchor.matrix_world)
    post_link = next(l.name for l in jw.links if l.object == post)
    ground = jw.ground
    jw.joints["pivot"].parent = post_link
    assert anchor.parent == post and np.allclose(np.array(anchor.matrix_world), world, atol=1e-6)
    with pytest.raises(RuntimeError, match="not a link"):
        bpy.ops.jointwise.joint_edit(joint="pivot", parent="nowhere")
    with pytest.raises(RuntimeError, match="same link"):
        bpy.ops.jointwise.joint_edit(joint="pivot", child=post_link)
    assert bpy.ops.jointwise.joint_edit(joint="pivot", type='revolute', parent=ground) == {"FINISHED"}
    assert jw.joints["pivot"].parent == ground and anchor.parent is None
    assert np.allclose(np.array(anchor.matrix_world), world, atol=1e-6)
    # a fixed joint made revolute gets a frame object at its child's origin
    assert bpy.ops.jointwise.joint_edit(joint="post_fix", type='revolute') == {"FINISHED"}
    it = jw.joints["post_fix"]
    assert it.anchor is not None
    assert np.allclose(np.array(it.anchor.matrix_world)[:3, 3], np.array(post.matrix_world)[:3, 3], atol=1e-6)
