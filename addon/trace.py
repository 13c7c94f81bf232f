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

import bpy
import numpy as np

from . import bake as bk
from . import scene as sc
from .convert import SceneError

TAG = "jointwise_trace"
COLOUR = (0.85, 0.25, 0.55, 1.0)


def point_measures(scene):
    """{name: (link, at)} of the scene's point measures (``scene.jointwise.measures``, the
    file's and those added in the UI): ``at`` the world position at home, scene units."""
    jw = scene.jointwise
    if len(jw.measures):
        return {m.name: (m.link_a, [float(v) for v in m.at_a]) for m in jw.measures if m.kind == 'POINT'}
    k = sc.length_file_to_host(scene, jw.file_length_unit)  # a file saved before the list
    text = jw.measures_json
    try:
        measures = json.loads(text) if text else {}
    except ValueError:
        raise SceneError("the stored measures of the mechanism cannot be read; "
                            "re-import the mechanism file") from None
    out = {}
    for name, m in measures.items():
        if isinstance(m, dict) and m.get("type") == "point":
            out[name] = (str(m["link"]), [float(v) * k for v in m["at"]])
    return out


def trace_points(scene, measure, frame_start, frame_end, drive="", value_from=0.0, value_to=0.0):
    """World positions (N, 3), scene units, of point measure ``measure`` at the frames
    ``frame_start..frame_end`` (solved as the bake solves them).

    Raises SceneError when the measure is unknown or a frame cannot be solved."""
    jw = scene.jointwise
    points = point_measures(scene)
    if measure not in points:
        known = ", ".join(sorted(points)) or "none"
        raise SceneError(f"no point measure named {measure!r} in the mechanism "
                            f"(point measures: {known})")
    link, at = points[measure]
    if link not in jw.links:
        raise SceneError(f"measure {measure!r}: its link {link!r} is not among the links")
    p = np.append(np.asarray(at, dtype=float), 1.0)
    solved = bk.solve_frames(scene, frame_start, frame_end, drive, value_from, value_to)
    frames = solved.frames
    fail = solved.first_failure()
    if fail is not None:
        raise SceneError(f"frame {fail[0]}: {fail[1]}; no trace was written")
    g = sc.ground_displacement(scene)
    if link == jw.ground:
        d = np.tile(np.eye(4), (len(frames), 1, 1))
    else:
        d = np.asarray(solved.links[link], dtype=float)
    xyz = np.einsum("ij,njk,k->ni", g, d, p)[:, :3]
    if not np.all(np.isfinite(xyz)):
        raise SceneError(f"measure {measure!r}: non-finite points; no trace was written")
    return xyz


def _material(name, colour):
    mat = bpy.data.materials.get(name)
    if mat is None:
        mat = bpy.data.materials.new(name)
        mat.diffuse_color = colour
    return mat


def curve_object(scene, name, tag, key, xyz, bevel, colour, *, cyclic):
    """Create (or replace: objects whose ``tag`` property is ``key``) a curve object
    ``name`` of one poly spline through ``xyz`` (its own coordinates), bevelled by
    ``bevel``, in the material ``jointwise <tag word>`` of ``colour``; linked to the scene,
    unparented.  Traces and cam profiles both draw through this."""
    for obj in [o for o in scene.objects if o.get(tag) == key]:
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
    spline.use_cyclic_u = bool(cyclic)
    curve.materials.append(_material("jointwise " + tag.split("_", 1)[-1], colour))
    obj = bpy.data.objects.new(name, curve)
    obj[tag] = key
    obj.color = colour
    scene.collection.objects.link(obj)
    return obj


def write_curve(scene, measure, xyz, bevel):
    """Create (or replace) the curve object ``trace NAME`` holding the points ``xyz``."""
    closed = len(xyz) > 2 and np.linalg.norm(xyz[0] - xyz[-1]) <= 1e-6 * max(1.0, float(np.abs(xyz).max()))
    obj = curve_object(scene, f"trace {measure}", TAG, measure, xyz, bevel, COLOUR, cyclic=closed)
    jw = scene.jointwise
    ground = jw.links.get(jw.ground)
    gobj = sc.link_object(scene, ground, required=False) if ground is not None else None
    if gobj is not None:
        obj.parent = gobj
        obj.matrix_parent_inverse = gobj.matrix_world.inverted()
    return obj
