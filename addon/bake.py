"""Bulk keyframes: read the animated joint values, solve every frame, write link keys.

Keys are written through the slotted-action API (action -> slot -> layer -> keyframe
strip -> channelbag -> F-curves) with ``keyframe_points.add`` + ``foreach_set``,
never one call per key; this works on Blender 4.4+ and 5.x alike.

Rotation keys follow each object's own ``rotation_mode``: quaternions are made
continuous by sign (q and -q are the same turn), Euler angles are unwrapped so
consecutive keys never jump by a full turn (compatible Euler), axis-angle comes from
the continuous quaternions.

Baked actions carry the custom property ``jointwise_bake``; an action the object had
before is remembered in ``jointwise_previous`` and put back by ``clear``.
"""
from __future__ import annotations

import math
import re

import bpy
import numpy as np

from . import scene as sc

_PATH = re.compile(r'^jointwise\.joints\[(?:(\d+)|"((?:[^"\\]|\\.)*)")\]\.(value|angle|length)$')
TAG = "jointwise_bake"
PREVIOUS = "jointwise_previous"
KEPT = "jointwise_kept"  # on an earlier action: we gave it a fake user while it is set aside
LINEAR = None  # enum value of 'LINEAR' for foreach_set, found once


# -- reading F-curves of the scene ----------------------------------------------------------

def action_fcurves(action, slot=None):
    """All F-curves of ``action`` for ``slot`` (all slots when None); 4.4+ and 5.x."""
    out = []
    layers = getattr(action, "layers", None)
    if layers is not None and len(layers):
        for layer in layers:
            for strip in layer.strips:
                slots = [slot] if slot is not None else list(action.slots)
                for s in slots:
                    bag = strip.channelbag(s) if s is not None else None
                    if bag is not None:
                        out.extend(bag.fcurves)
        return out
    legacy = getattr(action, "fcurves", None)  # 4.x legacy actions
    return list(legacy) if legacy is not None else []


def scene_fcurves(scene):
    ad = scene.animation_data
    if ad is None or ad.action is None:
        return []
    return action_fcurves(ad.action, getattr(ad, "action_slot", None))


def coordinate_fcurves(scene):
    """{coordinate name: (fcurve, view)} for F-curves on ``jointwise.joints[..]``;
    ``view`` is value, angle or length (all the same number in host units)."""
    jw = scene.jointwise
    out = {}
    for fc in scene_fcurves(scene):
        m = _PATH.match(fc.data_path)
        if not m or fc.mute:
            continue
        if m.group(1) is not None:
            i = int(m.group(1))
            if i >= len(jw.joints):
                continue
            name = jw.joints[i].name
        else:
            name = m.group(2).replace('\\"', '"')
            if name not in jw.joints:
                continue
        out.setdefault(name, (fc, m.group(3)))
    return out


def key_value(scene, data_path, frame, value):
    """One key on the scene's own action (the joint-value key button), written on the
    F-curve directly: the slotted action, its channelbag and the curve are made when
    missing, as the host's own keying would."""
    ad = scene.animation_data or scene.animation_data_create()
    action = ad.action
    if action is None:
        action = ad.action = bpy.data.actions.new(f"{scene.name} joint values")
    if not len(getattr(action, "layers", ())) and len(getattr(action, "fcurves", ())):
        curves = action.fcurves  # a 4.x legacy action keeps its F-curves on itself
    else:
        slot = getattr(ad, "action_slot", None)
        if slot is None:
            slot = action.slots.new(id_type='SCENE', name=scene.name)
            ad.action_slot = slot
        if not len(action.layers):
            action.layers.new("Layer").strips.new(type='KEYFRAME')
        curves = action.layers[0].strips[0].channelbag(slot, ensure=True).fcurves
    fc = next((f for f in curves if f.data_path == data_path and f.array_index == 0), None)
    if fc is None:
        fc = curves.new(data_path, index=0)
    fc.keyframe_points.insert(frame, value)
    fc.update()
    return fc


# -- solving ---------------------------------------------------------------------------------

def value_table(scene, mech, frames, ramp=None):
    """Held values per frame {coordinate: array (N,)} in host units.

    ``ramp`` = (coordinate, value_from, value_to): that coordinate goes linearly from
    ``value_from`` at the first frame to ``value_to`` at the last."""
    frames = np.asarray(frames, dtype=float)
    n = len(frames)
    held = sc.held_values(scene, mech, extra=(ramp[0],) if ramp else ())
    if ramp:
        # the ramped coordinate is the input of its loop group, as --drive is on the command
        # line: the group's other drives and animated values are released, not held against it
        groups = sc.loop_groups(mech)
        jw = scene.jointwise
        own = groups.get(jw.joints[ramp[0]].joint) if ramp[0] in jw.joints else None
        if own is not None:
            held = {k: v for k, v in held.items()
                    if k == ramp[0] or k not in jw.joints or groups.get(jw.joints[k].joint) != own}
    curves = coordinate_fcurves(scene)
    table = {}
    for name, v in held.items():
        if ramp and name == ramp[0]:
            t = np.linspace(0.0, 1.0, n) if n > 1 else np.zeros(1)
            table[name] = ramp[1] + (ramp[2] - ramp[1]) * t
        elif name in curves:
            fc = curves[name][0]
            table[name] = np.array([fc.evaluate(f) for f in frames], dtype=float)
        else:
            table[name] = np.full(n, float(v))
        bad = ~np.isfinite(table[name])
        if bad.any():
            raise sc.SceneError(f"coordinate {name!r} is not finite at frame {int(frames[bad][0])}")
    return table


class Solved:
    """Result of :func:`solve_frames`: links {name: (N, 4, 4)}, joints {name: (N,)}."""

    def __init__(self, frames, links, joints, converged, singular, reasons):
        self.frames = frames
        self.links = links
        self.joints = joints
        self.converged = converged
        self.singular = singular
        self.reasons = reasons

    def first_failure(self):
        """(frame, reason) of the first frame that must not be baked, else None."""
        for i, f in enumerate(self.frames):
            if not self.converged[i]:
                return int(f), self.reasons.get(i) or "the loops do not close there"
            if self.singular[i]:
                return int(f), "dead point: the mechanism is singular there and may change branch"
        return None


def solve_frames(scene, mech, frames, table, progress=None):
    """Continuation through the frames. Uses ``Mechanism.follow`` when the core has it,
    else one warm-started ``pose`` per frame."""
    n = len(frames)
    start = sc.start_from_scene(scene, mech)
    follow = getattr(mech, "follow", None)
    sw = None
    if follow is not None:
        try:
            sw = follow(table, start=start)
        except (ImportError, NotImplementedError):  # core without sweeps yet: per-frame poses
            sw = None
    if sw is not None:
        links = {k: np.asarray(v, dtype=float) for k, v in sw.links.items()}
        joints = {k: np.asarray(v, dtype=float) for k, v in sw.joints.items()}
        conv = np.asarray(sw.converged, dtype=bool)
        sing = np.asarray(getattr(sw, "singular", np.zeros(n, bool)), dtype=bool)
        if progress:
            progress(n)
        reasons = {int(i): str(r) for i, r in dict(getattr(sw, "reasons", None) or {}).items()}
        return Solved(frames, links, joints, conv, sing, reasons)
    err = sc.core().JointwiseError
    links = {name: np.tile(np.eye(4), (n, 1, 1)) for name in mech.links}
    joints = {c: np.zeros(n) for c in mech.coordinates}
    conv = np.zeros(n, bool)
    sing = np.zeros(n, bool)
    reasons = {}
    prev = start
    for i in range(n):
        try:
            pose = mech.pose({k: float(v[i]) for k, v in table.items()}, start=prev)
        except err as exc:
            reasons[i] = sc.describe_error(exc)
            break  # continuation cannot go on past a failed frame
        conv[i] = pose.converged
        sing[i] = bool(getattr(pose, "singular", False))
        for k, m in pose.links.items():
            links[k][i] = m
        for k, v in pose.joints.items():
            joints[k][i] = v
        if not pose.converged:
            break
        prev = pose
        if progress and i % 25 == 0:
            progress(i)
    return Solved(frames, links, joints, conv, sing, reasons)


# -- matrices to channels (vectorised) ---------------------------------------------------------

def basis_from_world(objs_worlds, order):
    """Local basis matrices (N, 4, 4) per object from world matrices, honouring object
    parenting: ``basis = inv(P @ matrix_parent_inverse) @ W``; a parent that is baked
    too uses its own per-frame world matrices, any other parent its current one."""
    out = {}
    for name in order:
        obj, w = objs_worlds[name]
        p = obj.parent
        if p is None:
            out[name] = w
            continue
        pinv = sc.matrix_host_to_core(obj.matrix_parent_inverse)
        pw = None
        for other, (o2, w2) in objs_worlds.items():
            if o2 == p:
                pw = w2
                break
        if pw is None:
            pw = sc.matrix_host_to_core(p.matrix_world)
        out[name] = np.linalg.inv(pw @ pinv) @ w
    return out


def quaternions_from_rotations(r):
    """Unit quaternions (w, x, y, z), shape (N, 4), of rotation matrices (N, 3, 3)
    (Shepperd's method: pick the largest of w, x, y, z to divide by)."""
    r = np.asarray(r, dtype=float)
    n = r.shape[0]
    tr = r[:, 0, 0] + r[:, 1, 1] + r[:, 2, 2]
    cand = np.stack([tr, r[:, 0, 0], r[:, 1, 1], r[:, 2, 2]], axis=1)
    k = np.argmax(cand, axis=1)
    q = np.empty((n, 4))
    i = k == 0
    s = np.sqrt(np.maximum(1.0 + tr[i], 1e-300)) * 2
    q[i] = np.stack([0.25 * s, (r[i, 2, 1] - r[i, 1, 2]) / s, (r[i, 0, 2] - r[i, 2, 0]) / s,
                     (r[i, 1, 0] - r[i, 0, 1]) / s], axis=1)
    i = k == 1
    s = np.sqrt(np.maximum(1.0 + r[i, 0, 0] - r[i, 1, 1] - r[i, 2, 2], 1e-300)) * 2
    q[i] = np.stack([(r[i, 2, 1] - r[i, 1, 2]) / s, 0.25 * s, (r[i, 0, 1] + r[i, 1, 0]) / s,
                     (r[i, 0, 2] + r[i, 2, 0]) / s], axis=1)
    i = k == 2
    s = np.sqrt(np.maximum(1.0 + r[i, 1, 1] - r[i, 0, 0] - r[i, 2, 2], 1e-300)) * 2
    q[i] = np.stack([(r[i, 0, 2] - r[i, 2, 0]) / s, (r[i, 0, 1] + r[i, 1, 0]) / s, 0.25 * s,
                     (r[i, 1, 2] + r[i, 2, 1]) / s], axis=1)
    i = k == 3
    s = np.sqrt(np.maximum(1.0 + r[i, 2, 2] - r[i, 0, 0] - r[i, 1, 1], 1e-300)) * 2
    q[i] = np.stack([(r[i, 1, 0] - r[i, 0, 1]) / s, (r[i, 0, 2] + r[i, 2, 0]) / s,
                     (r[i, 1, 2] + r[i, 2, 1]) / s, 0.25 * s], axis=1)
    return q / np.linalg.norm(q, axis=1, keepdims=True)


def continuous_quaternions(q, previous=None):
    """Flip signs so that consecutive quaternions have a non-negative dot product."""
    q = np.array(q, dtype=float)
    if len(q) == 0:
        return q
    d = np.einsum("ij,ij->i", q[1:], q[:-1])
    flips = np.concatenate([[1.0], np.where(d < 0, -1.0, 1.0)])
    if previous is not None and float(np.dot(q[0], previous)) < 0:
        flips[0] = -1.0
    return q * np.cumprod(flips)[:, None]


_AXIS = {"X": 0, "Y": 1, "Z": 2}


def eulers_from_rotations(r, order):
    """Euler angles (N, 3), in the X, Y, Z slots of ``rotation_euler``, for Blender's
    ``order`` (e.g. 'XYZ': R = Rz @ Ry @ Rx, X applied first)."""
    i, j, k = (_AXIS[c] for c in order)
    s = 1.0 if (i, j, k) in ((0, 1, 2), (1, 2, 0), (2, 0, 1)) else -1.0
    r = np.asarray(r, dtype=float)
    sb = np.clip(-s * r[:, k, i], -1.0, 1.0)
    b = np.arcsin(sb)
    cb = np.sqrt(r[:, k, j] ** 2 + r[:, k, k] ** 2)
    ok = cb > 1e-9
    a = np.where(ok, np.arctan2(s * r[:, k, j], r[:, k, k]), np.arctan2(-s * r[:, j, k], r[:, j, j]))
    c = np.where(ok, np.arctan2(s * r[:, j, i], r[:, i, i]), 0.0)
    out = np.empty((len(r), 3))
    out[:, i], out[:, j], out[:, k] = a, b, c
    return out


def continuous_eulers(e, previous=None, order="XYZ"):
    """Compatible Euler angles: consecutive keys never jump by a full turn, nor flip to
    the other equivalent triple (a + pi, pi - b, c + pi) - the one that shows up when
    the middle angle passes +-90 degrees."""
    e = np.asarray(e, dtype=float)
    if len(e) == 0:
        return e
    e = e.copy()
    if previous is not None:
        prev = np.asarray(previous, dtype=float)
        e[0] += 2 * math.pi * np.round((prev - e[0]) / (2 * math.pi))
    out = np.unwrap(e, axis=0) if len(e) > 1 else e
    if len(e) < 2 or np.abs(np.diff(out, axis=0)).max() < math.pi / 2:
        return out  # the usual case: no flip, nothing more to do
    i, j, k = (_AXIS[c] for c in order)
    alt = e.copy()
    alt[:, i] += math.pi
    alt[:, j] = math.pi - alt[:, j]
    alt[:, k] += math.pi
    two_pi = 2 * math.pi
    prev = out[0]
    if previous is not None:
        p = np.asarray(previous, dtype=float)
        a0 = alt[0] + two_pi * np.round((p - alt[0]) / two_pi)
        prev = a0 if np.abs(a0 - p).sum() < np.abs(out[0] - p).sum() else out[0]
    res = np.empty_like(e)
    res[0] = prev
    for n in range(1, len(e)):  # sequential, but only for curves that need it
        c1 = e[n] + two_pi * np.round((prev - e[n]) / two_pi)
        c2 = alt[n] + two_pi * np.round((prev - alt[n]) / two_pi)
        prev = c1 if np.abs(c1 - prev).sum() <= np.abs(c2 - prev).sum() else c2
        res[n] = prev
    return res


def continuous_axis_angles(q, previous=None):
    """Angles (N,) and axes (N, 3) of unit quaternions, continuous from frame to frame.

    Through the identity the axis of ``2 atan2(|v|, w)`` flips; keeping each axis on the
    side of the one before (and negating the angle with it), holding the axis where the
    turn is zero, and unwrapping the angle by whole turns gives curves without jumps.
    ``previous`` is the object's current (angle, x, y, z), the side to start on."""
    v = np.linalg.norm(q[:, 1:], axis=1)
    ang = 2 * np.arctan2(v, q[:, 0])
    axis = q[:, 1:] / np.where(v > 1e-12, v, 1.0)[:, None]
    prev_axis = None
    prev_ang = None
    if previous is not None and np.linalg.norm(previous[1:]) > 1e-12:
        prev_axis = previous[1:] / np.linalg.norm(previous[1:])
        prev_ang = float(previous[0])
    for i in range(len(ang)):
        if v[i] <= 1e-12:
            axis[i] = prev_axis if prev_axis is not None else (0.0, 0.0, 1.0)
        elif prev_axis is not None and float(axis[i] @ prev_axis) < 0:
            axis[i] = -axis[i]
            ang[i] = -ang[i]
        if prev_ang is not None:
            ang[i] += 2 * np.pi * np.round((prev_ang - ang[i]) / (2 * np.pi))
        prev_axis, prev_ang = axis[i], ang[i]
    return ang, axis


def channels_for(obj, basis):
    """{(data_path, index): values (N,)} of location and rotation keys for ``obj``."""
    loc = basis[:, :3, 3]
    m3 = basis[:, :3, :3]
    scale = np.linalg.norm(m3, axis=1)  # column norms
    rot = m3 / np.where(scale > 0, scale, 1.0)[:, None, :]
    det = np.linalg.det(rot)
    rot = rot * np.where(det < 0, -1.0, 1.0)[:, None, None]
    ch = {("location", i): loc[:, i] for i in range(3)}
    mode = obj.rotation_mode
    if mode in ("QUATERNION", "AXIS_ANGLE"):
        q = quaternions_from_rotations(rot)
        prev = np.array(obj.rotation_quaternion) if mode == "QUATERNION" else None
        q = continuous_quaternions(q, prev)
        if mode == "QUATERNION":
            for i in range(4):
                ch[("rotation_quaternion", i)] = q[:, i]
        else:
            ang, axis = continuous_axis_angles(q, np.array(obj.rotation_axis_angle))
            ch[("rotation_axis_angle", 0)] = ang
            for i in range(3):
                ch[("rotation_axis_angle", i + 1)] = axis[:, i]
    else:
        e = continuous_eulers(eulers_from_rotations(rot, mode), np.array(obj.rotation_euler), mode)
        for i in range(3):
            ch[("rotation_euler", i)] = e[:, i]
    return ch


# -- writing keys --------------------------------------------------------------------------------

def _linear_value(fc):
    global LINEAR
    if LINEAR is None:
        kps = fc.keyframe_points
        old = kps[0].interpolation
        kps[0].interpolation = 'LINEAR'
        buf = np.zeros(len(kps), dtype=np.int32)
        kps.foreach_get("interpolation", buf)
        LINEAR = int(buf[0])
        kps[0].interpolation = old
    return LINEAR


def new_action(obj):
    """A fresh tagged action + slot assigned to ``obj`` (remembering a foreign action)."""
    ad = obj.animation_data or obj.animation_data_create()
    old = ad.action
    previous = ""
    if old is not None:
        if old.get(TAG):
            previous = old.get(PREVIOUS, "")
            ad.action = None
            if old.users == 0:
                bpy.data.actions.remove(old)
        else:
            previous = old.name
            if not old.use_fake_user:  # keep it through save/reload while unassigned
                old.use_fake_user = True
                old[KEPT] = 1
            ad.action = None
    action = bpy.data.actions.new(f"{obj.name} motion")
    action[TAG] = 1
    action[PREVIOUS] = previous
    slot = action.slots.new(id_type='OBJECT', name=obj.name)
    ad.action = action
    if getattr(ad, "action_slot", None) != slot:
        ad.action_slot = slot
    layer = action.layers.new("Layer")
    strip = layer.strips.new(type='KEYFRAME')
    bag = strip.channelbag(slot, ensure=True)
    return action, bag


def write_channels(obj, frames, channels):
    """Write keys for every channel at once: ``keyframe_points.add`` + ``foreach_set``."""
    action, bag = new_action(obj)
    n = len(frames)
    co = np.empty(2 * n, dtype=np.float32)
    co[0::2] = frames
    groups = getattr(bag, "groups", None)
    group = groups.new("Object Transforms") if groups is not None else None
    for (path, index), values in channels.items():
        fc = bag.fcurves.new(path, index=index)
        if group is not None:
            fc.group = group
        fc.keyframe_points.add(n)
        co[1::2] = values
        fc.keyframe_points.foreach_set("co", co)
        lin = _linear_value(fc)
        fc.keyframe_points.foreach_set("interpolation", np.full(n, lin, dtype=np.int32))
        fc.update()
    return action


def clear(obj):
    """Remove the baked action of ``obj`` (put back the one it had before). True if any."""
    ad = obj.animation_data
    if ad is None or ad.action is None or not ad.action.get(TAG):
        return False
    action = ad.action
    previous = action.get(PREVIOUS, "")
    ad.action = None
    if previous and previous in bpy.data.actions:
        prev = bpy.data.actions[previous]
        ad.action = prev
        if getattr(ad, "action_slot", None) is None and len(getattr(prev, "slots", ())):
            ad.action_slot = prev.slots[0]
        if prev.get(KEPT):
            prev.use_fake_user = False
            del prev[KEPT]
    if action.users == 0:
        bpy.data.actions.remove(action)
    return True


def bake(scene, frames, ramp=None, progress=None):
    """Solve every frame and write keys for every link object; all or nothing.

    Returns (number of objects keyed, solve seconds, write seconds). Raises SceneError
    with the frame named when a frame cannot be solved (nothing written then)."""
    import time
    t0 = time.perf_counter()
    mech = sc.mechanism_from_scene(scene)
    table = value_table(scene, mech, frames, ramp)
    solved = solve_frames(scene, mech, frames, table, progress)
    fail = solved.first_failure()
    if fail is not None:
        raise sc.SceneError(f"frame {fail[0]}: {fail[1]}; no keys were written")
    t1 = time.perf_counter()
    worlds = sc.world_matrices(scene, solved.links)
    channels = prepare_channels(worlds)
    for name, ch in channels.items():
        for key, v in ch[1].items():
            if not np.all(np.isfinite(v)):
                raise sc.SceneError(f"link {name!r}: non-finite {key[0]} keys; no keys were written")
    for name, (obj, ch) in channels.items():
        write_channels(obj, frames, ch)
    t2 = time.perf_counter()
    return len(channels), t1 - t0, t2 - t1


def prepare_channels(worlds):
    """{link: (object, channels)} from {link: (object, world (N, 4, 4))}."""
    bases = basis_from_world(worlds, list(worlds))
    return {name: (worlds[name][0], channels_for(worlds[name][0], bases[name])) for name in worlds}


def remap_coordinate_paths(scene, mapping):
    """Keep the scene's joint-value animation on the right items when items are removed:
    ``mapping`` old index -> new index, or None to drop that item's F-curves (data paths
    address items by index, so they must be rewritten)."""
    ad = scene.animation_data
    if ad is None or ad.action is None:
        return
    action = ad.action
    bags = []
    if getattr(action, "layers", None) is not None and len(action.layers):
        for layer in action.layers:
            for strip in layer.strips:
                for s in action.slots:
                    bag = strip.channelbag(s)
                    if bag is not None:
                        bags.append(bag)
    elif getattr(action, "fcurves", None) is not None:
        bags.append(action)
    for bag in bags:
        for fc in list(bag.fcurves):
            m = _PATH.match(fc.data_path)
            if not m or m.group(1) is None:
                continue
            new = mapping.get(int(m.group(1)), int(m.group(1)))
            if new is None:
                bag.fcurves.remove(fc)
            else:
                fc.data_path = f"jointwise.joints[{new}].{m.group(3)}"
