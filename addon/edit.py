"""Changing a joint after adding it: its type, parent link and child link.

``change_joint(scene, joint, type=None, parent=None, child=None)`` is the one place that
does it; ``jointwise.joint_edit`` (the panel's fields) and the properties' update hooks
(``scene.jointwise.joints[NAME].type = 'prismatic'`` from Python) both call it.

* A new type with the same number and kinds of coordinates keeps the items (and their
  animation); otherwise the joint's coordinate items are made again (named ``NAME`` for
  one coordinate, ``NAME.1``, ``NAME.2`` ... for more), at their home value 0, and the
  animation of the removed items is dropped (other items' animation is re-targeted).
* A new parent re-parents the joint anchor to the new parent's object, keeping
  its world placement; a fixed joint given a turning type gets a anchor at the
  child's origin (Z = the child's local Z).
"""
from __future__ import annotations

import bpy
import numpy as np

from . import animation, convert, properties
from . import scene as sc
from .convert import SceneError
from .reporting import Base

__all__ = ["change_joint", "CLASSES"]

_busy = [0]


def _kinds(jtype):
    from jointwise.joints import JOINT_TYPES
    return list(JOINT_TYPES[jtype]) or ["angle"]


def change_joint(scene, joint, type=None, parent=None, child=None):
    """Change ``joint``'s type, parent and/or child; raises SceneError (nothing changed)."""
    jw = scene.jointwise
    items = [it for it in jw.joints if it.joint == joint]
    if not items:
        raise SceneError(f"no joint named {joint!r}")
    first = items[0]
    new_type = type or first.type
    new_parent = parent or first.parent
    new_child = child or first.child
    for side, name in (("parent", new_parent), ("child", new_child)):
        if name not in jw.links:
            raise SceneError(f"joint {joint!r}: {side} {name!r} is not a link "
                             f"(links: {', '.join(l.name for l in jw.links)})")
    if new_parent == new_child:
        raise SceneError(f"joint {joint!r}: parent and child are the same link {new_parent!r}")
    if new_type not in {t[0] for t in properties.JOINT_TYPES}:
        raise SceneError(f"joint {joint!r}: unknown type {new_type!r}")
    old_kinds = [it.kind for it in items]
    kinds = _kinds(new_type)
    anchor = first.anchor
    _busy[0] += 1
    try:
        with properties.quiet():
            pobj = sc.link_object(scene, jw.links[new_parent], required=False)
            if anchor is not None and sc.object_alive(scene, anchor) and anchor.parent != pobj:
                world = anchor.matrix_world.copy()
                anchor.parent = pobj
                if pobj is not None:
                    anchor.matrix_parent_inverse = pobj.matrix_world.inverted()
                anchor.matrix_world = world
            if new_type != "fixed" and (anchor is None or not sc.object_alive(scene, anchor)):
                anchor = _new_frame_object(scene, joint, new_parent, new_child)
            if kinds == old_kinds[:len(kinds)] and len(kinds) == len(old_kinds):
                for it in items:
                    it.type, it.parent, it.child, it.anchor = new_type, new_parent, new_child, anchor
            else:
                _remake_items(scene, joint, items, new_type, new_parent, new_child, kinds, anchor)
    finally:
        _busy[0] -= 1
    sc.clear_cache()


def _new_frame_object(scene, joint, parent, child):
    cobj = sc.link_object(scene, scene.jointwise.links[child], required=False)
    frame = np.eye(4)
    if cobj is not None:
        cw = np.array(cobj.matrix_world, dtype=float)
        frame[:3, :3] = convert.orientation(cw[:3, 2] if np.linalg.norm(cw[:3, 2]) > 0 else [0, 0, 1.0])
        frame[:3, 3] = cw[:3, 3]
    anchor = bpy.data.objects.new(f"joint {joint}", None)
    anchor.empty_display_type = 'ARROWS'
    anchor[properties.ANCHOR_TAG] = joint
    coll = bpy.data.collections.get("joint anchors") or scene.collection
    coll.objects.link(anchor)
    anchor.matrix_world = sc.matrix_core_to_host(frame)
    pobj = sc.link_object(scene, scene.jointwise.links[parent], required=False)
    if pobj is not None:
        anchor.parent = pobj
        anchor.matrix_parent_inverse = pobj.matrix_world.inverted()
        anchor.matrix_world = sc.matrix_core_to_host(frame)
    return anchor


def _remake_items(scene, joint, items, jtype, parent, child, kinds, anchor):
    jw = scene.jointwise
    keep = {f: getattr(items[0], f) for f in ("drive", "anchor_home", "use_axis2", "lead", "hand", "thread")}
    old_names = [it.name for it in jw.joints]
    pos = min(jw.joints.find(it.name) for it in items)
    for it in items:
        jw.joints.remove(jw.joints.find(it.name))
    names = [joint] if len(kinds) == 1 else [f"{joint}.{i + 1}" for i in range(len(kinds))]
    for i, (name, kind) in enumerate(zip(names, kinds)):
        it = jw.joints.add()
        it.name, it.joint, it.slot, it.type, it.kind = name, joint, i + 1, jtype, kind
        it.parent, it.child, it.anchor = parent, child, anchor
        for f, v in keep.items():
            setattr(it, f, v)
        it.value = it.home = it.last = 0.0
        jw.joints.move(len(jw.joints) - 1, pos + i)
    new_index = {it.name: i for i, it in enumerate(jw.joints)}
    animation.remap_coordinate_paths(scene, {i: new_index.get(n) for i, n in enumerate(old_names)})
    jw.joint_index = pos


def joint_changed(item, context, prop):
    """``properties.JOINT_CHANGED`` hook: a joint's type, parent or child set on an item
    (ignored while items are being written, under ``properties.quiet()``)."""
    if _busy[0] or properties.is_quiet():
        return
    scene = context.scene if context is not None and context.scene is not None else bpy.context.scene
    jw = scene.jointwise
    joint = item.joint
    new = getattr(item, prop)
    siblings = [it for it in jw.joints if it.joint == joint]
    old = next((getattr(it, prop) for it in siblings if it != item), None)
    # the other items still hold the old setting; a one-item joint: take the link names as given
    try:
        change_joint(scene, joint, **{prop: new})
    except SceneError as exc:
        jw.message = str(exc)
        if old is not None:
            _busy[0] += 1
            try:
                setattr(item, prop, old)
            finally:
                _busy[0] -= 1


class JOINTWISE_OT_joint_edit(Base, bpy.types.Operator):
    """Change the active joint's type, parent link or child link"""
    bl_idname = "jointwise.joint_edit"
    bl_label = "Edit Joint"

    joint: bpy.props.StringProperty(name="Joint", default="", description="Joint to change (default: the active one)")
    type: bpy.props.EnumProperty(name="Type", items=properties.JOINT_TYPES, default="revolute",
                                 description="New joint type (left as it is when not given)")
    parent: bpy.props.StringProperty(name="Parent", default="", description="Parent link")
    child: bpy.props.StringProperty(name="Child", default="", description="Child link")

    def invoke(self, context, event):
        jw = context.scene.jointwise
        if 0 <= jw.joint_index < len(jw.joints):
            it = jw.joints[jw.joint_index]
            self.joint, self.type, self.parent, self.child = it.joint, it.type, it.parent, it.child
        return context.window_manager.invoke_props_dialog(self)

    def draw(self, context):
        jw = context.scene.jointwise
        self.layout.prop(self, "type")
        self.layout.prop_search(self, "parent", jw, "links")
        self.layout.prop_search(self, "child", jw, "links")

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        joint = self.joint or (jw.joints[jw.joint_index].joint if 0 <= jw.joint_index < len(jw.joints) else "")
        try:
            change_joint(scene, joint, type=self.type if self.properties.is_property_set("type") else None,
                         parent=self.parent or None, child=self.child or None)
        except SceneError as exc:
            return self.fail(str(exc))
        first = next(it for it in jw.joints if it.joint == joint)
        msg = f"joint {joint}: {first.type}, {first.parent} -> {first.child}"
        return self.done(msg, scene)


def register():
    if joint_changed not in properties.JOINT_CHANGED:
        properties.JOINT_CHANGED.append(joint_changed)


def unregister():
    if joint_changed in properties.JOINT_CHANGED:
        properties.JOINT_CHANGED.remove(joint_changed)


CLASSES = (JOINTWISE_OT_joint_edit,)
