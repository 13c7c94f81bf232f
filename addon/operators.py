"""Operators. Each copies its settings, calls the scene mapping / core, and reports
problems with ``self.report({'ERROR'}, ...)`` + ``{'CANCELLED'}`` (never a traceback).
Everything is undoable (``{'REGISTER', 'UNDO'}``)."""
import math
import os

import bpy
import numpy as np
from bpy.props import BoolProperty, EnumProperty, FloatProperty, IntProperty, StringProperty
from bpy_extras.io_utils import ExportHelper, ImportHelper

from . import animation, convert, files, posing, properties, trace
from . import bake as bk
from . import scene as sc
from .properties import JOINT_TYPES

MARKER_COLLECTION = "joint markers"


def _errors():
    """Exceptions that become a report instead of a traceback."""
    try:
        return (sc.SceneError, sc.core().JointwiseError, OSError)
    except ImportError:
        return (sc.SceneError, OSError)


def marker_collection(scene):
    coll = bpy.data.collections.get(MARKER_COLLECTION)
    if coll is None:
        coll = bpy.data.collections.new(MARKER_COLLECTION)
    if coll.name not in scene.collection.children:
        scene.collection.children.link(coll)
    return coll


class _Base:
    bl_options = {'REGISTER', 'UNDO'}

    def fail(self, message):
        self.report({'ERROR'}, sc.message_core_to_host(message))
        return {'CANCELLED'}

    def execute(self, context):  # noqa: D401
        """Runs ``run``; an unexpected exception becomes a report, not a traceback."""
        try:
            return self.run(context)
        except Exception as exc:  # last resort: the user sees a message, the console the details
            import traceback
            traceback.print_exc()
            return self.fail(f"{self.bl_label}: unexpected problem ({type(exc).__name__}: {exc})")


class JOINTWISE_OT_mechanism_import(_Base, bpy.types.Operator, ImportHelper):
    """Read a mechanism file, bind its links to scene objects and make the joint markers"""
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
            files.import_mechanism(scene, mech, objects, marker_collection(scene))
        except _errors() as exc:
            return self.fail(f"cannot import {os.path.basename(path)}: {exc}")
        try:
            m = sc.mechanism_from_scene(scene)
            posing.set_status(scene, message=f"imported {os.path.basename(path)}",
                          mobility=posing.mobility_of(m))
        except _errors() as exc:
            posing.set_status(scene, converged=False, message=str(exc))
            self.report({'WARNING'}, f"imported, but the scene's mechanism does not build: {exc}")
        self.report({'INFO'}, f"imported mechanism with {len(mech.links)} links and "
                              f"{len(mech.joints)} joints")
        return {'FINISHED'}


class JOINTWISE_OT_mechanism_export(_Base, bpy.types.Operator, ExportHelper):
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
        except _errors() + (ValueError, TypeError) as exc:
            return self.fail(f"cannot export to {os.path.basename(self.filepath)}: {exc}")
        self.report({'INFO'}, f"wrote {self.filepath}")
        return {'FINISHED'}


class JOINTWISE_OT_bake(_Base, bpy.types.Operator):
    """Solve every frame from the animated joint values and key the link objects"""
    bl_idname = "jointwise.bake"
    bl_label = "Bake Motion"
    frame_start: IntProperty(name="Start", default=1)
    frame_end: IntProperty(name="End", default=250)
    drive: StringProperty(name="Ramp coordinate", default="",
                          description="Optional: run this coordinate linearly from a value to a value")
    value_from: FloatProperty(name="From", default=0.0)
    value_to: FloatProperty(name="To", default=0.0)

    def invoke(self, context, event):
        self.frame_start = context.scene.frame_start
        self.frame_end = context.scene.frame_end
        return context.window_manager.invoke_props_dialog(self)

    def run(self, context):
        scene = context.scene
        if self.frame_end < self.frame_start:
            return self.fail(f"frame range {self.frame_start}..{self.frame_end} is empty")
        wm = context.window_manager
        wm.progress_begin(0, self.frame_end - self.frame_start + 1)
        try:
            count, t_solve, t_write = bk.bake(scene, self.frame_start, self.frame_end, self.drive,
                                              self.value_from, self.value_to,
                                              progress=wm.progress_update)
        except _errors() as exc:
            posing.set_status(scene, converged=False, message=f"bake failed: {exc}")
            return self.fail(f"bake failed: {exc}")
        finally:
            wm.progress_end()
        msg = (f"baked {count} objects over frames {self.frame_start}-{self.frame_end} "
               f"(solve {t_solve:.2f} s, write {t_write:.2f} s)")
        posing.set_status(scene, message=msg)
        self.report({'INFO'}, msg)
        return {'FINISHED'}


class JOINTWISE_OT_bake_clear(_Base, bpy.types.Operator):
    """Remove the baked motion of the link objects"""
    bl_idname = "jointwise.bake_clear"
    bl_label = "Clear Baked Motion"

    def run(self, context):
        scene = context.scene
        n = 0
        for link in scene.jointwise.links:
            if sc.object_alive(scene, link.object):
                n += animation.clear(link.object)
        self.report({'INFO'}, f"cleared baked motion of {n} objects")
        return {'FINISHED'}


class JOINTWISE_OT_home_set(_Base, bpy.types.Operator):
    """Take the current placement of every link and joint marker as home"""
    bl_idname = "jointwise.home_set"
    bl_label = "Set Home"

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        if not jw.links:
            return self.fail("the scene has no mechanism")
        try:
            links = [(link, sc.link_object(scene, link)) for link in jw.links]
            for item in jw.joints:
                if item.type != "fixed" and not sc.object_alive(scene, item.marker):
                    raise sc.SceneError(f"joint {item.joint!r}: its marker object is missing")
        except _errors() as exc:
            return self.fail(str(exc))
        old = ([tuple(l.home) for l in jw.links], [(it.home, tuple(it.marker_home)) for it in jw.joints])
        for link, obj in links:
            if obj is not None:
                link.home = convert.matrix_core_to_stored(sc.matrix_host_to_core(obj.matrix_world))
        for item in jw.joints:
            item.home = item.last = item.value
            if item.marker is not None:
                item.marker_home = convert.matrix_core_to_stored(sc.matrix_host_to_core(item.marker.matrix_world))
        try:
            sc.clear_cache()
            mech = sc.mechanism_from_scene(scene)
        except _errors() as exc:
            for link, h in zip(jw.links, old[0]):
                link.home = h
            for item, (h, mh) in zip(jw.joints, old[1]):
                item.home, item.marker_home = h, mh
            sc.clear_cache()
            return self.fail(f"cannot set home here: {exc}")
        posing.set_status(scene, message="home set", mobility=posing.mobility_of(mech))
        return {'FINISHED'}


class JOINTWISE_OT_home_restore(_Base, bpy.types.Operator):
    """Put every link back at home and every joint value at its home value"""
    bl_idname = "jointwise.home_restore"
    bl_label = "Return to Home"

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        try:
            disp = {link.name: np.eye(4) for link in jw.links}
            sc.apply_displacements(scene, disp)
        except _errors() as exc:
            return self.fail(str(exc))
        sc.write_values(scene, {it.name: it.home for it in jw.joints})
        for it in jw.joints:  # markers on the world (not parented to a link) go back too
            m = it.marker
            if it.slot == 1 and sc.object_alive(scene, m) and m.parent is None:
                m.matrix_world = sc.matrix_core_to_host(convert.matrix_stored_to_core(it.marker_home))
        posing.set_status(scene, message="at home")
        return {'FINISHED'}


class JOINTWISE_OT_pose(_Base, bpy.types.Operator):
    """Solve the mechanism for the current joint values and move the links"""
    bl_idname = "jointwise.pose"
    bl_label = "Solve Now"

    def run(self, context):
        ok, msg = posing.pose_scene(context.scene)
        if not ok:
            return self.fail(msg)
        return {'FINISHED'}


class JOINTWISE_OT_live_toggle(_Base, bpy.types.Operator):
    """Turn live posing on or off"""
    bl_idname = "jointwise.live_toggle"
    bl_label = "Live Posing"

    def run(self, context):
        jw = context.scene.jointwise
        jw.live = not jw.live
        if jw.live:
            ok, msg = posing.pose_scene(context.scene)
            if not ok:
                self.report({'WARNING'}, msg)
        return {'FINISHED'}


class JOINTWISE_OT_value_key(_Base, bpy.types.Operator):
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
        animation.key_value(scene, f"jointwise.joints[{i}].value", scene.frame_current, jw.joints[i].value)
        return {'FINISHED'}


AXIS_SOURCES = (
    ("MARKER", "Marker", "Point and axis (Z) of a selected empty, else of the active joint's marker"),
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


class JOINTWISE_OT_joint_add(_Base, bpy.types.Operator):
    """Add a joint: the active object is the child, the other selected object the parent
    (none: the ground). Add joints with the mechanism at home"""
    bl_idname = "jointwise.joint_add"
    bl_label = "Add Joint"
    name: StringProperty(name="Name", default="")
    type: EnumProperty(name="Type", items=JOINT_TYPES, default="revolute")
    axis_source: EnumProperty(name="Axis", items=AXIS_SOURCES, default="LOCAL_Z")
    drive: BoolProperty(name="Drive", default=False)

    def invoke(self, context, event):
        return context.window_manager.invoke_props_dialog(self)

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        child = context.active_object
        selected = [o for o in context.selected_objects if o.type != 'EMPTY' or o.get("jointwise_marker") is None]
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
        if src == "MARKER":
            active_marker = None
            if 0 <= jw.joint_index < len(jw.joints):
                active_marker = jw.joints[jw.joint_index].marker
            source = empties[0] if empties else active_marker
            if not sc.object_alive(scene, source):
                return self.fail("axis from a marker: select an empty besides the child, "
                                 "or pick a joint with a marker in the list")
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
        marker = None
        if self.type != "fixed":
            marker = bpy.data.objects.new(f"joint {name}", None)
            marker.empty_display_type = 'ARROWS'
            marker.empty_display_size = max(0.2 * max(child.dimensions), 0.01)
            marker["jointwise_marker"] = name
            marker_collection(scene).objects.link(marker)
            marker.matrix_world = sc.matrix_core_to_host(frame)
            if parent_obj is not None:
                marker.parent = parent_obj
                marker.matrix_parent_inverse = parent_obj.matrix_world.inverted()
                marker.matrix_world = sc.matrix_core_to_host(frame)
        with properties.quiet():
            for i, kind in enumerate(kinds):
                it = jw.joints.add()
                it.name = name if len(kinds) == 1 else f"{name}.{i + 1}"
                it.joint, it.slot, it.type, it.kind = name, i + 1, self.type, kind
                it.parent, it.child = parent, childname
                it.marker = marker
                it.drive = self.drive
                it.value = it.home = it.last = 0.0
                if self.type == "helical":
                    it.lead = 0.1 * max(max(child.dimensions), 1e-3)
                if marker is not None:
                    it.marker_home = convert.matrix_core_to_stored(frame)
        jw.joint_index = len(jw.joints) - 1
        sc.clear_cache()
        self.report({'INFO'}, f"added {self.type} joint {name!r} ({parent} -> {childname})")
        return {'FINISHED'}


class JOINTWISE_OT_joint_remove(_Base, bpy.types.Operator):
    """Remove the active joint (its coordinates, marker and animation of its values)"""
    bl_idname = "jointwise.joint_remove"
    bl_label = "Remove Joint"
    name: StringProperty(name="Joint", default="")

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
        marker = jw.joints[idx[0]].marker
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
        if marker is not None and marker.get("jointwise_marker") is not None:
            bpy.data.objects.remove(marker, do_unlink=True)
        jw.joint_index = min(jw.joint_index, len(jw.joints) - 1)
        sc.clear_cache()
        return {'FINISHED'}


class JOINTWISE_OT_coupling_add(_Base, bpy.types.Operator):
    """Couple two coordinates: follower = ratio x leader + offset"""
    bl_idname = "jointwise.coupling_add"
    bl_label = "Add Coupling"
    name: StringProperty(name="Name", default="")
    leader: StringProperty(name="Leader")
    follower: StringProperty(name="Follower")
    ratio: FloatProperty(name="Ratio", default=1.0)
    offset: FloatProperty(name="Offset", default=0.0)

    def invoke(self, context, event):
        return context.window_manager.invoke_props_dialog(self)

    def run(self, context):
        jw = context.scene.jointwise
        for role in ("leader", "follower"):
            v = getattr(self, role)
            if v not in jw.joints:
                return self.fail(f"{role} {v!r} is not a joint coordinate")
        if self.leader == self.follower:
            return self.fail("a coordinate cannot follow itself")
        if not (math.isfinite(self.ratio) and math.isfinite(self.offset)):
            return self.fail("ratio and offset must be finite")
        c = jw.couplings.add()
        c.name = self.name or f"{self.leader}-{self.follower}"
        c.leader, c.follower, c.ratio, c.offset = self.leader, self.follower, self.ratio, self.offset
        sc.clear_cache()
        return {'FINISHED'}


class JOINTWISE_OT_coupling_remove(_Base, bpy.types.Operator):
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


class JOINTWISE_OT_trace_add(_Base, bpy.types.Operator):
    """Draw the path of a point measure over a frame range as a curve object"""
    bl_idname = "jointwise.trace_add"
    bl_label = "Add Trace"
    measure: StringProperty(name="Point measure", default="",
                            description="Name of a point measure of the mechanism file")
    frame_start: IntProperty(name="Start", default=1)
    frame_end: IntProperty(name="End", default=250)
    drive: StringProperty(name="Ramp coordinate", default="",
                          description="Optional: run this coordinate linearly from a value to a value")
    value_from: FloatProperty(name="From", default=0.0)
    value_to: FloatProperty(name="To", default=0.0)
    bevel: FloatProperty(name="Thickness", default=0.0, min=0.0,
                         description="Bevel depth in scene units (0: from the mechanism's size)")

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
            return self.fail("name the point measure to trace")
        if self.frame_end <= self.frame_start:
            return self.fail(f"frame range {self.frame_start}..{self.frame_end} needs at least two frames")
        try:
            xyz = trace.trace_points(scene, self.measure, self.frame_start, self.frame_end,
                                     self.drive, self.value_from, self.value_to)
            bevel = self.bevel
            if not bevel > 0:
                mech = sc.mechanism_from_scene(scene)
                size = float(getattr(mech, "size", 1.0))
                bevel = 0.006 * (size if size > 0 and math.isfinite(size) else 1.0)
            obj = trace.write_curve(scene, self.measure, xyz, bevel)
        except _errors() as exc:
            return self.fail(f"cannot trace {self.measure!r}: {exc}")
        self.report({'INFO'}, f"traced {self.measure!r} over frames {self.frame_start}-"
                              f"{self.frame_end} into {obj.name!r}")
        return {'FINISHED'}



CLASSES = (
    JOINTWISE_OT_mechanism_import, JOINTWISE_OT_mechanism_export, JOINTWISE_OT_bake,
    JOINTWISE_OT_bake_clear, JOINTWISE_OT_home_set, JOINTWISE_OT_home_restore, JOINTWISE_OT_pose,
    JOINTWISE_OT_live_toggle, JOINTWISE_OT_joint_add, JOINTWISE_OT_joint_remove,
    JOINTWISE_OT_coupling_add, JOINTWISE_OT_coupling_remove, JOINTWISE_OT_value_key,
    JOINTWISE_OT_trace_add,
)
