"""Posing the scene: which values are held, the solve, applying it, the status line.

The one path of a value change: :func:`pose_scene` -> scene mapping -> core ``pose`` ->
scene mapping -> ``matrix_world``. ``AFTER_POSE`` holds callables ``f(scene, mech, pose)``
run after every successful pose (e.g. measures refresh their values there).
"""
from __future__ import annotations

import math

import numpy as np

from . import animation, convert
from . import scene as sc
from .convert import SceneError

AFTER_POSE = []


def loop_groups(mech):
    """{joint: group id} for joints in loops; loops sharing a joint share a group."""
    return convert.loop_groups(getattr(mech, "loops", []))


def animated_coordinates(scene):
    """Names of coordinates whose value (or a view of it) has an F-curve on the scene."""
    return set(animation.coordinate_fcurves(scene))


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
    followers = {c.follower for c in mech.couplings.values()}  # set by their leaders
    for item in jw.joints:
        name = item.name
        if name not in known:
            continue  # a fixed joint: no coordinate
        free = groups.get(item.joint) in released  # the user moves a passive joint of this loop
        drive = item.drive and not free
        if (drive or name in extra or (name in animated and not free)
                or (item.joint not in groups and name not in followers)):
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
        Pose = sc.core().Pose
    except AttributeError:
        from jointwise.mechanism import Pose
    try:
        return Pose(joints=dict(zip(mech.coordinates, q)), links={}, converged=True,
                    residual=0.0, q=np.array(q, dtype=float))
    except TypeError:
        return None


def set_status(scene, *, converged=True, error=0.0, singular=False, message="", mobility=None):
    jw = scene.jointwise
    jw.converged = bool(converged)
    jw.closure_error = float(error) if error is not None and math.isfinite(error) else 0.0
    jw.singular = bool(singular)
    jw.message = sc.message_core_to_host(message, scene)
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
        if sc.object_alive(scene, obj) and link.name != jw.ground:
            placements.append((obj, obj.matrix_world.copy()))
    return values, placements


def restore(scene, snap, values=True):
    old_values, placements = snap
    if values:
        sc.write_values(scene, old_values)
    for obj, m in placements:
        obj.matrix_world = m


def solve(scene, extra=(), values=None):
    """Solve the scene's mechanism for the current values; returns (mech, pose).

    Raises SceneError (scene data unusable) or the core's AssemblyError."""
    mech = sc.mechanism_from_scene(scene)
    held = held_values(scene, mech, extra, values)
    start = start_from_scene(scene, mech)
    pose = mech.pose(held, start=start)
    if not pose.converged:
        err = sc.core().AssemblyError
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
        sc.apply_displacements(scene, pose.links)
        sc.write_values(scene, pose.joints)
    except (SceneError, sc.core().JointwiseError) as exc:
        restore(scene, snap, restore_values)
        msg = convert.describe_error(exc)
        set_status(scene, converged=False, error=getattr(exc, "error", None), message=msg)
        return False, msg
    set_status(scene, converged=pose.converged, error=pose.residual, singular=pose.singular,
               message="singular: near a dead point" if pose.singular else "solved",
               mobility=mobility_of(mech, pose))
    return True, ""
