"""Joint axes from the model: fit the active joint's axis to a selection in Edit Mode
(``jointwise.axis_from_selection``), and make a loop's nearly parallel axes exact
(``jointwise.axes_tidy``).

The fitting maths lives in ``fit`` (no bpy) and the tilt rules in the core
(``jointwise.tidy``); this module reads the selection, moves joint anchors and
reports.  A joint's anchor is read in its parent link's frame (see
``properties``); both operators write it back the same way and store its new home frame.
"""
from __future__ import annotations

import math

import bpy
import numpy as np
from bpy.props import FloatProperty

from . import convert, fit, posing
from . import scene as sc
from .convert import SceneError
from .reporting import Base

__all__ = ["CLASSES", "active_joint", "place_frame", "format_length"]


def format_length(scene, value):
    """A scene length (BU) as text in the scene's display unit."""
    return convert.format_value(float(value), "length", sc.display_length_of(scene))


def active_joint(scene):
    """The first coordinate item of the joint picked in the list, or a SceneError."""
    jw = scene.jointwise
    if not 0 <= jw.joint_index < len(jw.joints):
        raise SceneError("pick a joint in the Jointwise joint list first")
    joint = jw.joints[jw.joint_index].joint
    return next(it for it in jw.joints if it.joint == joint)


def _rotation_between(a, b):
    """Smallest rotation (3x3) turning unit vector a onto unit vector b (Rodrigues)."""
    a = np.asarray(a, float) / np.linalg.norm(a)
    b = np.asarray(b, float) / np.linalg.norm(b)
    v = np.cross(a, b)
    c = float(np.dot(a, b))
    s = float(np.linalg.norm(v))
    if s < 1e-15:
        if c > 0:
            return np.eye(3)
        p = np.array([1.0, 0, 0]) if abs(a[0]) < 0.9 else np.array([0, 1.0, 0])
        k = np.cross(a, p)
        k /= np.linalg.norm(k)
        return 2 * np.outer(k, k) - np.eye(3)
    k = v / s
    K = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + s * K + (1 - c) * (K @ K)


def place_frame(scene, item, frame_home):
    """Move ``item``'s joint anchor so its home frame (core world, at home) is
    ``frame_home``; placed through the parent link's current displacement, and stored
    as the frame's home (so return-to-home and set-home agree)."""
    anchor = item.anchor
    d = sc.scene_displacement(scene, item.parent)
    anchor.matrix_world = sc.matrix_core_to_host(d @ frame_home)
    stored = convert.matrix_core_to_stored(frame_home)
    for it in scene.jointwise.joints:
        if it.joint == item.joint:
            it.anchor_home = stored
    sc.clear_cache()


def _selection(obj):
    """World points (ring) or (centres, normals, areas) of the selected faces of an
    edit-mode mesh, by the select mode: face mode takes faces, else vertices."""
    import bmesh
    bm = bmesh.from_edit_mesh(obj.data)
    mw = np.array(obj.matrix_world, dtype=float)
    lin, t = mw[:3, :3], mw[:3, 3]
    face_mode = bpy.context.tool_settings.mesh_select_mode[2]
    if face_mode:
        faces = [f for f in bm.faces if f.select]
        if not faces:
            return "faces", None
        normal_m = np.linalg.inv(lin).T
        centres = np.array([tuple(f.calc_center_median()) for f in faces]) @ lin.T + t
        normals = np.array([tuple(f.normal) for f in faces]) @ normal_m.T
        scale = abs(np.linalg.det(lin)) ** (2 / 3) if np.linalg.det(lin) != 0 else 0.0
        areas = np.array([f.calc_area() for f in faces]) * scale
        return "faces", (centres, normals, areas)
    verts = [v for v in bm.verts if v.select]
    return "vertices", np.array([tuple(v.co) for v in verts]).reshape(-1, 3) @ lin.T + t


class JOINTWISE_OT_axis_from_selection(Base, bpy.types.Operator):
    """Set the active joint's axis and point from the selected rim of a hole or shaft
    (vertices or edges) or the selected side faces of a cylinder, by a least-squares fit"""
    bl_idname = "jointwise.axis_from_selection"
    bl_label = "Fit Axis to Selection"

    def run(self, context):
        scene = context.scene
        obj = context.edit_object
        if obj is None or obj.type != 'MESH' or context.mode != 'EDIT_MESH':
            return self.fail("enter Edit Mode of a mesh and select the rim of a hole or shaft, "
                              "or the side faces of a cylinder")
        try:
            item = active_joint(scene)
            if item.type == "fixed" or not sc.object_alive(scene, item.anchor):
                raise SceneError(f"joint {item.joint!r} has no axis to set (a fixed joint, or its "
                                    "anchor is missing)")
            old = sc.joint_frame_home(scene, item)
            what, data = _selection(obj)
            hint = old[:3, 2]
            # the fit works in world coordinates at the current pose; the frame is stored at home
            d = sc.scene_displacement(scene, item.parent)
            hint_world = d[:3, :3] @ hint
            if what == "faces":
                if data is None:
                    raise fit.FitError("no faces are selected")
                result = fit.axis_from_faces(data[0], data[1], weights=data[2], hint=hint_world)
                source = f"{result.count} faces"
            else:
                result = fit.axis_from_ring(data, hint=hint_world)
                source = f"{result.count} vertices"
        except (fit.FitError, SceneError) as exc:
            return self.fail(f"axis from selection: {exc}")
        inv_d = convert.inverse(d)
        frame_world = np.eye(4)
        frame_world[:3, :3] = convert.orientation(result.axis, d[:3, :3] @ old[:3, 0])
        # the joint point: where the old one drops onto the fitted axis (the anchor stays in
        # its plane; any point of the axis is the same joint)
        old_point = (d @ old)[:3, 3]
        along = float(np.dot(old_point - result.point, result.axis))
        frame_world[:3, 3] = result.point + along * result.axis
        place_frame(scene, item, inv_d @ frame_world)
        turned = math.degrees(math.acos(max(-1.0, min(1.0, float(np.dot(hint_world, result.axis))))))
        off = old_point - result.point
        shift = float(np.linalg.norm(off - np.dot(off, result.axis) * result.axis))
        msg = (f"joint {item.joint}: axis fitted to {source} (radius {format_length(scene, result.radius)}), "
               f"fit residual {format_length(scene, result.residual)} root mean square; "
               f"axis turned {turned:.3g}° and moved {format_length(scene, shift)}")
        return self.done(msg, scene)

def tilts_text(tilts, tolerance_deg):
    """Tidy Axes refused: the tilts beyond the tolerance, from the core's ``Tilt`` fields
    (joint, reference, loop, relation, tilt), in the extension's words."""
    parts = []
    for t in tilts:
        what = "parallel with" if t.relation == "parallel" else "perpendicular to"
        parts.append(f"joint {t.joint}: axis tilted {t.degrees:.3g}° out of {what} the axis of joint "
                     f"{t.reference} (loop closed by {t.loop}), beyond the tolerance of {tolerance_deg:.3g}°")
    return "; ".join(parts) + "; nothing changed (raise the angle tolerance, or fix the model)"


class JOINTWISE_OT_axes_tidy(Base, bpy.types.Operator):
    """Make loop axes that are nearly but not exactly parallel exactly parallel (slides
    exactly perpendicular or parallel to them), within the angle tolerance; a loop whose
    axes are a little out of parallel locks"""
    bl_idname = "jointwise.axes_tidy"
    bl_label = "Tidy Axes"

    tolerance: FloatProperty(name="Angle Tolerance", subtype='ANGLE', unit='ROTATION',
                             default=math.radians(2.0), min=0.0, max=math.radians(45.0),
                             description="Largest tilt to correct; a larger one is refused")

    def run(self, context):
        scene = context.scene
        try:
            from jointwise import tidy
            mech = sc.mechanism_from_scene(scene)
            tilts = tidy.plan(mech, math.degrees(self.tolerance))
        except tidy.TiltError as exc:
            return self.fail(tilts_text(exc.tilts, math.degrees(self.tolerance)))
        except (SceneError, ValueError) as exc:
            return self.fail(posing.error_text(scene, exc))
        if not tilts:
            msg = "axes tidy: every loop axis is already exact"
            return self.done(msg, scene)
        firsts = sc.first_items(scene.jointwise)
        moved = []
        for t in tilts:
            item = firsts[t.joint]
            old = sc.joint_frame_home(scene, item)
            new = old.copy()
            new[:3, :3] = _rotation_between(old[:3, 2], t.fixed) @ old[:3, :3]
            place_frame(scene, item, new)
            moved.append(f"{t.joint} turned {t.degrees:.3g}°")
        msg = f"axes tidy: {', '.join(moved)} (now exact with {', '.join(sorted({t.reference for t in tilts}))})"
        return self.done(msg, scene)

CLASSES = (JOINTWISE_OT_axis_from_selection, JOINTWISE_OT_axes_tidy)
