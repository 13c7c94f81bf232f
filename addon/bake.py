"""Bake: solve every frame of a range (continuation) and write link keys, all or nothing.

Public entry points:

* :func:`solve_frames` ``(scene, frame_start, frame_end, drive="", value_from=0, value_to=0)``
  returns the solved frames (:class:`Solved`) without writing anything; ``clearance`` and
  measures use it to see exactly the frames a bake would key.
* :func:`bake` writes the keys. ``EXTRA_CHANNELS`` holds callables
  ``f(scene, solved)`` called after every frame is solved and checked, before anything
  is written; each returns None or a ``write()`` callable run after the link keys, in the
  same all-or-nothing write (measures add their F-curves there; a hook that cannot
  compute its keys raises SceneError and nothing is written).
"""
from __future__ import annotations

import json

import numpy as np

from . import animation, keys, posing
from . import scene as sc
from .convert import SceneError

EXTRA_CHANNELS = []


def value_table(scene, mech, frames, ramp=None):
    """Held values per frame {coordinate: array (N,)} in host units.

    ``ramp`` = (coordinate, value_from, value_to): that coordinate goes linearly from
    ``value_from`` at the first frame to ``value_to`` at the last."""
    frames = np.asarray(frames, dtype=float)
    n = len(frames)
    jw = scene.jointwise
    # the ramped coordinate is the input of its loop group, as --drive is on the command
    # line: the group's other drives and animated values are released (the core's rule)
    given = (ramp[0],) if ramp else ()
    held = {name: float(jw.joints[name].value)
            for name in posing.held_names(scene, mech, given=given, inputs=given)}
    curves = animation.coordinate_fcurves(scene)
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
            raise SceneError(f"coordinate {name!r} is not finite at frame {int(frames[bad][0])}")
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


def follow_frames(scene, mech, frames, table, progress=None):
    """Continuation through the frames. Uses ``Mechanism.follow`` when the core has it,
    else one warm-started ``pose`` per frame."""
    n = len(frames)
    start = posing.start_from_scene(scene, mech)
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
        reasons = {int(i): posing.error_text(scene, r) for i, r in dict(getattr(sw, "reasons", None) or {}).items()}
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
            reasons[i] = posing.error_text(scene, exc)
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



def solve_frames(scene, frame_start, frame_end, drive="", value_from=0.0, value_to=0.0,
                 progress=None):
    """The frames ``frame_start..frame_end`` solved exactly as :func:`bake` solves them
    (values from the scene's animation, or ``drive`` ramped linearly from ``value_from``
    to ``value_to``, host units), without writing anything. Returns :class:`Solved`
    (``.mech``: the mechanism); raises SceneError for a bad range or drive."""
    frame_start, frame_end = int(frame_start), int(frame_end)
    if frame_end < frame_start:
        raise SceneError(f"frame range {frame_start}..{frame_end} is empty")
    frames = np.arange(frame_start, frame_end + 1)
    ramp = None
    if drive:
        jw = scene.jointwise
        if drive not in jw.joints:
            raise SceneError(f"pick the ramp coordinate from the joint list: {drive!r} is not one")
        if not (np.isfinite(value_from) and np.isfinite(value_to)):
            raise SceneError("ramp values must be finite")
        ramp = (drive, float(value_from), float(value_to))
    return solve_at(scene, frames, ramp, progress)


def solve_at(scene, frames, ramp=None, progress=None):
    """As :func:`solve_frames`, at any increasing ``frames`` (array); ``ramp`` =
    (coordinate, value at the first frame, value at the last), host units."""
    frames = np.asarray(frames)
    mech = sc.mechanism_from_scene(scene)
    table = value_table(scene, mech, frames, ramp)
    solved = follow_frames(scene, mech, frames, table, progress)
    solved.mech = mech
    solved.ramp = ramp
    return solved


# -- matrices to channels -------------------------------------------------------------------

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
        frame = pw @ pinv
        r = frame[..., :3, :3]
        sv = np.linalg.svd(r.reshape(-1, 3, 3), compute_uv=False)
        if not (np.all(np.isfinite(sv)) and sv[:, -1].min() > 1e-9 * max(1.0, float(sv[:, 0].max()))):
            raise SceneError(f"link {name!r}: give its parent object {p.name!r} a non-zero scale "
                             f"(it is scaled to zero, so {obj.name!r} has no placement to key); "
                             f"no keys were written")
        basis = np.linalg.inv(frame) @ w
        m3 = basis[..., :3, :3].reshape(-1, 3, 3)
        g = np.einsum("nji,njk->nik", m3, m3)  # columns orthogonal <=> rotation x axis scale
        off = np.abs(g - g * np.eye(3)).max(axis=(1, 2))
        if off.max() > 1e-6 * max(1.0, float(np.abs(g).max())):
            raise SceneError(f"link {name!r}: apply the scale of its parent {p.name!r} or unparent "
                             f"{obj.name!r} before baking: a parent scaled unevenly under a rotation "
                             f"shears it, and location and rotation keys cannot follow a shear; "
                             f"no keys were written")
        out[name] = basis
    return out


def channels_for(obj, basis):
    """Location and rotation keys for ``obj`` from its local matrices ``basis`` (N, 4, 4)."""
    return keys.channels_from_basis(basis, obj.rotation_mode, obj.rotation_quaternion,
                                    obj.rotation_axis_angle, obj.rotation_euler)


def check_parents(scene):
    """Refuse, by name, link objects whose parent chain keys cannot follow: a parent scaled
    to zero (checked here; an uneven scale under a rotation is checked per frame in
    :func:`basis_from_world`)."""
    jw = scene.jointwise
    for link in jw.links:
        obj = link.object
        if link.name == jw.ground or not sc.object_alive(scene, obj) or obj.parent is None:
            continue
        bad = sc.zero_scaled(obj.parent)
        if bad is not None:
            raise SceneError(f"link {link.name!r}: give its parent object {bad.name!r} a non-zero "
                             f"scale (it is scaled to zero, so {obj.name!r} has no placement to "
                             f"key); no keys were written")


def prepare_channels(worlds):
    """{link: (object, channels)} from {link: (object, world (N, 4, 4))}."""
    bases = basis_from_world(worlds, list(worlds))
    return {name: (worlds[name][0], channels_for(worlds[name][0], bases[name])) for name in worlds}


def bake(scene, frame_start, frame_end, drive="", value_from=0.0, value_to=0.0, progress=None):
    """Solve every frame and write keys for every link object; all or nothing.

    Returns (number of objects keyed, solve seconds, write seconds). Raises SceneError
    with the frame named when a frame cannot be solved (nothing written then)."""
    import time
    t0 = time.perf_counter()
    solved = solve_frames(scene, frame_start, frame_end, drive, value_from, value_to, progress)
    fail = solved.first_failure()
    if fail is not None:
        raise SceneError(f"frame {fail[0]}: {fail[1]}; no keys were written")
    t1 = time.perf_counter()
    frames = solved.frames
    check_parents(scene)
    worlds = sc.world_matrices(scene, solved.links)
    channels = prepare_channels(worlds)
    for name, ch in channels.items():
        for key, v in ch[1].items():
            if not np.all(np.isfinite(v)):
                raise SceneError(f"link {name!r}: non-finite {key[0]} keys; no keys were written")
    writers = [w for w in (f(scene, solved) for f in EXTRA_CHANNELS) if w is not None]
    for name, (obj, ch) in channels.items():
        animation.write_channels(obj, frames, ch)
    for w in writers:
        w()
    store_baked_values(scene, solved)
    t2 = time.perf_counter()
    return len(channels), t1 - t0, t2 - t1


# -- the joint values of a bake, shown while its keys play ---------------------------------------

_BAKED = {}


def store_baked_values(scene, solved):
    """Keep the solved joint values per frame with the scene (JSON), so the joint list can
    show the values of the baked pose on screen while the link keys play."""
    jw = scene.jointwise
    data = {"frames": [int(f) for f in solved.frames],
            "values": {k: [float(x) for x in v] for k, v in solved.joints.items() if k in jw.joints}}
    jw.baked_values = json.dumps(data)


def forget_baked_values(scene):
    scene.jointwise.baked_values = ""


def _baked_table(text):
    hit = _BAKED.get(text)
    if hit is None:
        try:
            data = json.loads(text)
            frames = np.asarray(data["frames"], dtype=float)
            values = {k: np.asarray(v, dtype=float) for k, v in data["values"].items()}
        except (ValueError, KeyError, TypeError):
            return None
        if len(_BAKED) > 8:
            _BAKED.clear()
        hit = _BAKED[text] = (frames, values)
    return hit


def baked_values(scene, frame):
    """{coordinate: value} of the last bake at ``frame`` (held at the ends of its range),
    or None when no link object plays baked keys."""
    jw = scene.jointwise
    if not jw.baked_values:
        return None
    if not any(sc.object_alive(scene, link.object) and animation.is_baked(link.object)
               for link in jw.links):
        return None
    table = _baked_table(jw.baked_values)
    if table is None or not len(table[0]):
        return None
    frames, values = table
    f = float(frame)
    return {k: float(np.interp(f, frames, v)) for k, v in values.items()}
