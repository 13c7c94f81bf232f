"""Between the core and the scene: the only module that converts units and matrices.

Conventions
-----------
* Core matrices are numpy 4x4 float64, column vectors, translation in ``M[:3, 3]``;
  ``mathutils.Matrix`` is built from *rows* (``Matrix(rows)``), never by assigning a
  nested list to ``matrix_world`` (that is read column by column).
* Stored matrices (``links[i].home``, ``joints[i].marker_home``) are 16 floats, row-major.
* Host units: radians and scene length units (BU). A mechanism file in unit ``u``
  converts with ``BU = value * metres(u) / unit_settings.scale_length``.
* The mechanism handed to the core is built with ``length_unit = "m"`` and
  ``angle_unit = "rad"`` but carries BU numbers: the core never converts lengths, so
  the numbers stay BU and no conversion happens on the way back.
* Placement: ``G`` = displacement of the ground link's object from its home (identity
  when the ground is the world). A link at core displacement ``D`` is placed at
  ``G @ D @ H`` (``H`` its stored home world matrix).
* Joint frames come from the markers, read in the parent link's frame (see
  ``properties``): ``frame_home = inv(W_parent @ inv(H_parent)) @ marker.matrix_world``.
"""
from __future__ import annotations

import json
import math
import re

import numpy as np
from mathutils import Matrix

METRES = {"mm": 0.001, "cm": 0.01, "m": 1.0, "in": 0.0254}
DEGREE = math.pi / 180.0


class SceneError(ValueError):
    """The scene's mechanism cannot be used as it is; the message says what and where."""


def core():
    """The core package (imported late: its wheel is on the path only once enabled)."""
    import jointwise
    return jointwise


# -- matrices ------------------------------------------------------------------------

def matrix_host_to_core(m):
    """``mathutils.Matrix`` (4x4) -> numpy float64 4x4 (rows stay rows)."""
    return np.array(m, dtype=float)  # mathutils gives rows


def matrix_core_to_host(a):
    """numpy 4x4 -> ``mathutils.Matrix``; refuses non-finite numbers."""
    a = np.asarray(a, dtype=float)
    if not np.all(np.isfinite(a)):
        raise SceneError("refusing to write a non-finite matrix into the scene")
    return Matrix(a.tolist())


def matrix_stored_to_core(flat):
    return np.array(flat, dtype=float).reshape(4, 4)


def matrix_core_to_stored(a):
    return [float(x) for x in np.asarray(a, dtype=float).reshape(16)]


def inverse(m):
    """Inverse of an affine 4x4; the transpose formula when the rotation part is rigid."""
    m = np.asarray(m, dtype=float)
    r = m[:3, :3]
    out = np.eye(4)
    if np.abs(r.T @ r - np.eye(3)).max() < 1e-5:
        out[:3, :3] = r.T
    else:
        out[:3, :3] = np.linalg.inv(r)
    out[:3, 3] = -out[:3, :3] @ m[:3, 3]
    return out


_HOME_INVERSE = {}


def home_inverse(flat):
    """inv(H) of a stored home matrix (cached: homes change only on set-home)."""
    key = tuple(flat)
    hit = _HOME_INVERSE.get(key)
    if hit is None:
        if len(_HOME_INVERSE) > 4096:
            _HOME_INVERSE.clear()
        hit = _HOME_INVERSE[key] = inverse(matrix_stored_to_core(key))
    return hit


# -- units -----------------------------------------------------------------------------

def scene_scale(scene):
    s = float(scene.unit_settings.scale_length)
    return s if s > 0 and math.isfinite(s) else 1.0


def length_file_to_host(scene, unit):
    """Factor turning a length in file unit ``unit`` into scene units."""
    return METRES[unit] / scene_scale(scene)


def angle_file_to_host(unit):
    return DEGREE if unit == "deg" else 1.0


def value_factor_file_to_host(scene, kind, length_unit, angle_unit):
    return length_file_to_host(scene, length_unit) if kind == "length" else angle_file_to_host(angle_unit)


# -- objects and links -----------------------------------------------------------------

def object_alive(scene, obj):
    """The object still exists and is in this scene (deleted objects may linger in data)."""
    if obj is None:
        return False
    try:
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


def first_items(jw):
    """The first coordinate item of every joint, in collection order: {joint: item}."""
    out = {}
    for item in jw.joints:
        if item.joint and item.joint not in out:
            out[item.joint] = item
    return out


def joint_items(jw, joint):
    return [it for it in jw.joints if it.joint == joint]


def items_by_joint(jw):
    out = {}
    for it in jw.joints:
        out.setdefault(it.joint, []).append(it)
    return out


def joint_frame_home(scene, item, inverse_displacements=None):
    """Home frame (4x4, core world) of the joint of ``item`` from its marker.
    ``inverse_displacements``: a dict caching inv(D) per parent link within one build."""
    marker = item.marker
    if not object_alive(scene, marker):
        raise SceneError(f"joint {item.joint!r}: its marker object is missing (deleted?); "
                         f"add the joint again or re-import the mechanism")
    cache = {} if inverse_displacements is None else inverse_displacements
    inv_d = cache.get(item.parent)
    if inv_d is None:
        inv_d = cache[item.parent] = inverse(scene_displacement(scene, item.parent))
    m = inv_d @ matrix_host_to_core(marker.matrix_world)
    if not np.all(np.isfinite(m)):
        raise SceneError(f"joint {item.joint!r}: marker {marker.name!r} has a non-finite placement")
    return m


def _settled_frame(frame, item):
    """The stored home frame where the marker, read back through a moved link, still says
    the same (float32 noise grows with every placement it passes through, and an
    overconstrained loop such as a double Hooke's shaft locks on a few micrometres)."""
    home = matrix_stored_to_core(item.marker_home)
    scale = max(1.0, float(np.abs(home[:3, 3]).max()))
    if (np.abs(frame[:3, :3] - home[:3, :3]).max() <= 1e-5
            and np.abs(frame[:3, 3] - home[:3, 3]).max() <= 1e-5 * scale):
        return home
    return frame


def _file_geometry(jd, original, to_host):
    """The imported file's exact point and axes where the scene's (float32) ones match them."""
    for key in ("point", "axis", "axis2"):
        if key not in jd or key not in original:
            continue
        new, old = np.array(jd[key], float), np.array(original[key], float)
        if key == "point":
            old = old * to_host
            if np.abs(new - old).max() <= 1e-5 * max(1.0, float(np.abs(old).max())):
                jd[key] = old.tolist()
        else:
            n = np.linalg.norm(old)
            if n > 0 and np.abs(new / np.linalg.norm(new) - old / n).max() <= 1e-5:
                jd[key] = (old / n).tolist()


def _unit_column(m, col, item, what):
    v = m[:3, col]
    n = float(np.linalg.norm(v))
    scale = max(1.0, float(np.linalg.norm(m[:3, 3])))
    if not n > 1e-9 * scale:
        raise SceneError(f"joint {item.joint!r}: the {what} axis of marker {item.marker.name!r} "
                         f"has zero length (marker scaled to zero?); a joint axis needs a direction")
    return (v / n).tolist()


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
            frame = _settled_frame(frame, first)
            jd["point"] = frame[:3, 3].tolist()
            jd["axis"] = _unit_column(frame, 2, first, "Z")
            if first.type == "universal" or (first.use_axis2 and first.type in ("spherical", "planar")):
                jd["axis2"] = _unit_column(frame, 0, first, "X")
            _file_geometry(jd, geometry.get(joint, {}), to_host)
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
        data["couplings"] = {c.name: {"leader": c.leader, "follower": c.follower,
                                      "ratio": float(c.ratio), "offset": float(c.offset)}
                             for c in jw.couplings}
    _check_finite(data, "scene mechanism")
    return data


SNAP = 1e-5  # relative: well above float32 noise (~1e-7), far below any modelling intent


def snap_lines(joints):
    """Undo float32 noise in joint frames read from markers (in place).

    Axis components below SNAP become 0; axes parallel to an earlier joint's axis within
    SNAP rad take that axis; points within SNAP x size of an earlier joint's line on a
    parallel axis move onto that line. Without this, coaxial or parallel joints (a screw
    and its collar, a slide along a screw) come out a few 1e-7 apart, and such a loop
    cannot close to the core's tolerance once it has turned a few times."""
    pts = np.array([j["point"] for j in joints.values() if "point" in j], dtype=float).reshape(-1, 3)
    size = 1.0
    if len(pts) > 1:
        size = max(1.0, float(np.ptp(pts, axis=0).max()))
    ref_axes = np.zeros((0, 3))
    ref_points = np.zeros((0, 3))
    for j in joints.values():
        if "axis" not in j:
            continue
        for key in ("axis", "axis2"):
            if key not in j:
                continue
            a = np.asarray(j[key], float)
            a = np.where(np.abs(a) < SNAP, 0.0, a)
            a = a / np.linalg.norm(a)
            if key == "axis":
                p = np.asarray(j["point"], float)
                p = np.where(np.abs(p) < SNAP * size, 0.0, p)
                hit = np.flatnonzero(np.linalg.norm(np.cross(ref_axes, a), axis=1) < SNAP)
                if len(hit):
                    r, rp = ref_axes[hit[0]], ref_points[hit[0]]
                    a = r if a @ r > 0 else -r
                    off = (p - rp) - r * ((p - rp) @ r)
                    if np.linalg.norm(off) < SNAP * size:
                        p = rp + r * ((p - rp) @ r)
                else:
                    ref_axes = np.vstack([ref_axes, a])
                    ref_points = np.vstack([ref_points, p])
                j["point"] = p.tolist()
            j[key] = a.tolist()


def _check_finite(obj, where):
    if isinstance(obj, dict):
        for k, v in obj.items():
            _check_finite(v, f"{where}.{k}")
    elif isinstance(obj, (list, tuple)):
        for v in obj:
            _check_finite(v, where)
    elif isinstance(obj, float) and not math.isfinite(obj):
        raise SceneError(f"{where}: value is not finite ({obj})")


def _close(a, b, tol):
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(_close(a[k], b[k], tol) for k in a)
    if isinstance(a, (list, tuple)):
        return isinstance(b, (list, tuple)) and len(a) == len(b) and all(_close(x, y, tol) for x, y in zip(a, b))
    if isinstance(a, float) or isinstance(b, float):
        try:
            return abs(float(a) - float(b)) <= tol * max(1.0, abs(float(a)))
        except (TypeError, ValueError):
            return False
    return a == b


_CACHE = {}


def clear_cache():
    _CACHE.clear()


def mechanism_from_scene(scene):
    """The core ``Mechanism`` of the scene (cached while the scene's data stays the same,
    up to float32 noise in the markers' placements)."""
    data = mechanism_dict_from_scene(scene)
    key = scene.as_pointer()
    hit = _CACHE.get(key)
    if hit is not None and _close(hit[0], data, 1e-6):
        return hit[1]
    try:
        mech = core().from_dict(data, source=f"scene {scene.name!r}")
    except core().SpecError as exc:
        raise SceneError(str(exc)) from None
    _CACHE[key] = (data, mech)
    return mech


def loop_joints(mech):
    out = set()
    for loop in getattr(mech, "loops", []):
        for step in loop.steps:
            out.add(step[0])
    return out


def animated_coordinates(scene):
    """Names of coordinates whose value (or a view of it) has an F-curve on the scene."""
    from . import bake
    return set(bake.coordinate_fcurves(scene))


def loop_groups(mech):
    """{joint: group id} for joints in loops; loops sharing a joint share a group."""
    group = {}
    parent = list(range(len(getattr(mech, "loops", []))))

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i
    for i, loop in enumerate(getattr(mech, "loops", [])):
        for step in loop.steps:
            j = step[0]
            if j in group:
                parent[find(i)] = find(group[j])
            else:
                group[j] = i
    return {j: find(g) for j, g in group.items()}


def held_values(scene, mech, extra=(), values=None):
    """The values to hold for a solve: drives, animated coordinates, coordinates outside
    every loop (nothing else would place them) and ``extra`` (the one being dragged).

    Dragging a passive loop coordinate releases the (not animated) drives of its loop
    group, so the rest of the loop follows it instead of refusing."""
    jw = scene.jointwise
    groups = loop_groups(mech)
    animated = animated_coordinates(scene)
    known = set(mech.coordinates)
    released = {groups[jw.joints[e].joint] for e in extra
                if e in jw.joints and not jw.joints[e].drive and jw.joints[e].joint in groups}
    held = {}
    for item in jw.joints:
        name = item.name
        if name not in known:
            continue  # a fixed joint: no coordinate
        free = groups.get(item.joint) in released  # the user moves a passive joint of this loop
        drive = item.drive and not free
        if drive or name in extra or (name in animated and not free) or item.joint not in groups:
            v = float(item.value) if values is None or name not in values else float(values[name])
            held[name] = v
    return held


def start_from_scene(scene, mech):
    """A warm start for ``Mechanism.pose`` from the values of the placement the scene
    shows (``last``: the last solved values), so the solve stays on the scene's branch."""
    jw = scene.jointwise
    q = []
    for c in mech.coordinates:
        item = jw.joints.get(c)
        q.append(float(item.last) if item is not None else 0.0)
    try:
        Pose = core().Pose
    except AttributeError:
        from jointwise.mechanism import Pose
    try:
        return Pose(joints=dict(zip(mech.coordinates, q)), links={}, converged=True,
                    residual=0.0, q=np.array(q, dtype=float))
    except TypeError:
        return None


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
    for name, (obj, w) in worlds.items():
        obj.matrix_world = matrix_core_to_host(w)
    ctx = bpy_context()
    view_layer = getattr(ctx, "view_layer", None)
    if view_layer is not None and getattr(ctx, "scene", None) == scene:
        view_layer.update()  # children and markers follow at once


def bpy_context():
    import bpy
    return bpy.context


def write_values(scene, joints):
    """Write solved coordinate values (host units) into the items (no update callbacks)."""
    from . import handlers
    jw = scene.jointwise
    with handlers.quiet():
        for name, v in joints.items():
            item = jw.joints.get(name)
            if item is None or not math.isfinite(v):
                continue
            if abs(item.value - v) > 1e-12 * max(1.0, abs(v)):
                item.value = v
            item.last = v


def set_status(scene, *, converged=True, error=0.0, singular=False, message="", mobility=None):
    jw = scene.jointwise
    jw.converged = bool(converged)
    jw.closure_error = float(error) if error is not None and math.isfinite(error) else 0.0
    jw.singular = bool(singular)
    jw.message = message_core_to_host(message, scene)
    if mobility is not None:
        jw.mobility = int(mobility)


def mobility_of(mech, pose=None):
    """Numeric mobility at ``pose`` (or home) if the core offers it, else None."""
    try:
        m = mech.mobility(None if pose is None else pose.q)
    except Exception:  # the core's mobility is an extra; never let it break a solve
        return None
    if isinstance(m, dict):
        m = m.get("numeric", m.get("kutzbach"))
    elif hasattr(m, "numeric"):
        m = m.numeric
    try:
        return int(m)
    except (TypeError, ValueError):
        return None


def snapshot(scene):
    """Values (the last solved ones) and link placements, to put back after a failed solve."""
    jw = scene.jointwise
    values = {it.name: float(it.last) for it in jw.joints}
    placements = []
    for link in jw.links:
        obj = link.object
        if object_alive(scene, obj) and link.name != jw.ground:
            placements.append((obj, obj.matrix_world.copy()))
    return values, placements


def restore(scene, snap, values=True):
    old_values, placements = snap
    if values:
        write_values(scene, old_values)
    for obj, m in placements:
        obj.matrix_world = m


def solve(scene, extra=(), values=None):
    """Solve the scene's mechanism for the current values; returns (mech, pose).

    Raises SceneError (scene data unusable) or the core's AssemblyError."""
    mech = mechanism_from_scene(scene)
    held = held_values(scene, mech, extra, values)
    start = start_from_scene(scene, mech)
    pose = mech.pose(held, start=start)
    if not pose.converged:
        err = core().AssemblyError
        raise err(f"the loops did not close (closure error {pose.residual:.3g})",
                  error=pose.residual)
    return mech, pose


def pose_scene(scene, extra=(), values=None, restore_values=True):
    """Solve and apply. On failure the scene is left as it was (values back at the last
    solved ones unless ``restore_values`` is false, e.g. for animated values) and the
    status says why. Returns (ok, message)."""
    snap = snapshot(scene)
    try:
        mech, pose = solve(scene, extra, values)
        apply_displacements(scene, pose.links)
        write_values(scene, pose.joints)
    except (SceneError, core().JointwiseError) as exc:
        restore(scene, snap, restore_values)
        msg = describe_error(exc)
        set_status(scene, converged=False, error=getattr(exc, "error", None), message=msg)
        return False, msg
    set_status(scene, converged=pose.converged, error=pose.residual, singular=pose.singular,
               message="singular: near a dead point" if pose.singular else "solved",
               mobility=mobility_of(mech, pose))
    return True, ""


_NUM = r"(-?\d+(?:\.\d+)?(?:e[-+]?\d+)?)"
_RAD_RANGE = re.compile(r"\[" + _NUM + r", " + _NUM + r"\] rad\b")
_RAD = re.compile(_NUM + r" rad\b")


_M_RANGE = re.compile(r"\[" + _NUM + r", " + _NUM + r"\] m\b")
_M = re.compile(_NUM + r" m\b")
_DISPLAY = {"MICROMETERS": ("um", 1e6), "MILLIMETERS": ("mm", 1e3), "CENTIMETERS": ("cm", 1e2),
            "METERS": ("m", 1.0), "KILOMETERS": ("km", 1e-3), "INCHES": ("in", 1 / 0.0254),
            "FEET": ("ft", 1 / 0.3048), "THOU": ("thou", 1 / 0.0000254), "MILES": ("mi", 1 / 1609.344)}


def _display_length(scene):
    """(label, factor) turning scene lengths (BU) into the scene's display unit."""
    try:
        us = scene.unit_settings
    except AttributeError:
        return "BU", 1.0
    if us.system == "NONE":
        return "BU", 1.0
    label, per_metre = _DISPLAY.get(us.length_unit, ("m", 1.0))
    return label, us.scale_length * per_metre


def message_core_to_host(msg, scene=None):
    """The core's message for the UI: angles in degrees, lengths in the scene's display
    unit (the scene mechanism is built in radians and scene units, so the core quotes
    radians, and scene units labelled "m")."""
    msg = _RAD_RANGE.sub(lambda m: f"[{math.degrees(float(m.group(1))):.5g}, "
                                   f"{math.degrees(float(m.group(2))):.5g}] deg", msg)
    msg = _RAD.sub(lambda m: f"{math.degrees(float(m.group(1))):.5g} deg", msg)
    if scene is None:
        try:
            import bpy
            scene = bpy.context.scene
        except (ImportError, AttributeError):
            scene = None
    label, k = _display_length(scene)
    msg = _M_RANGE.sub(lambda m: f"[{float(m.group(1)) * k:.6g}, {float(m.group(2)) * k:.6g}] {label}", msg)
    return _M.sub(lambda m: f"{float(m.group(1)) * k:.6g} {label}", msg)


def describe_error(exc):
    msg = str(exc)
    loop = getattr(exc, "loop", None)
    joint = getattr(exc, "joint", None)
    extra = []
    if loop and loop not in msg:
        extra.append(f"loop {loop!r}")
    if joint and joint not in msg:
        extra.append(f"check {joint!r}")
    return msg + (f" ({', '.join(extra)})" if extra else "")


# -- file <-> scene ---------------------------------------------------------------------------

def _orientation(z, x=None):
    """Rotation (3x3, columns X Y Z) with Z along ``z`` and X along ``x`` (or any)."""
    z = np.asarray(z, dtype=float)
    z = z / np.linalg.norm(z)
    if x is None:
        t = np.array([1.0, 0, 0]) if abs(z[0]) < 0.9 else np.array([0, 1.0, 0])
        x = t - z * (t @ z)
    x = np.asarray(x, dtype=float)
    x = x - z * (x @ z)
    x = x / np.linalg.norm(x)
    y = np.cross(z, x)
    return np.column_stack([x, y, z])


def validate_file_objects(scene, mech):
    """Scene objects for every link of a loaded mechanism: {link: object or None}."""
    out = {}
    missing = []
    for name, link in mech.links.items():
        obj = scene.objects.get(link.object)
        if obj is None:
            if name == mech.ground:
                out[name] = None  # the world is the ground
                continue
            missing.append(f"{name!r} -> object {link.object!r}")
        out[name] = obj
    if missing:
        raise SceneError(f"{mech.source}: no scene object for link {', '.join(missing)}")
    return out


def import_mechanism(scene, mech, objects, marker_collection):
    """Store a loaded mechanism (file units) in ``scene.jointwise`` (host units); the
    objects' current placements become home. Returns the markers made."""
    import bpy
    jw = scene.jointwise
    k = length_file_to_host(scene, mech.length_unit)  # angles: the core holds radians already
    data = mech.to_dict()
    for jname, j in mech.joints.items():  # everything checked before anything changes
        if j.type == "helical" and not math.isfinite(float(j.lead)):
            raise SceneError(f"{mech.source}: joints.{jname}: a lead angle of 90 degrees is a "
                             f"pure slide; model it as a prismatic joint")
    old_names = [it.name for it in jw.joints]
    remove_markers(scene)
    jw.links.clear()
    jw.joints.clear()
    jw.couplings.clear()
    jw.name_text = mech.name or ""
    jw.ground = mech.ground
    jw.file_length_unit = mech.length_unit
    jw.file_angle_unit = mech.angle_unit
    jw.measures_json = json.dumps(data.get("measures", {}))
    jw.geometry_json = json.dumps(_file_numbers(mech, data))
    for name in mech.links:
        link = jw.links.add()
        link.name = name
        obj = objects[name]
        link.object = obj
        link.object_name = obj.name if obj is not None else ""
        link.home = matrix_core_to_stored(matrix_host_to_core(obj.matrix_world) if obj else np.eye(4))
    size = max(float(getattr(mech, "size", 1.0)) * k, 1e-6)
    markers = []
    for jname, j in mech.joints.items():
        src = data["joints"][jname]
        marker = None
        if j.type != "fixed":
            marker = bpy.data.objects.new(f"joint {jname}", None)
            marker.empty_display_type = 'ARROWS'
            marker.empty_display_size = 0.15 * size
            marker["jointwise_marker"] = jname
            marker_collection.objects.link(marker)
            frame = np.eye(4)
            frame[:3, :3] = _orientation(j.axis, j.axis2)
            frame[:3, 3] = np.asarray(j.point, dtype=float) * k
            marker.matrix_world = matrix_core_to_host(frame)
            parent_obj = objects.get(j.parent)
            if parent_obj is not None:
                marker.parent = parent_obj
                marker.matrix_parent_inverse = parent_obj.matrix_world.inverted()
                marker.matrix_world = matrix_core_to_host(frame)
            markers.append(marker)
        kinds = list(j.kinds) or ["angle"]
        for i, c in enumerate(j.coordinates or [jname]):  # a fixed joint keeps one item
            item = jw.joints.add()
            item.name = c
            item.joint = jname
            item.slot = i + 1
            item.type = j.type
            item.parent = j.parent
            item.child = j.child
            item.kind = kinds[i]
            f = k if kinds[i] == "length" else 1.0  # core holds radians already
            item.home = float(j.home[i]) * f if i < len(j.home) else 0.0
            lim = j.limits[i] if i < len(j.limits) else None  # noqa: E501
            item.use_limits = lim is not None
            if lim is not None:
                item.limit_min, item.limit_max = float(lim[0]) * f, float(lim[1]) * f
            item.drive = bool(j.drive)
            item.marker = marker
            item.use_axis2 = "axis2" in src
            if j.type == "helical":
                item.lead = abs(float(j.lead)) * k
                item.hand = "left" if float(j.lead) < 0 or src.get("hand") == "left" else "right"
                item.thread = str(src.get("thread", ""))
            if marker is not None:
                item.marker_home = matrix_core_to_stored(frame)
    from . import handlers
    with handlers.quiet():
        for item in jw.joints:
            item.value = item.last = item.home
    for cname, c in mech.couplings.items():
        cp = jw.couplings.add()
        cp.name = cname
        cp.leader, cp.follower = c.leader, c.follower
        fl = value_factor_file_to_host(scene, mech.coordinate_kind(c.follower), mech.length_unit, mech.angle_unit)
        ll = value_factor_file_to_host(scene, mech.coordinate_kind(c.leader), mech.length_unit, mech.angle_unit)
        cp.ratio = float(c.ratio) * fl / ll
        cp.offset = float(c.offset) * fl
    # animation of joint values addresses items by index: keep it on the same names
    from . import bake
    new_index = {it.name: i for i, it in enumerate(jw.joints)}
    bake.remap_coordinate_paths(scene, {i: new_index.get(n) for i, n in enumerate(old_names)})
    clear_cache()
    return markers


def remove_markers(scene):
    import bpy
    for item in scene.jointwise.joints:
        m = item.marker
        if m is not None and m.get("jointwise_marker") is not None:
            try:
                bpy.data.objects.remove(m, do_unlink=True)
            except (ReferenceError, RuntimeError):
                pass


def export_dict(scene, length_unit=None, angle_unit=None):
    """The mechanism-file structure of the scene's mechanism, in file units."""
    jw = scene.jointwise
    host = mechanism_dict_from_scene(scene)
    lu = length_unit or jw.file_length_unit
    au = angle_unit or jw.file_angle_unit
    k = 1.0 / length_file_to_host(scene, lu)
    a = 1.0 / angle_file_to_host(au)
    out = {"format": 1, "mechanism": {}}
    if jw.name_text:
        out["mechanism"]["name"] = jw.name_text
    out["mechanism"].update({"length_unit": lu, "angle_unit": au, "ground": jw.ground})
    out["links"] = {}
    for link in jw.links:
        obj = link_object(scene, link)
        out["links"][link.name] = {"object": obj.name} if obj is not None else {}
    out["joints"] = {}
    groups = items_by_joint(jw)
    try:
        geometry = json.loads(jw.geometry_json) if jw.geometry_json else {}
    except ValueError:
        geometry = {}
    for jname, jd in host["joints"].items():
        items = groups[jname]
        first = items[0]

        def f(it):
            return k if it.kind == "length" else a
        e = {"type": jd["type"], "parent": jd["parent"], "child": jd["child"]}
        if "point" in jd:
            e["point"] = [_tidy(v * k) for v in jd["point"]]
            e["axis"] = [_tidy(v) for v in jd["axis"]]
        if "axis2" in jd:
            e["axis2"] = [_tidy(v) for v in jd["axis2"]]
        _keep_file_geometry(e, geometry.get(jname, {}), lu == jw.file_length_unit)
        same = lu == jw.file_length_unit and au == jw.file_angle_unit
        original = geometry.get(jname, {}) if same else {}
        homes = [_tidy(it.home * f(it)) for it in items]
        e["home"] = homes[0] if len(homes) == 1 else homes
        if "home" in original:  # a number for every coordinate, or one per coordinate
            old = original["home"]
            e["home"] = _file_number(e["home"], old if isinstance(old, list) or len(homes) == 1
                                     else [old] * len(homes))
        if any(it.use_limits for it in items):
            lims = [[_tidy(it.limit_min * f(it)), _tidy(it.limit_max * f(it))] for it in items]
            e["limits"] = lims[0] if len(lims) == 1 else lims
            if "limits" in original:
                old = original["limits"]
                if len(lims) > 1 and isinstance(old, list) and old and not isinstance(old[0], list):
                    old = [old] * len(lims)
                e["limits"] = _file_number(e["limits"], old)
        if first.drive:
            e["drive"] = True
        if first.type == "helical":
            lead = abs(first.lead) * k
            if first.thread and _thread_matches(first.thread, lead, lu):
                e["thread"] = first.thread
            else:
                e["lead"] = _file_number(_tidy(lead), original.get("lead"))
            e["hand"] = first.hand
        out["joints"][jname] = e
    same_units = lu == jw.file_length_unit and au == jw.file_angle_unit
    if jw.couplings:
        out["couplings"] = {}
        for c in jw.couplings:
            fi, li = jw.joints.get(c.follower), jw.joints.get(c.leader)
            ff = (k if fi.kind == "length" else a) if fi else 1.0
            lf = (k if li.kind == "length" else a) if li else 1.0
            exact = geometry.get(_COUPLINGS, {}).get(c.name, {}) if same_units else {}
            out["couplings"][c.name] = {"leader": c.leader, "follower": c.follower,
                                        "ratio": _file_number(_tidy(c.ratio * ff / lf), exact.get("ratio")),
                                        "offset": _file_number(_tidy(c.offset * ff), exact.get("offset"))}
    if jw.measures_json:
        try:
            measures = json.loads(jw.measures_json)
        except ValueError:
            measures = {}
        if measures and lu == jw.file_length_unit:
            out["measures"] = measures
    return out


#: Key of the couplings' exact numbers in ``geometry_json`` (not a possible joint name).
_COUPLINGS = "\u0000couplings"


def _file_numbers(mech, data):
    """The imported file's own numbers, kept for export (``geometry_json``): per joint its
    point and axes, home, limits and lead (file units); the couplings' ratio and offset."""
    out = {}
    for n, j in data.get("joints", {}).items():
        e = {k: list(j[k]) for k in ("point", "axis", "axis2") if k in j}
        for k in ("home", "limits"):
            if k in j:
                e[k] = j[k]
        joint = mech.joints.get(n)
        if joint is not None and joint.type == "helical" and math.isfinite(float(joint.lead)):
            e["lead"] = abs(float(joint.lead))
        out[n] = e
    if data.get("couplings"):
        out[_COUPLINGS] = {n: {"ratio": c["ratio"], "offset": c.get("offset", 0.0)}
                           for n, c in data["couplings"].items()}
    return out


def _file_number(new, old):
    """``old`` (the file's own number, or nested lists of them) where ``new`` (read back from a
    float32 property) says the same to float32 precision; else ``new``."""
    if isinstance(new, list):
        if not isinstance(old, list) or len(old) != len(new):
            return new
        return [_file_number(a, b) for a, b in zip(new, old)]
    if isinstance(old, bool) or not isinstance(old, (int, float)) or not math.isfinite(old):
        return new
    return float(old) if abs(new - old) <= 1e-6 * max(1.0, abs(old)) else new


def _keep_file_geometry(entry, original, same_unit):
    """Write the imported file's own numbers where the markers still say the same thing
    (up to float32 storage), so an unchanged mechanism exports without loss."""
    for key in ("point", "axis", "axis2"):
        if key not in entry or key not in original:
            continue
        new, old = np.array(entry[key], float), np.array(original[key], float)
        if key == "point":
            if same_unit and np.abs(new - old).max() <= 1e-6 * max(1.0, np.abs(old).max()):
                entry[key] = original[key]
        else:
            n_old = np.linalg.norm(old)
            if n_old > 0 and np.abs(new / np.linalg.norm(new) - old / n_old).max() <= 1e-6:
                entry[key] = original[key]


def _thread_matches(thread, lead_file, unit):
    try:
        from jointwise.joints import thread_lead
        return abs(thread_lead(thread)["lead"] * METRES["mm"] / METRES[unit] - lead_file) <= 1e-6 * max(1.0, lead_file)
    except Exception:  # an unknown preset: write the lead instead
        return False


def _tidy(v):
    """Round float32 noise away (7 significant digits: what a float32 property holds)."""
    v = float(v)
    if not math.isfinite(v):
        raise SceneError(f"refusing to export a non-finite number ({v})")
    r = float(f"{v:.7g}")
    return 0.0 if r == 0 else r
