"""Plate cam outlines: ``jointwise.cam_profile`` draws the cam of a motion-law coupling.

``jointwise.cam_profile(coupling=NAME, base_radius=RB, roller_radius=RR, offset=E)`` (scene
length units) lays out, with the core's :mod:`jointwise.cam`, the plate cam that gives the
coupling's motion law to a translating roller follower, and writes its profile as a closed
curve object ``cam NAME`` parented to the leader's link object, so it turns with it.

Placement: the cam turns about the leader joint's axis; its plane passes through the
follower joint's point; the line of lift is the follower joint's axis (made perpendicular
to the cam's axis) and the cam-fixed ``y`` of :mod:`jointwise.cam` points along it when the
leader is at 0.  The outline is stored in the link object's own frame (its home placement
undone), so it sits right whatever the current pose.  Adding the profile of the same
coupling again replaces it.  All or nothing: a coupling that no cam can make is named and
no curve is written.
"""
from __future__ import annotations

import math

import bpy
import numpy as np
from bpy.props import FloatProperty, StringProperty

from . import scene as sc
from .reporting import Base, errors
from .trace import curve_object

TAG = "jointwise_cam"
COLOUR = (0.95, 0.75, 0.20, 1.0)


def _unit(v):
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


def profile_points(scene, coupling, base_radius, roller_radius, offset):
    """(leader link name, points (N, 3) in that link's object frame, warnings) of the cam."""
    from jointwise.cam import cam_profile, cam_warnings
    jw = scene.jointwise
    mech = sc.mechanism_from_scene(scene)
    if coupling not in mech.couplings:
        known = ", ".join(mech.couplings) or "none"
        raise sc.SceneError(f"no coupling named {coupling!r} (couplings: {known})")
    c = mech.couplings[coupling]
    res = cam_profile(mech, coupling, base_radius, roller_radius, offset,
                      np.radians(np.arange(0.0, 360.0, 1.0)))
    lead = mech.joints[mech.joint_of(c.leader)]
    foll = mech.joints[mech.joint_of(c.follower)]
    z = _unit(lead.axis)
    y = foll.axis - np.dot(foll.axis, z) * z
    if np.linalg.norm(y) < 1e-9:
        raise sc.SceneError(f"coupling {coupling!r}: the follower {c.follower!r} slides along the cam's axis; "
                            "a plate cam needs a line of lift across it")
    y = _unit(y)
    x = np.cross(y, z)
    o = np.asarray(lead.point, float)
    o = o + z * np.dot(np.asarray(foll.point, float) - o, z)
    # the cam at home has turned by the leader's home value from the cam-fixed frame
    h = float(mech.home[mech.coordinates.index(c.leader)])
    ch, shh = math.cos(h), math.sin(h)
    px, py = res["profile"][:, 0], res["profile"][:, 1]
    wx, wy = ch * px - shh * py, shh * px + ch * py
    world = o + wx[:, None] * x + wy[:, None] * y
    link = lead.child if lead.child != mech.ground else lead.parent
    home = np.array(jw.links[link].home, dtype=float).reshape(4, 4)
    local = (np.linalg.inv(home) @ np.c_[world, np.ones(len(world))].T).T[:, :3]
    warns = cam_warnings(res)
    return link, local, warns


def write_curve(scene, coupling, link, local, bevel):
    """Create (or replace) the curve object ``cam NAME`` parented to ``link``'s object."""
    jw = scene.jointwise
    parent = sc.link_object(scene, jw.links[link])
    obj = curve_object(scene, f"cam {coupling}", TAG, coupling, local, bevel, COLOUR, cyclic=True)
    obj.parent = parent
    obj.matrix_parent_inverse.identity()
    obj.matrix_basis.identity()
    return obj


class JOINTWISE_OT_cam_profile(Base, bpy.types.Operator):
    """Draw the plate cam of a motion-law coupling (translating roller follower) as a curve turning with the leader"""
    bl_idname = "jointwise.cam_profile"
    bl_label = "Cam Profile"
    coupling: StringProperty(name="Coupling", default="",
                             description="A program or table coupling from a turning leader to a sliding follower")
    base_radius: FloatProperty(name="Base radius", default=0.0, min=0.0, subtype='DISTANCE',
                               description="Base-circle radius of the cam (scene length)")
    roller_radius: FloatProperty(name="Roller radius", default=0.0, min=0.0, subtype='DISTANCE',
                                 description="Roller radius of the follower; 0 for a knife edge")
    offset: FloatProperty(name="Offset", default=0.0, subtype='DISTANCE',
                          description="Offset of the line of lift from the cam's centre")

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        if not jw.joints:
            return self.fail("the scene has no mechanism: import a mechanism file first")
        if not self.coupling:
            return self.fail("name the coupling whose cam to draw")
        values = (self.base_radius, self.roller_radius, self.offset)
        if not all(math.isfinite(v) for v in values):
            return self.fail("cam sizes must be finite")
        try:
            link, local, warns = profile_points(scene, self.coupling, *values)
            mech = sc.mechanism_from_scene(scene)
            size = float(getattr(mech, "size", 1.0))
            obj = write_curve(scene, self.coupling, link, local, 0.004 * size)
        except errors() as exc:
            return self.fail_on(context, f"cannot draw the cam of {self.coupling!r}", exc)
        for w in warns:
            self.report({'WARNING'}, w)
        return self.done(f"cam of {self.coupling!r} drawn as {obj.name!r} on {obj.parent.name!r}")


CLASSES = (JOINTWISE_OT_cam_profile,)
