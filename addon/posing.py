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
_SOLVED = {}  # scene pointer -> (mechanism, the last pose's q in float64)


def animated_coordinates(scene):
    """Names of coordinates whose value (or a view of it) has an F-curve on the scene."""
    return set(animation.coordinate_fcurves(scene))


def drive_flags(scene, mech):
    """The coordinates of ``mech`` whose Drive box is ticked in the joint list."""
    known = set(mech.coordinates)
    return [it.name for it in scene.jointwise.joints if it.drive and it.name in known]


def held_names(scene, mech, given=(), inputs=(), animated=None):
    """The coordinates a solve holds, by the core's one holding rule
    (``Mechanism.held_coordinates``), asked with the joint list's drive flags and the
    scene's animated coordinates. ``given``: the coordinates the user sets now (a dragged
    passive one releases the drives and animated values of its loop group); ``inputs``: a
    bake's ramp (the input of its group)."""
    known = set(mech.coordinates)
    anim = animated_coordinates(scene) if animated is None else animated
    return mech.held_coordinates([c for c in given if c in known],
                                 drives=drive_flags(scene, mech),
                                 animated=[c for c in mech.coordinates if c in anim],
                                 inputs=[c for c in inputs if c in known])


def held_values(scene, mech, extra=(), values=None):
    """{coordinate: value} to hold for a solve (host units): :func:`held_names` with
    ``extra`` given (the one being set or dragged), values from ``values`` or the list."""
    items = {it.name: it for it in scene.jointwise.joints}  # one pass over the list
    held = {}
    for name in held_names(scene, mech, given=extra):
        if values is not None and name in values:
            held[name] = float(values[name])
        else:
            held[name] = float(items[name].value)
    return held


def remember(scene, mech, pose):
    """Keep ``pose``'s exact (float64) state as the scene's last pose: the next solve of
    this mechanism starts from it while the list still shows it (:func:`start_from_scene`)."""
    q = getattr(pose, "q", None)
    if q is not None:
        _SOLVED[scene.as_pointer()] = (mech, np.array(q, dtype=float))


def forget():
    """Drop every kept last pose (a file was loaded: scene pointers mean nothing now)."""
    _SOLVED.clear()


def start_from_scene(scene, mech):
    """A warm start for ``Mechanism.pose`` from the values of the placement the scene
    shows (``last``: the last solved values), so the solve stays on the scene's branch."""
    last = {it.name: it.last for it in scene.jointwise.joints}  # one pass over the list
    q = [float(last.get(c, 0.0)) for c in mech.coordinates]
    kept = _SOLVED.get(scene.as_pointer())
    if kept is not None and kept[0] is mech and len(kept[1]) == len(q) and np.array_equal(
            kept[1].astype(np.float32), np.asarray(q, dtype=np.float32)):
        # the list shows the last pose (its values are that pose's, rounded to 32-bit
        # floats): start from the pose itself, so blocks nothing moved are left as they are
        q = kept[1].tolist()
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
    jw.message = message  # final text: core failures worded by error_text
    if mobility is not None:
        jw.mobility = int(mobility)


def mobility_of(mech):
    """Numeric mobility of the mechanism's structure (at home), or None when the core cannot
    say: the core's ``Mechanism.mobility()``, which works it out once per structure and keeps
    it (the scene's mechanism is rebuilt, a new object, only when joints, links or couplings
    are added, edited or removed), so a value change reads the kept count."""
    try:
        m = mech.mobility()
    except Exception:  # the core's mobility is an extra; never let it break a solve
        return None
    try:
        return int(m["numeric"])
    except (KeyError, TypeError, ValueError):
        return None


def _or_unknown(m):
    return -1 if m is None else m


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


def clamp_to_limits(scene, held):
    """Held values past their coordinate's limits moved onto the limit (in place).
    Returns [(coordinate, asked, limit)] for each value moved."""
    items = {it.name: it for it in scene.jointwise.joints}  # one pass over the list
    moved = []
    for name, v in held.items():
        item = items.get(name)
        if item is None or not item.use_limits:
            continue
        lo, hi = float(item.limit_min), float(item.limit_max)
        if v < lo or v > hi:
            lim = lo if v < lo else hi
            # the stored limit is a 32-bit float (7 digits): held two of its steps inside,
            # so a limit that meets another joint's (a screw's end where the foot's slide
            # ends) is not missed by the rounding of either
            inward = 2.0 * float(np.spacing(np.float32(abs(lim))))
            held[name] = lim + inward if v < lo else lim - inward
            moved.append((name, v, lim))
    return moved


def solve(scene, extra=(), values=None):
    """Solve the scene's mechanism for the current values; returns (mech, pose, clamped).

    Held values past a limit are held at the limit (``clamped``: [(coordinate, asked,
    limit)]). Raises SceneError (scene data unusable) or the core's AssemblyError."""
    mech = sc.mechanism_from_scene(scene)
    held = held_values(scene, mech, extra, values)
    clamped = clamp_to_limits(scene, held)
    start = start_from_scene(scene, mech)
    pose = mech.pose(held, start=start)
    if not pose.converged:
        err = sc.core().AssemblyError
        raise err(f"the loops did not close (closure error {pose.residual:.3g})",
                  error=pose.residual)
    return mech, pose, clamped


def _value_text(scene, name, v):
    item = scene.jointwise.joints.get(name)
    kind = item.kind if item is not None else "angle"
    return convert.format_value(v, kind, sc.display_length_of(scene))


def reachable_text(scene, mech, name):
    """"reachable from A to B" for coordinate ``name`` with the others free (display units),
    or "" when the core cannot say."""
    try:
        from jointwise.sweep import reach
        r = reach(mech, name)
    except Exception as exc:  # an extra for the message only; never let it hide the failure
        why = getattr(exc, "reason", None)
        if getattr(why, "kind", None) == "singular" and why.bounds and why.bounds[0] == why.bounds[1]:
            # a fold for this coordinate (a dead point on both sides): it moves only as
            # another joint turns the mechanism away from here
            return "it cannot move on its own from here (a dead point on both sides); move another joint first"
        return ""
    spans = r.get("intervals") or []
    item = scene.jointwise.joints.get(name)
    now = float(item.last) if item is not None else 0.0
    if not spans:
        return ""
    lo, hi = min(spans, key=lambda s: 0.0 if s[0] <= now <= s[1] else min(abs(now - s[0]), abs(now - s[1])))
    return f"reachable from {_value_text(scene, name, lo)} to {_value_text(scene, name, hi)}"


def _limits(scene, name):
    item = scene.jointwise.joints.get(name)
    if item is None or not item.use_limits:
        return None
    return float(item.limit_min), float(item.limit_max)


def error_text(scene, exc):
    """A failure for the user, in the extension's own words and display units.

    A core failure with a structured reason (``exc.reason``: kind, joint, loop, value,
    bounds) is worded from those fields (:func:`convert.reason_text`); a file problem
    (``SpecError``) is shown as written, saying that its numbers are the file's; anything
    else (the scene's own problems; a core failure whose reason lacks the fields its kind
    needs) as written, with the loop or joint it names."""
    if isinstance(exc, sc.core().SpecError):
        return convert.spec_text(exc)
    length = sc.display_length_of(scene)
    text = convert.reason_text(getattr(exc, "reason", None), lambda n, v: _value_text(scene, n, v),
                               lambda n: _limits(scene, n),
                               lambda v: convert.format_value(v, "length", length))
    return text if text is not None else convert.describe_error(exc)


def failure_text(scene, exc, asked):
    """A failure that leads with what the user can do, then the core's detail.
    ``asked``: {coordinate: value} the user asked for (the dragged one)."""
    detail = error_text(scene, exc)
    jw = scene.jointwise
    name = next((e for e in asked if e in jw.joints), None)
    if name is None or not isinstance(exc, sc.core().AssemblyError):
        return detail
    if getattr(getattr(exc, "reason", None), "kind", None) in ("coupling", "home"):
        return detail  # not a matter of reach: a held motion-law follower, a home that does not close
    asked = asked[name]
    head = f"{name} cannot reach {_value_text(scene, name, asked)} here"
    try:
        mech = sc.mechanism_from_scene(scene)
        where = reachable_text(scene, mech, name)
    except (SceneError, sc.core().JointwiseError):
        where = ""
    return f"{head}: {where} ({detail})" if where else f"{head} ({detail})"


def status_text(scene, pose, clamped):
    """The status line of a successful pose, with units."""
    label, k = sc.display_length_of(scene)
    parts = []
    for name, asked, lim in clamped:
        parts.append(f"{name} held at its limit {_value_text(scene, name, lim)} "
                     f"(asked {_value_text(scene, name, asked)})")
    head = "; ".join(parts) if parts else ("posed near a dead point: the linkage may change "
                                           "branch here" if pose.singular else "posed")
    err = float(pose.residual) if math.isfinite(pose.residual) else 0.0
    return f"{head}; loops closed within {err * k:.2g} {label}"


def pose_scene(scene, extra=(), values=None, restore_values=True):
    """Solve and apply. On failure the scene is left as it was (values back at the last
    solved ones unless ``restore_values`` is false, e.g. for animated values) and the
    status says why; the status carries the structure's mobility (:func:`mobility_of`,
    worked out once per structure). Returns (ok, message)."""
    with sc.objects_held(scene):
        return _pose_scene(scene, extra, values, restore_values)


def _pose_scene(scene, extra=(), values=None, restore_values=True):
    snap = snapshot(scene)
    jw = scene.jointwise
    asked = {e: (float(values[e]) if values is not None and e in values else float(jw.joints[e].value))
             for e in extra if e in jw.joints}
    try:
        mech, pose, clamped = solve(scene, extra, values)
        sc.apply_displacements(scene, pose.links)
        sc.write_values(scene, pose.joints)
    except (SceneError, sc.core().JointwiseError) as exc:
        # the list keeps showing the values of the pose on screen: the value goes back
        restore(scene, snap, restore_values)
        msg = failure_text(scene, exc, asked)
        set_status(scene, converged=False, error=getattr(exc, "error", None), message=msg)
        return False, msg
    remember(scene, mech, pose)
    msg = status_text(scene, pose, clamped)
    set_status(scene, converged=pose.converged, error=pose.residual, singular=pose.singular,
               message=msg, mobility=_or_unknown(mobility_of(mech)))
    for f in AFTER_POSE:
        f(scene, mech, pose)
    return True, msg
