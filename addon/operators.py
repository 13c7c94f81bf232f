"""Operators. Each copies its settings, calls the scene mapping / core, and reports
problems with ``self.report({'ERROR'}, ...)`` + ``{'CANCELLED'}`` (never a traceback).
Everything is undoable (``{'REGISTER', 'UNDO'}``)."""
import math
import os

import bpy
import numpy as np
from bpy.props import BoolProperty, EnumProperty, FloatProperty, IntProperty, StringProperty
from bpy_extras.io_utils import ExportHelper, ImportHelper

from . import animation, convert, drag, files, measures, posing, properties, trace
from . import bake as bk
from . import scene as sc
from .properties import ANCHOR_TAG, JOINT_TYPES
from .reporting import Base, errors

ANCHOR_COLLECTION = "joint anchors"


def anchor_collection(scene):
    coll = bpy.data.collections.get(ANCHOR_COLLECTION)
    if coll is None:
        coll = bpy.data.collections.new(ANCHOR_COLLECTION)
    if coll.name not in scene.collection.children:
        scene.collection.children.link(coll)
    return coll


def _coordinate_search(self, context, edit_text):
    """Search list of the joint coordinates (the joint list's names)."""
    names = [it.name for it in context.scene.jointwise.joints if it.type != "fixed"]
    text = (edit_text or "").lower()
    return [n for n in names if text in n.lower()] or names


def _kind(context, name):
    item = context.scene.jointwise.joints.get(name) if name else None
    return item.kind if item is not None else "angle"


class _Range:
    """Frame range and ramp settings shared by Bake Motion and Add Trace. Called from
    Python without a range, the scene's range is used; values are radians or scene units."""
    frame_start: IntProperty(name="Start", default=1,
                             description="First frame (default: the scene's start frame)")
    frame_end: IntProperty(name="End", default=250,
                           description="Last frame (default: the scene's end frame)")
    drive: StringProperty(name="Ramp", default="", search=_coordinate_search,
                          description="Optional: a joint coordinate to run linearly from From to "
                                      "To over the range instead of its animation")
    value_from: FloatProperty(name="From", default=0.0, subtype='ANGLE', unit='ROTATION',
                              description="Ramp value at the first frame (an angle drive; "
                                          "Python: radians or scene units)")
    value_to: FloatProperty(name="To", default=0.0, subtype='ANGLE', unit='ROTATION',
                            description="Ramp value at the last frame (an angle drive; "
                                        "Python: radians or scene units)")
    length_from: FloatProperty(name="From", default=0.0, subtype='DISTANCE', unit='LENGTH',
                               description="Ramp value at the first frame (a length drive)")
    length_to: FloatProperty(name="To", default=0.0, subtype='DISTANCE', unit='LENGTH',
                             description="Ramp value at the last frame (a length drive)")

    def scene_range(self, context):
        """The scene's frame range where none was given."""
        scene = context.scene
        if not self.properties.is_property_set("frame_start"):
            self.frame_start = scene.frame_start
        if not self.properties.is_property_set("frame_end"):
            self.frame_end = scene.frame_end

    def ramp_values(self, context):
        """(from, to) in host units: the length fields for a length drive set in the dialog."""
        if self.drive and _kind(context, self.drive) == "length" and (
                self.properties.is_property_set("length_from") or self.properties.is_property_set("length_to")):
            return self.length_from, self.length_to
        return self.value_from, self.value_to

    def draw_range(self, context, layout):
        row = layout.row(align=True)
        row.prop(self, "frame_start")
        row.prop(self, "frame_end")
        layout.prop(self, "drive", icon='VIEWZOOM')
        if self.drive:
            row = layout.row(align=True)
            if _kind(context, self.drive) == "length":
                row.prop(self, "length_from")
                row.prop(self, "length_to")
            else:
                row.prop(self, "value_from")
                row.prop(self, "value_to")


class JOINTWISE_OT_mechanism_import(Base, bpy.types.Operator, ImportHelper):
    """Read a mechanism file, bind its links to scene objects and make the joint anchors"""
    bl_idname = "jointwise.mechanism_import"
    bl_label = "Import Mechanism"
    filename_ext = ".toml"
    filter_glob: StringProperty(default="*.toml;*.json", options={'HIDDEN'})

    def run(self, context):
        scene = context.scene
        path = self.filepath
        try:
            jw = sc.core()
            mech = jw.load(path)
            objects = files.validate_file_objects(scene, mech)
            files.import_mechanism(scene, mech, objects, anchor_collection(scene))
        except errors() as exc:
            return self.fail_on(context, f"cannot import {os.path.basename(path)}", exc)
        try:
            m = sc.mechanism_from_scene(scene)
            posing.set_status(scene, message=f"imported {os.path.basename(path)}",
                          mobility=posing.mobility_of(m))
        except errors() as exc:
            why = posing.error_text(scene, exc)
            posing.set_status(scene, converged=False, message=why)
            self.report({'WARNING'}, f"imported, but the scene's mechanism does not build: {why}")
        return self.done(f"imported mechanism with {len(mech.links)} links and "
                              f"{len(mech.joints)} joints")


class JOINTWISE_OT_mechanism_export(Base, bpy.types.Operator, ExportHelper):
    """Write the scene's mechanism as a mechanism file (TOML)"""
    bl_idname = "jointwise.mechanism_export"
    bl_label = "Export Mechanism"
    filename_ext = ".toml"
    filter_glob: StringProperty(default="*.toml", options={'HIDDEN'})

    def run(self, context):
        from . import tomlwrite
        try:
            data = files.export_dict(context.scene)
            tomlwrite.write(self.filepath, data)
        except errors() + (ValueError, TypeError) as exc:
            return self.fail_on(context, f"cannot export to {os.path.basename(self.filepath)}", exc)
        return self.done(f"wrote {self.filepath}")


class JOINTWISE_OT_bake(_Range, Base, bpy.types.Operator):
    """Solve every frame of the range from the animated joint values (or a ramp) and key the link objects"""
    bl_idname = "jointwise.bake"
    bl_label = "Bake Motion"

    def invoke(self, context, event):
        self.frame_start = context.scene.frame_start
        self.frame_end = context.scene.frame_end
        return context.window_manager.invoke_props_dialog(self)

    def draw(self, context):
        self.draw_range(context, self.layout)

    def run(self, context):
        scene = context.scene
        self.scene_range(context)
        if self.frame_end < self.frame_start:
            return self.fail(f"set an end frame after the start frame: the range "
                             f"{self.frame_start}..{self.frame_end} is empty")
        a, b = self.ramp_values(context)
        wm = context.window_manager
        wm.progress_begin(0, self.frame_end - self.frame_start + 1)
        try:
            count, t_solve, t_write = bk.bake(scene, self.frame_start, self.frame_end, self.drive,
                                              a, b, progress=wm.progress_update)
        except errors() as exc:
            msg = f"bake failed: {posing.error_text(scene, exc)}"
            posing.set_status(scene, converged=False, message=msg)
            return self.fail(msg)
        finally:
            wm.progress_end()
        msg = (f"baked {count} objects over frames {self.frame_start}-{self.frame_end} "
               f"(solve {t_solve:.2f} s, write {t_write:.2f} s); the keys play")
        posing.set_status(scene, message=msg)
        return self.done(msg)


class JOINTWISE_OT_bake_clear(Base, bpy.types.Operator):
    """Remove the baked motion of the link objects"""
    bl_idname = "jointwise.bake_clear"
    bl_label = "Clear Baked Motion"

    def run(self, context):
        scene = context.scene
        n = 0
        for link in scene.jointwise.links:
            if sc.object_alive(scene, link.object):
                n += animation.clear(link.object)
        bk.forget_baked_values(scene)
        measures.clear_keys(scene)
        msg = f"cleared baked motion of {n} objects"
        posing.set_status(scene, message=msg)
        return self.done(msg)


class JOINTWISE_OT_home_set(Base, bpy.types.Operator):
    """Take the current placement of every link and joint anchor as home"""
    bl_idname = "jointwise.home_set"
    bl_label = "Set Home"

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        if not jw.links:
            return self.fail("import a mechanism file or add a joint first: the scene has no mechanism")
        try:
            links = [(link, sc.link_object(scene, link)) for link in jw.links]
            for item in jw.joints:
                if item.type != "fixed" and not sc.object_alive(scene, item.anchor):
                    raise sc.SceneError(f"joint {item.joint!r}: its anchor object is missing")
        except errors() as exc:
            return self.fail(posing.error_text(context.scene, exc))
        old = ([tuple(l.home) for l in jw.links], [(it.home, tuple(it.anchor_home)) for it in jw.joints])
        for link, obj in links:
            if obj is not None:
                link.home = convert.matrix_core_to_stored(sc.matrix_host_to_core(obj.matrix_world))
        for item in jw.joints:
            item.home = item.last = item.value
            if item.anchor is not None:
                item.anchor_home = convert.matrix_core_to_stored(sc.matrix_host_to_core(item.anchor.matrix_world))
        try:
            sc.clear_cache()
            mech = sc.mechanism_from_scene(scene)
        except errors() as exc:
            for link, h in zip(jw.links, old[0]):
                link.home = h
            for item, (h, mh) in zip(jw.joints, old[1]):
                item.home, item.anchor_home = h, mh
            sc.clear_cache()
            return self.fail_on(context, "cannot set home here", exc)
        posing.set_status(scene, message="home set: the links' placements and joint values now are home", mobility=posing.mobility_of(mech))
        return {'FINISHED'}


class JOINTWISE_OT_home_restore(Base, bpy.types.Operator):
    """Put every link back at home and every joint value at its home value"""
    bl_idname = "jointwise.home_restore"
    bl_label = "Return to Home"

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        try:
            disp = {link.name: np.eye(4) for link in jw.links}
            sc.apply_displacements(scene, disp)
        except errors() as exc:
            return self.fail(posing.error_text(context.scene, exc))
        sc.write_values(scene, {it.name: it.home for it in jw.joints})
        for it in jw.joints:  # anchors on the world (not parented to a link) go back too
            m = it.anchor
            if it.slot == 1 and sc.object_alive(scene, m) and m.parent is None:
                m.matrix_world = sc.matrix_core_to_host(convert.matrix_stored_to_core(it.anchor_home))
        posing.set_status(scene, message="returned to home")
        return {'FINISHED'}


class JOINTWISE_OT_pose(Base, bpy.types.Operator):
    """Solve the mechanism for the current joint values and move the links"""
    bl_idname = "jointwise.pose"
    bl_label = "Solve Now"

    def run(self, context):
        ok, msg = posing.pose_scene(context.scene)
        if not ok:
            return self.fail(msg)
        return {'FINISHED'}


class JOINTWISE_OT_live_toggle(Base, bpy.types.Operator):
    """Switch following the animation on or off (on: pose from the animated values at once)"""
    bl_idname = "jointwise.live_toggle"
    bl_label = "Follow Animation"

    def run(self, context):
        jw = context.scene.jointwise
        jw.live = not jw.live  # switching on poses at once (the property's update)
        if jw.live and not jw.converged:
            self.report({'WARNING'}, jw.message)
        return {'FINISHED'}


class JOINTWISE_OT_value_key(Base, bpy.types.Operator):
    """Key this joint value at the current frame"""
    bl_idname = "jointwise.value_key"
    bl_label = "Key Joint Value"
    index: IntProperty(name="Index", default=-1, options={'HIDDEN'})

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        i = self.index if self.index >= 0 else jw.joint_index
        if not 0 <= i < len(jw.joints):
            return self.fail("no joint value to key")
        it = jw.joints[i]
        animation.key_value(scene, animation.value_path(i, it.kind), scene.frame_current, it.value)
        posing.set_status(scene, message=f"keyed {it.name} at frame {scene.frame_current}: the "
                                         f"animation now holds it")
        return {'FINISHED'}


AXIS_SOURCES = (
    ("ANCHOR", "Anchor or Empty", "Point and axis (Z) of a selected empty, else of the active joint's anchor"),
    ("CURSOR", "3D Cursor", "Point and axis (Z) of the 3D cursor"),
    ("GLOBAL_X", "Global X", "Through the child's origin along global X"),
    ("GLOBAL_Y", "Global Y", "Through the child's origin along global Y"),
    ("GLOBAL_Z", "Global Z", "Through the child's origin along global Z"),
    ("LOCAL_X", "Local X", "Through the child's origin along its own X"),
    ("LOCAL_Y", "Local Y", "Through the child's origin along its own Y"),
    ("LOCAL_Z", "Local Z", "Through the child's origin along its own Z"),
)


def _ensure_link(jw, obj):
    for link in jw.links:
        if link.object == obj:
            return link.name
    name = obj.name
    base, i = name, 1
    while name in jw.links:
        i += 1
        name = f"{base}.{i}"
    link = jw.links.add()
    link.name = name
    link.object = obj
    link.object_name = obj.name
    link.home = convert.matrix_core_to_stored(sc.matrix_host_to_core(obj.matrix_world))
    return name


class JOINTWISE_OT_joint_add(Base, bpy.types.Operator):
    """Add a joint: the active object is the child, the other selected object the parent
    (none: the ground). Add joints with the mechanism at home"""
    bl_idname = "jointwise.joint_add"
    bl_label = "Add Joint"
    name: StringProperty(name="Name", default="",
                         description="Name of the new joint (empty: parent-child)")
    type: EnumProperty(name="Type", items=JOINT_TYPES, default="revolute",
                       description="How the child moves against the parent")
    axis_source: EnumProperty(name="Axis", items=AXIS_SOURCES, default="LOCAL_Z",
                              description="Where the joint's point and axis come from")
    drive: BoolProperty(name="Drive", default=False,
                        description="Held at its value while the others are solved")

    def invoke(self, context, event):
        return context.window_manager.invoke_props_dialog(self)

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        child = context.active_object
        selected = [o for o in context.selected_objects if o.type != 'EMPTY' or o.get(ANCHOR_TAG) is None]
        empties = [o for o in context.selected_objects if o.type == 'EMPTY' and o != child]
        if child is None:
            return self.fail("select the child object (active) and optionally its parent")
        others = [o for o in selected if o != child and o not in empties]
        if len(others) > 1:
            return self.fail("select at most two objects: the parent and the child (active)")
        # joint frame
        cw = sc.matrix_host_to_core(child.matrix_world)
        frame = np.eye(4)
        src = self.axis_source
        if src == "ANCHOR":
            active_anchor = None
            if 0 <= jw.joint_index < len(jw.joints):
                active_anchor = jw.joints[jw.joint_index].anchor
            source = empties[0] if empties else active_anchor
            if not sc.object_alive(scene, source):
                return self.fail("axis from an anchor: select an empty besides the child, "
                                 "or pick a joint with an anchor in the list")
            frame = sc.matrix_host_to_core(source.matrix_world)
        elif src == "CURSOR":
            frame = sc.matrix_host_to_core(scene.cursor.matrix)
        else:
            i = "XYZ".index(src[-1])
            axis = np.eye(3)[i] if src.startswith("GLOBAL") else cw[:3, i]
            if not np.linalg.norm(axis) > 1e-12:
                return self.fail(f"object {child.name!r} has a zero-length local {src[-1]} axis")
            frame[:3, :3] = convert.orientation(axis)
            frame[:3, 3] = cw[:3, 3]
        z = frame[:3, 2]
        if not np.linalg.norm(z) > 1e-12:
            return self.fail("the chosen axis has zero length")
        frame[:3, :3] = convert.orientation(z, frame[:3, 0] if np.linalg.norm(frame[:3, 0]) > 1e-12 else None)
        # names and links
        if not jw.links:
            jw.ground = jw.ground or "ground"
            g = jw.links.add()
            g.name = jw.ground
        parent_obj = others[0] if others else None
        parent = _ensure_link(jw, parent_obj) if parent_obj is not None else jw.ground
        if parent_obj is None and parent in jw.links and jw.links[parent].object is not None:
            parent_obj = jw.links[parent].object
        childname = _ensure_link(jw, child)
        if childname == parent:
            return self.fail("the parent and the child are the same link")
        name = self.name.strip() or f"{parent}-{childname}"
        base, k = name, 1
        while any(it.joint == name for it in jw.joints):
            k += 1
            name = f"{base}.{k}"
        from jointwise.joints import JOINT_TYPES as KINDS
        kinds = list(KINDS[self.type]) or ["angle"]
        anchor = None
        if self.type != "fixed":
            anchor = bpy.data.objects.new(f"joint {name}", None)
            anchor.empty_display_type = 'ARROWS'
            anchor.empty_display_size = max(0.2 * max(child.dimensions), 0.01)
            anchor[ANCHOR_TAG] = name
            anchor_collection(scene).objects.link(anchor)
            anchor.matrix_world = sc.matrix_core_to_host(frame)
            if parent_obj is not None:
                anchor.parent = parent_obj
                anchor.matrix_parent_inverse = parent_obj.matrix_world.inverted()
                anchor.matrix_world = sc.matrix_core_to_host(frame)
        with properties.quiet():
            for i, kind in enumerate(kinds):
                it = jw.joints.add()
                it.name = name if len(kinds) == 1 else f"{name}.{i + 1}"
                it.joint, it.slot, it.type, it.kind = name, i + 1, self.type, kind
                it.parent, it.child = parent, childname
                it.anchor = anchor
                it.drive = self.drive
                it.value = it.home = it.last = 0.0
                if self.type == "helical":
                    it.lead = 0.1 * max(max(child.dimensions), 1e-3)
                if anchor is not None:
                    it.anchor_home = convert.matrix_core_to_stored(frame)
        jw.joint_index = len(jw.joints) - 1
        sc.clear_cache()
        return self.done(f"added {self.type} joint {name!r} ({parent} -> {childname})")


class JOINTWISE_OT_joint_remove(Base, bpy.types.Operator):
    """Remove the active joint (its coordinates, anchor and animation of its values)"""
    bl_idname = "jointwise.joint_remove"
    bl_label = "Remove Joint"
    name: StringProperty(name="Joint", default="",
                         description="Joint to remove (empty: the active joint of the list)")

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        name = self.name
        if not name:
            if not 0 <= jw.joint_index < len(jw.joints):
                return self.fail("no joint selected")
            name = jw.joints[jw.joint_index].joint
        idx = [i for i, it in enumerate(jw.joints) if it.joint == name]
        if not idx:
            return self.fail(f"no joint named {name!r}")
        anchor = jw.joints[idx[0]].anchor
        coords = {jw.joints[i].name for i in idx}
        mapping, j = {}, 0
        for i in range(len(jw.joints)):
            if i in idx:
                mapping[i] = None
            else:
                mapping[i] = j
                j += 1
        animation.remap_coordinate_paths(scene, mapping)
        for i in reversed(idx):
            jw.joints.remove(i)
        for ci in reversed(range(len(jw.couplings))):
            c = jw.couplings[ci]
            if c.leader in coords or c.follower in coords:
                jw.couplings.remove(ci)
        used = {jw.ground} | {it.parent for it in jw.joints} | {it.child for it in jw.joints}
        for li in reversed(range(len(jw.links))):
            if jw.links[li].name not in used:
                jw.links.remove(li)
        if anchor is not None and anchor.get(ANCHOR_TAG) is not None:
            bpy.data.objects.remove(anchor, do_unlink=True)
        jw.joint_index = min(jw.joint_index, len(jw.joints) - 1)
        sc.clear_cache()
        return {'FINISHED'}


class JOINTWISE_OT_coupling_add(Base, bpy.types.Operator):
    """Couple two coordinates: follower = ratio x leader + offset"""
    bl_idname = "jointwise.coupling_add"
    bl_label = "Add Coupling"
    name: StringProperty(name="Name", default="",
                         description="Name of the coupling (empty: leader-follower)")
    leader: StringProperty(name="Leader", search=_coordinate_search,
                           description="Joint coordinate that sets the follower")
    follower: StringProperty(name="Follower", search=_coordinate_search,
                             description="Joint coordinate that follows the leader")
    ratio: FloatProperty(name="Ratio", default=1.0,
                         description="Follower change per leader change: no unit for two turns "
                                     "or two slides (Python: scene units per radian, or radians "
                                     "per scene unit, for a turn and a slide)")
    per_turn: FloatProperty(name="Length per Turn", default=0.0, subtype='DISTANCE', unit='LENGTH',
                            description="A turn and a slide (rack and pinion, screw): the slide "
                                        "per full turn")
    offset: FloatProperty(name="Offset", default=0.0, subtype='ANGLE', unit='ROTATION',
                          description="Follower value when the leader is at zero (a turning "
                                      "follower; Python: radians or scene units)")
    offset_length: FloatProperty(name="Offset", default=0.0, subtype='DISTANCE', unit='LENGTH',
                                 description="Follower value when the leader is at zero (a sliding follower)")

    def invoke(self, context, event):
        return context.window_manager.invoke_props_dialog(self)

    def draw(self, context):
        layout = self.layout
        jw = context.scene.jointwise
        layout.prop(self, "name")
        layout.prop_search(self, "leader", jw, "joints", icon='VIEWZOOM')
        layout.prop_search(self, "follower", jw, "joints", icon='VIEWZOOM')
        lk, fk = _kind(context, self.leader), _kind(context, self.follower)
        layout.prop(self, "ratio" if lk == fk else "per_turn")
        layout.prop(self, "offset_length" if fk == "length" else "offset")

    def run(self, context):
        jw = context.scene.jointwise
        for role in ("leader", "follower"):
            v = getattr(self, role)
            if v not in jw.joints:
                return self.fail(f"pick the {role} from the joint list: {v!r} is not a joint coordinate")
        if self.leader == self.follower:
            return self.fail("pick two different coordinates: a coordinate cannot follow itself")
        lk, fk = _kind(context, self.leader), _kind(context, self.follower)
        ratio, offset = self.ratio, self.offset
        if lk != fk and self.properties.is_property_set("per_turn"):
            if not self.per_turn != 0:
                return self.fail("give a non-zero length per turn")
            ratio = self.per_turn / (2 * math.pi) if lk == "angle" else 2 * math.pi / self.per_turn
        if fk == "length" and self.properties.is_property_set("offset_length"):
            offset = self.offset_length
        if not (math.isfinite(ratio) and math.isfinite(offset)):
            return self.fail("type finite numbers for the ratio and the offset")
        c = jw.couplings.add()
        c.name = self.name or f"{self.leader}-{self.follower}"
        c.leader, c.follower, c.ratio, c.offset = self.leader, self.follower, ratio, offset
        sc.clear_cache()
        return {'FINISHED'}


class JOINTWISE_OT_coupling_remove(Base, bpy.types.Operator):
    """Remove the active coupling"""
    bl_idname = "jointwise.coupling_remove"
    bl_label = "Remove Coupling"

    def run(self, context):
        jw = context.scene.jointwise
        if not 0 <= jw.coupling_index < len(jw.couplings):
            return self.fail("no coupling selected")
        jw.couplings.remove(jw.coupling_index)
        jw.coupling_index = max(0, jw.coupling_index - 1)
        sc.clear_cache()
        return {'FINISHED'}


def _measure_search(self, context, edit_text):
    try:
        names = sorted(trace.point_measures(context.scene))
    except sc.SceneError:
        return []
    text = (edit_text or "").lower()
    return [n for n in names if text in n.lower()] or names


class JOINTWISE_OT_trace_add(_Range, Base, bpy.types.Operator):
    """Draw the path of a point measure over a frame range as a curve object"""
    bl_idname = "jointwise.trace_add"
    bl_label = "Add Trace"
    measure: StringProperty(name="Point Measure", default="", search=_measure_search,
                            description="Point measure of the mechanism file whose path is drawn")
    bevel: FloatProperty(name="Thickness", default=0.0, min=0.0, subtype='DISTANCE', unit='LENGTH',
                         description="Radius of the curve's bevel (0: from the mechanism's size)")

    def draw(self, context):
        self.layout.prop(self, "measure", icon='VIEWZOOM')
        self.draw_range(context, self.layout)
        self.layout.prop(self, "bevel")

    def invoke(self, context, event):
        self.frame_start = context.scene.frame_start
        self.frame_end = context.scene.frame_end
        if not self.measure:
            try:
                names = sorted(trace.point_measures(context.scene))
            except sc.SceneError:
                names = []
            self.measure = names[0] if names else ""
        return context.window_manager.invoke_props_dialog(self)

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        if not jw.joints:
            return self.fail("the scene has no mechanism: import a mechanism file first")
        if not self.measure:
            return self.fail("pick the point measure to trace")
        self.scene_range(context)
        if self.frame_end <= self.frame_start:
            return self.fail(f"set a range of at least two frames: {self.frame_start}.."
                             f"{self.frame_end} has fewer")
        a, b = self.ramp_values(context)
        try:
            xyz = trace.trace_points(scene, self.measure, self.frame_start, self.frame_end,
                                     self.drive, a, b)
            bevel = self.bevel
            if not bevel > 0:
                mech = sc.mechanism_from_scene(scene)
                size = float(getattr(mech, "size", 1.0))
                bevel = 0.006 * (size if size > 0 and math.isfinite(size) else 1.0)
            obj = trace.write_curve(scene, self.measure, xyz, bevel)
        except errors() as exc:
            return self.fail_on(context, f"cannot trace {self.measure!r}", exc)
        return self.done(f"traced {self.measure!r} over frames {self.frame_start}-"
                         f"{self.frame_end} into {obj.name!r}")


class JOINTWISE_OT_handle_add(Base, bpy.types.Operator):
    """Add a handle at a point measure: moving the handle drags that point, the mechanism follows"""
    bl_idname = "jointwise.handle_add"
    bl_label = "Add Handle"
    measure: StringProperty(name="Point measure", default="",
                            description="Name of a point measure of the mechanism file")

    def run(self, context):
        scene = context.scene
        if not scene.jointwise.joints:
            return self.fail("the scene has no mechanism: import a mechanism file first")
        if not self.measure:
            return self.fail("name the point measure to put a handle on")
        try:
            obj = drag.add_handle(scene, self.measure)
        except errors() as exc:
            return self.fail_on(context, f"cannot add a handle for {self.measure!r}", exc)
        return self.done(f"handle {obj.name!r} at {self.measure!r}: move it to drag the point")


CLASSES = (
    JOINTWISE_OT_mechanism_import, JOINTWISE_OT_mechanism_export, JOINTWISE_OT_bake,
    JOINTWISE_OT_bake_clear, JOINTWISE_OT_home_set, JOINTWISE_OT_home_restore, JOINTWISE_OT_pose,
    JOINTWISE_OT_live_toggle, JOINTWISE_OT_joint_add, JOINTWISE_OT_joint_remove,
    JOINTWISE_OT_coupling_add, JOINTWISE_OT_coupling_remove, JOINTWISE_OT_value_key,
    JOINTWISE_OT_trace_add, JOINTWISE_OT_handle_add,
)
