"""Trace curves: the path of a point measure over a frame range, as a curve object.

``jointwise.trace_add(measure=NAME, frame_start=A, frame_end=B)`` solves every frame of
the range from the animated joint values (or from a ramp of one coordinate, given as
for the bake: ``drive``, ``value_from``, ``value_to`` in host units), evaluates the point
measure NAME of the imported mechanism file at each frame and writes the points into
the scene as one poly spline with a small bevel, so the path renders.

A point measure is stored in file units, in world coordinates at home (see
``jointwise.measures``). Its home point ``p`` (converted to scene units) is fixed to its
link, so at a frame where the link's core displacement is ``D`` it sits at
``G @ D @ p`` (``G``: the ground object's displacement, as in :mod:`.scene`).

The curve object is named ``trace NAME`` and tagged with the custom property
``jointwise_trace``; adding the trace of the same measure again replaces it. When the
ground is an object, the curve is parented to it (it moves with the ground).
All or nothing: a frame that cannot be solved is named and no curve is written.
"""
from __future__ import annotations

import json
import math

import bpy
import numpy as np
from bpy.props import FloatProperty, IntProperty, StringProperty

from . import bake as bk
from . import scene as sc
from .operators import _Base, _errors

TAG = "jointwise_trace"
COLOUR = (0.85, 0.25, 0.55, 1.0)


def point_measures(scene):
    """{name: (link, at)} of the point measures of the imported file (file units)."""
    text = scene.jointwise.measures_json
    try:
        measures = json.loads(text) if text else {}
    except ValueError:
        raise sc.SceneError("the stored measures of the mechanism cannot be read; "
                            "re-import the mechanism file") from None
    out = {}
    for name, m in measures.items():
        if isinstance(m, dict) and m.get("type") == "point":
            out[name] = (str(m["link"]), [float(v) for v in m["at"]])
    return out


def trace_points(scene, measure, frames, ramp=None):
    """World positions (N, 3), scene units, of point measure ``measure`` at ``frames``.

    Raises SceneError when the measure is unknown or a frame cannot be solved."""
    jw = scene.jointwise
    points = point_measures(scene)
    if measure not in points:
        known = ", ".join(sorted(points)) or "none"
        raise sc.SceneError(f"no point measure named {measure!r} in the mechanism "
                            f"(point measures: {known})")
    link, at = points[measure]
    if link not in jw.links:
        raise sc.SceneError(f"measure {measure!r}: its link {link!r} is not among the links")
    k = sc.length_file_to_host(scene, jw.file_length_unit)
    p = np.append(np.asarray(at, dtype=float) * k, 1.0)
    mech = sc.mechanism_from_scene(scene)
    table = bk.value_table(scene, mech, frames, ramp)
    solved = bk.solve_frames(scene, mech, frames, table)
    fail = solved.first_failure()
    if fail is not None:
        raise sc.SceneError(f"frame {fail[0]}: {fail[1]}; no trace was written")
    g = sc.ground_displacement(scene)
    if link == jw.ground:
        d = np.tile(np.eye(4), (len(frames), 1, 1))
    else:
        d = np.asarray(solved.links[link], dtype=float)
    xyz = np.einsum("ij,njk,k->ni", g, d, p)[:, :3]
    if not np.all(np.isfinite(xyz)):
        raise sc.SceneError(f"measure {measure!r}: non-finite points; no trace was written")
    return xyz


def _material():
    mat = bpy.data.materials.get("jointwise trace")
    if mat is None:
        mat = bpy.data.materials.new("jointwise trace")
        mat.diffuse_color = COLOUR
    return mat


def write_curve(scene, measure, xyz, bevel):
    """Create (or replace) the curve object ``trace NAME`` holding the points ``xyz``."""
    name = f"trace {measure}"
    for obj in [o for o in scene.objects if o.get(TAG) == measure]:
        data = obj.data
        bpy.data.objects.remove(obj, do_unlink=True)
        if data is not None and data.users == 0:
            bpy.data.curves.remove(data)
    curve = bpy.data.curves.new(name, 'CURVE')
    curve.dimensions = '3D'
    curve.bevel_depth = bevel
    curve.bevel_resolution = 2
    curve.use_fill_caps = True
    spline = curve.splines.new('POLY')
    spline.points.add(len(xyz) - 1)
    co = np.ones((len(xyz), 4), dtype=np.float32)
    co[:, :3] = xyz
    spline.points.foreach_set("co", co.ravel())
    closed = len(xyz) > 2 and np.linalg.norm(xyz[0] - xyz[-1]) <= 1e-6 * max(1.0, float(np.abs(xyz).max()))
    spline.use_cyclic_u = bool(closed)
    curve.materials.append(_material())
    obj = bpy.data.objects.new(name, curve)
    obj[TAG] = measure
    obj.color = COLOUR
    scene.collection.objects.link(obj)
    jw = scene.jointwise
    ground = jw.links.get(jw.ground)
    gobj = sc.link_object(scene, ground, required=False) if ground is not None else None
    if gobj is not None:
        obj.parent = gobj
        obj.matrix_parent_inverse = gobj.matrix_world.inverted()
    return obj


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
                names = sorted(point_measures(context.scene))
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
        ramp = None
        if self.drive:
            if self.drive not in jw.joints:
                return self.fail(f"ramp coordinate {self.drive!r} is not a joint coordinate")
            if not (math.isfinite(self.value_from) and math.isfinite(self.value_to)):
                return self.fail("ramp values must be finite")
            ramp = (self.drive, self.value_from, self.value_to)
        frames = np.arange(self.frame_start, self.frame_end + 1)
        try:
            xyz = trace_points(scene, self.measure, frames, ramp)
            bevel = self.bevel
            if not bevel > 0:
                mech = sc.mechanism_from_scene(scene)
                size = float(getattr(mech, "size", 1.0))
                bevel = 0.006 * (size if size > 0 and math.isfinite(size) else 1.0)
            obj = write_curve(scene, self.measure, xyz, bevel)
        except _errors() as exc:
            return self.fail(f"cannot trace {self.measure!r}: {exc}")
        self.report({'INFO'}, f"traced {self.measure!r} over frames {self.frame_start}-"
                              f"{self.frame_end} into {obj.name!r}")
        return {'FINISHED'}


class JOINTWISE_PT_traces(bpy.types.Panel):
    """Point measures of the mechanism file, each with a button drawing its path over the
    scene's frame range."""
    bl_space_type = 'VIEW_3D'
    bl_region_type = 'UI'
    bl_category = "Jointwise"
    bl_label = "Traces"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        layout = self.layout
        scene = context.scene
        try:
            names = sorted(point_measures(scene))
        except sc.SceneError as exc:
            layout.label(text=sc.message_core_to_host(str(exc)))
            return
        if not names:
            layout.label(text="No point measures in the mechanism file")
            return
        traced = {o.get(TAG) for o in scene.objects if o.get(TAG)}
        for name in names:
            row = layout.row(align=True)
            row.label(text=name + ("  (traced)" if name in traced else ""))
            op = row.operator("jointwise.trace_add", text="Trace")
            op.measure = name
            op.frame_start = scene.frame_start
            op.frame_end = scene.frame_end


CLASSES = (JOINTWISE_OT_trace_add, JOINTWISE_PT_traces)
