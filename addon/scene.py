"""Scene mapping: scene objects and ``scene.jointwise`` <-> the core's mechanism and poses.

Conventions (the pure conversions are in :mod:`.convert`)
-----------
* ``mathutils.Matrix`` is built from *rows* (``Matrix(rows)``), never by assigning a
  nested list to ``matrix_world`` (that is read column by column).
* The mechanism handed to the core is built with ``length_unit = "m"`` and
  ``angle_unit = "rad"`` but carries BU numbers: the core never converts lengths, so
  the numbers stay BU and no conversion happens on the way back.
* Placement: ``G`` = displacement of the ground link's object from its home (identity
  when the ground is the world). A link at core displacement ``D`` is placed at
  ``G @ D @ H`` (``H`` its stored home world matrix).
* Joint frames come from the anchors, read in the parent link's frame (see
  ``properties``): ``frame_home = inv(W_parent @ inv(H_parent)) @ anchor.matrix_world``.
"""
from __future__ import annotations

import contextlib
import itertools
import json
import math

import numpy as np
from mathutils import Matrix

from . import properties
from .convert import (SceneError, check_finite, close, display_length, file_geometry,
                      home_inverse, inverse, matrix_stored_to_core, settled_frame, snap_lines,
                      unit_column)
from . import convert

__all__ = ["SceneError"]


def core():
    """The core package (imported late: its wheel is on the path only once enabled)."""
    import jointwise
    return jointwise


# -- matrices and units -------------------------------------------------------------------

def matrix_host_to_core(m):
    """``mathutils.Matrix`` (4x4) -> numpy float64 4x4 (rows stay rows)."""
    return np.array(m, dtype=float)  # mathutils gives rows


def matrix_core_to_host(a):
    """numpy 4x4 -> ``mathutils.Matrix``; refuses non-finite numbers."""
    a = np.asarray(a, dtype=float)
    if not np.all(np.isfinite(a)):
        raise SceneError("refusing to write a non-finite matrix into the scene")
    return Matrix(a.tolist())


def length_file_to_host(scene, unit):
    """Factor turning a length in file unit ``unit`` into scene units."""
    return convert.length_file_to_host(unit, scene.unit_settings.scale_length)


def value_factor_file_to_host(scene, kind, length_unit, angle_unit):
    if kind == "length":
        return length_file_to_host(scene, length_unit)
    return convert.angle_file_to_host(angle_unit)


#: the units of the scene mechanism's numbers, as a file problem about it quotes them
SCENE_UNITS = "numbers in radians and scene units"


def display_length_of(scene):
    """(label, factor) turning scene lengths (BU) into the scene's display unit."""
    if scene is None:
        return "BU", 1.0
    us = scene.unit_settings
    return display_length(us.system, us.length_unit, us.scale_length)


# -- objects and links -----------------------------------------------------------------

_ALIVE = {}  # scene pointer -> set of the scene's objects, while one pose holds it


@contextlib.contextmanager
def objects_held(scene):
    """Within this block the scene's objects are read once (a set), so :func:`object_alive`
    is a set lookup instead of a search by name per call; for one pose, where no object
    is added or deleted (nested blocks share the outer set)."""
    key = scene.as_pointer()
    if key in _ALIVE:
        yield
        return
    _ALIVE[key] = set(scene.objects)
    try:
        yield
    finally:
        _ALIVE.pop(key, None)


def object_alive(scene, obj):
    """The object still exists and is in this scene (deleted objects may linger in data)."""
    if obj is None:
        return False
    try:
        alive = _ALIVE.get(scene.as_pointer())
        if alive is not None:
            return obj in alive
        return scene.objects.get(obj.name) == obj
    except ReferenceError:
        return False


def link_object(scene, link, *, required=True):
    """The object of ``link`` (a ``JointwiseLink``), or a clear error if it is gone."""
    jw = scene.jointwise
    obj = link.object
    if object_alive(scene, obj):
        return obj
    if link.name == jw.ground and obj is None and not link.object_name:
        return None  # the world is the ground
    if not required:
        return None
    was = f" (it was {link.object_name!r})" if link.object_name else ""
    raise SceneError(f"link {link.name!r}: its object is missing{was}; it was deleted or "
                     f"never bound. Bind an object to the link or re-import the mechanism")


def ground_displacement(scene):
    """``G``: the ground object's displacement from its home, identity for the world."""
    jw = scene.jointwise
    link = jw.links.get(jw.ground)
    if link is None:
        return np.eye(4)
    obj = link_object(scene, link)
    if obj is None:
        return np.eye(4)
    return matrix_host_to_core(obj.matrix_world) @ home_inverse(link.home)


def scene_displacement(scene, link_name):
    """A link's displacement from home as the scene shows it now (includes ``G``)."""
    jw = scene.jointwise
    if link_name == jw.ground:
        return ground_displacement(scene)
    link = jw.links.get(link_name)
    if link is None:
        raise SceneError(f"no link named {link_name!r} in the scene's mechanism")
    obj = link_object(scene, link)
    return matrix_host_to_core(obj.matrix_world) @ home_inverse(link.home)


def zero_scaled(obj):
    """The first object in ``obj``'s parent chain (itself first) with a zero scale, or None."""
    o = obj
    while o is not None:
        if convert.is_singular(matrix_host_to_core(o.matrix_basis)):
            return o
        o = o.parent
    return None


def zero_scale_text(scene, link_name):
    """What to do when a link's placement is singular, naming the object to fix."""
    link = scene.jointwise.links.get(link_name)
    obj = link.object if link is not None else None
    culprit = zero_scaled(obj) if obj is not None else None
    name = culprit.name if culprit is not None else (obj.name if obj is not None else link_name)
    whose = "" if culprit is None or culprit == obj else f" (a parent of {obj.name!r})"
    return (f"link {link_name!r}: give object {name!r}{whose} a non-zero scale; it is scaled to "
            f"zero, so the link has no placement")


def first_items(jw):
    """The first coordinate item of every joint, in collection order: {joint: item}."""
    out = {}
    for item in jw.joints:
        if item.joint and item.joint not in out:
            out[item.joint] = item
    return out


def items_by_joint(jw):
    out = {}
    for it in jw.joints:
        out.setdefault(it.joint, []).append(it)
    return out


def joint_frame_home(scene, item, inverse_displacements=None):
    """Home frame (4x4, core world) of the joint of ``item`` from its anchor.
    ``inverse_displacements``: a dict caching inv(D) per parent link within one build."""
    anchor = item.anchor
    if not object_alive(scene, anchor):
        raise SceneError(f"joint {item.joint!r}: its anchor object is missing (deleted?); "
                         f"add the joint again or re-import the mechanism")
    cache = {} if inverse_displacements is None else inverse_displacements
    inv_d = cache.get(item.parent)
    if inv_d is None:
        try:
            inv_d = cache[item.parent] = inverse(scene_displacement(scene, item.parent))
        except SceneError:
            raise SceneError(zero_scale_text(scene, item.parent)) from None
    m = inv_d @ matrix_host_to_core(anchor.matrix_world)
    if not np.all(np.isfinite(m)):
        raise SceneError(f"joint {item.joint!r}: anchor {anchor.name!r} has a non-finite placement")
    return m


# -- scene -> core ------------------------------------------------------------------------

def mechanism_dict_from_scene(scene):
    """The ``from_dict`` structure of the scene's mechanism, in host units ("m" = BU, rad)."""
    jw = scene.jointwise
    if not jw.joints:
        raise SceneError("the scene has no mechanism: import a mechanism file or add a joint")
    if jw.ground not in jw.links:
        raise SceneError(f"ground link {jw.ground!r} is not among the links")
    data = {"format": 1,
            "mechanism": {"name": jw.name_text or scene.name, "length_unit": "m",
                          "angle_unit": "rad", "ground": jw.ground},
            "links": {}, "joints": {}}
    for link in jw.links:
        link_object(scene, link)  # raises a clear error when the object is gone
        data["links"][link.name] = {"object": link.name}
    groups = items_by_joint(jw)
    inv_d = {}
    try:
        geometry = json.loads(jw.geometry_json) if jw.geometry_json else {}
    except ValueError:
        geometry = {}
    to_host = length_file_to_host(scene, jw.file_length_unit)
    for joint, items in groups.items():
        first = items[0]
        jd = {"type": first.type, "parent": first.parent, "child": first.child}
        for side in ("parent", "child"):
            if getattr(first, side) not in jw.links:
                raise SceneError(f"joint {joint!r}: its {side} link {getattr(first, side)!r} is not a link")
        if first.type != "fixed":
            frame = joint_frame_home(scene, first, inv_d)
            frame = settled_frame(frame, matrix_stored_to_core(first.anchor_home))
            jd["point"] = frame[:3, 3].tolist()
            jd["axis"] = unit_column(frame, 2, joint, first.anchor.name, "Z")
            if first.type == "universal" or (first.use_axis2 and first.type in ("spherical", "planar")):
                jd["axis2"] = unit_column(frame, 0, joint, first.anchor.name, "X")
            file_geometry(jd, geometry.get(joint, {}), to_host)
        homes = [float(it.home) for it in items]
        jd["home"] = homes[0] if len(homes) == 1 else homes
        if any(it.use_limits for it in items):
            lims = [[float(it.limit_min), float(it.limit_max)] if it.use_limits else [-1e30, 1e30]
                    for it in items]
            jd["limits"] = lims[0] if len(lims) == 1 else lims
        if first.type == "helical":
            jd["lead"] = abs(float(first.lead))
            jd["hand"] = first.hand
        data["joints"][joint] = jd
    snap_lines(data["joints"])
    if jw.couplings:
        data["couplings"] = {c.name: ({"leader": c.leader, "follower": c.follower,
                                       "ratio": float(c.ratio), "offset": float(c.offset)} if not c.law_json
                                      else {"leader": c.leader, "follower": c.follower, **json.loads(c.law_json)})
                             for c in jw.couplings}
    check_finite(data, "scene mechanism")
    return data


_CACHE = {}


def clear_cache():
    _CACHE.clear()


def _flat(m):
    return tuple(itertools.chain.from_iterable(m))


def fingerprint(scene):
    """Everything the scene's mechanism is built from, read cheaply, or None when it cannot
    be read cheaply. An anchor parented to its joint's parent link object has the home frame
    ``H_parent @ matrix_parent_inverse @ matrix_basis`` whatever the pose, so its local
    matrices stand for its placement; any other anchor makes the fingerprint None."""
    jw = scene.jointwise
    us = scene.unit_settings
    links = jw.links
    parts = [jw.ground, jw.name_text, jw.file_length_unit, hash(jw.geometry_json), us.scale_length]
    objects = {}
    for link in links:
        obj = link.object
        alive = object_alive(scene, obj)
        objects[link.name] = obj if alive else None
        parts.append((link.name, link.object_name, alive, tuple(link.home)))
    for it in jw.joints:
        a = it.anchor
        place = None
        if a is not None and it.type != "fixed":
            if not object_alive(scene, a):
                return None
            p = objects.get(it.parent)
            if a.parent is not None and a.parent == p and a.parent_type == 'OBJECT':
                place = (_flat(a.matrix_parent_inverse), _flat(a.matrix_basis))
            elif a.parent is None and p is None:
                place = _flat(a.matrix_basis)
            else:
                return None
            if a.constraints:
                return None
        parts.append((it.name, it.joint, it.type, it.parent, it.child, it.kind, it.home, it.use_limits,
                      it.limit_min, it.limit_max, it.lead, it.hand, it.use_axis2,
                      tuple(it.anchor_home), a.name if a is not None else "", place))
    for c in jw.couplings:
        parts.append((c.name, c.leader, c.follower, c.ratio, c.offset, c.law_json))
    return tuple(parts)


def mechanism_from_scene(scene):
    """The core ``Mechanism`` of the scene, cached: while the fingerprint of the scene's data
    stays the same it is not read again; else it is rebuilt when the data changed beyond
    float32 noise in the anchors' placements."""
    key = scene.as_pointer()
    hit = _CACHE.get(key)
    fp = fingerprint(scene)
    if hit is not None and fp is not None and hit[2] == fp:
        return hit[1]
    data = mechanism_dict_from_scene(scene)
    if hit is not None and close(hit[0], data, 1e-6):
        _CACHE[key] = (hit[0], hit[1], fp)
        return hit[1]
    try:
        mech = core().from_dict(data, source=f"scene {scene.name!r}")
    except core().SpecError as exc:
        raise SceneError(convert.spec_text(exc, SCENE_UNITS)) from None
    _CACHE[key] = (data, mech, fp)
    return mech


# -- core -> scene --------------------------------------------------------------------------

def link_order(scene):
    """Links whose objects are moved, parents before children (object parenting)."""
    jw = scene.jointwise
    links = []
    for link in jw.links:
        if link.name == jw.ground:
            continue
        obj = link_object(scene, link)
        links.append((link, obj))
    objs = {obj for _, obj in links}

    def depth(obj):
        d, p = 0, obj.parent
        while p is not None:
            if p in objs:
                d += 1
            p = p.parent
        return d
    links.sort(key=lambda lo: depth(lo[1]))
    return links


def world_matrices(scene, displacements, g=None):
    """World matrix per link object for core displacements {link: 4x4 or Nx4x4}."""
    g = ground_displacement(scene) if g is None else g
    out = {}
    for link, obj in link_order(scene):
        d = displacements.get(link.name)
        if d is None:
            continue
        out[link.name] = (obj, g @ np.asarray(d) @ matrix_stored_to_core(link.home))
    return out


def apply_displacements(scene, displacements):
    """Place every link object: ``matrix_world = G @ D @ H``; children follow by parenting."""
    worlds = world_matrices(scene, displacements)
    for name, (obj, w) in worlds.items():
        if not np.all(np.isfinite(w)):
            raise SceneError(f"link {name!r}: the solved placement is not finite")
    with properties.quiet():  # jointwise's own placements: not a drag (see drag.py)
        for name, (obj, w) in worlds.items():
            obj.matrix_world = matrix_core_to_host(w)
        ctx = bpy_context()
        view_layer = getattr(ctx, "view_layer", None)
        if view_layer is not None and getattr(ctx, "scene", None) == scene:
            view_layer.update()  # children and anchors follow at once


def bpy_context():
    import bpy
    return bpy.context


def write_values(scene, joints):
    """Write solved coordinate values (host units) into the items (no update callbacks)."""
    jw = scene.jointwise
    with properties.quiet():
        for item in jw.joints:  # one pass (a look-up by name searches the collection)
            v = joints.get(item.name)
            if v is None or not math.isfinite(v):
                continue
            if abs(item.value - v) > 1e-12 * max(1.0, abs(v)):
                item.value = v
            item.last = v
