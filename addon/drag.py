"""Dragging: move a link object and the mechanism follows; a handle drags a point measure.

A link object moved by the ordinary transform tools (or given a new ``matrix_world`` from
Python) is a target: its new placement, as a displacement from home, goes to the core's
``Mechanism.pose(targets=...)`` from the placement the scene shows. Every coordinate may
move (drives included), the loops stay closed and limits hold; the solved pose is applied
to every link, the moved one included, so it snaps onto the nearest placement the
mechanism allows. Joint values follow, and are keyed at the current frame when auto-keying
is on (the values a frame change holds: drives, animated values, coordinates outside
every loop). The ground cannot be dragged: moving it moves the whole mechanism as before.
While the links play baked keys (after **Bake Motion**, until **Clear Baked Motion**) the
keys place them and nothing is dragged.

A handle (``jointwise.handle_add(measure=NAME)``) is an empty at a point measure of the
scene's Measures list (``scene.jointwise.measures[NAME]``, kind ``'POINT'``); moving it
brings that measure's point as close to it as the mechanism allows (the solve's target is
the list's own definition of the measure), then the handle snaps onto the point. Handles
follow the point on every pose: a handle sits at its measure's ``location``.

The path of a drag: ``depsgraph_update_post`` -> which link object or handle moved (its
placement differs from the one jointwise last gave it; jointwise's own placements are
written quietly, and several links moved at once are no drag but a new record) -> core
pose by target -> scene
mapping -> ``matrix_world``. Like a changed value, a drag poses at once (following the
animation or not); keyed values go back on the next frame change unless auto-keying keys
them.
"""
from __future__ import annotations

import bpy
import numpy as np
from bpy.app.handlers import persistent

from . import animation, posing, properties
from . import scene as sc
from .convert import SceneError, home_inverse, inverse

#: Custom property of a handle object: the name of its point measure.
HANDLE = "jointwise_handle"
#: A placement differing from the one jointwise gave by more than this (relative to the
#: matrix's size, well above float32 noise) is a move by the user.
MOVED = 1e-5

_shown = {}      # scene pointer -> {object name: 4x4 world matrix jointwise last gave it}
_busy = [False]  # our own writes re-enter the handler through view_layer.update()


# -- what the scene shows --------------------------------------------------------------------
def _matrix(obj):
    return sc.matrix_host_to_core(obj.matrix_world)


def _differs(a, b):
    return float(np.abs(a - b).max()) > MOVED * max(1.0, float(np.abs(b).max()))


def handles(scene):
    """Handle objects of the scene: [(object, measure name)]."""
    return [(o, str(o[HANDLE])) for o in scene.objects if HANDLE in o]


def record(scene):
    """Remember every link object's and handle's placement as jointwise's own."""
    jw = scene.jointwise
    shown = {}
    for link in jw.links:
        obj = link.object
        if link.name != jw.ground and sc.object_alive(scene, obj):
            shown[obj.name] = _matrix(obj)
    for obj, _ in handles(scene):
        shown[obj.name] = _matrix(obj)
    _shown[scene.as_pointer()] = shown


def _expected(scene, mech):
    """Placements of the links for the values the scene holds (no record yet)."""
    start = posing.start_from_scene(scene, mech)
    worlds = sc.world_matrices(scene, mech.link_poses(start.q))
    return {obj.name: w for obj, w in worlds.values()}


# -- handles ---------------------------------------------------------------------------------
def point_of(scene, measure):
    """(link, point at home in scene units) of point measure ``measure`` of the scene's
    measure list (``scene.jointwise.measures``, the file's measures and those added in the
    Measures panel): a handle follows that measure and drags it."""
    jw = scene.jointwise
    item = jw.measures.get(measure)
    if item is None or item.kind != 'POINT':
        known = ", ".join(sorted(m.name for m in jw.measures if m.kind == 'POINT')) or "none"
        if item is not None:
            kind = item.kind.lower()
            what = f"{measure!r} is {'an' if kind[0] in 'aeiou' else 'a'} {kind} measure, not a point measure"
        else:
            what = f"no point measure named {measure!r} in the Measures list"
        raise SceneError(f"{what} (point measures: {known})")
    if item.link_a not in jw.links:
        raise SceneError(f"measure {measure!r}: its link {item.link_a!r} is not among the links")
    return item.link_a, np.array(item.at_a, dtype=float)


def _measure_target(scene, mech, measure):
    """{measure: core point Measure}: the same definition the Measures list evaluates."""
    from . import measures
    point_of(scene, measure)
    defs, problems = measures.definitions(scene, mech)
    if measure not in defs:
        raise SceneError(f"measure {measure!r}: {problems.get(measure, 'not defined')}")
    return {measure: defs[measure]}


def place_handles(scene, displacements=None):
    """Put every handle on its point measure (displacements: {link: 4x4}, default the
    scene's): where the measure's ``location`` is after the same pose."""
    hs = handles(scene)
    if not hs:
        return
    from mathutils import Matrix
    g = sc.ground_displacement(scene)
    jw = scene.jointwise
    for obj, measure in hs:
        try:
            link, at = point_of(scene, measure)
        except SceneError:
            continue
        if link == jw.ground:
            d = np.eye(4)
        elif displacements is not None and link in displacements:
            d = np.asarray(displacements[link])
        else:
            d = inverse(g) @ sc.scene_displacement(scene, link)
        p = (g @ d @ np.append(at, 1.0))[:3]
        if np.all(np.isfinite(p)):
            m = obj.matrix_world.copy()
            m.translation = p.tolist()
            obj.matrix_world = Matrix(m)


def add_handle(scene, measure):
    """A new handle empty at point measure ``measure``; returns the object."""
    jw = scene.jointwise
    link, _ = point_of(scene, measure)
    if link == jw.ground:
        raise SceneError(f"measure {measure!r} is on the ground link {link!r}: the ground cannot be dragged")
    for obj, name in handles(scene):
        if name == measure:
            bpy.data.objects.remove(obj, do_unlink=True)
    obj = bpy.data.objects.new(f"handle {measure}", None)
    obj.empty_display_type = 'SPHERE'
    k = sc.length_file_to_host(scene, "mm")
    obj.empty_display_size = max(2.0 * k, 0.01 * _size(scene))
    obj.show_in_front = True
    obj[HANDLE] = measure
    scene.collection.objects.link(obj)
    place_handles(scene)
    record(scene)
    return obj


def _size(scene):
    try:
        return float(sc.mechanism_from_scene(scene).size)
    except (SceneError, sc.core().JointwiseError):
        return 1.0


# -- the drag ----------------------------------------------------------------------------------
def _rigid(d):
    """Nearest rigid motion (a scaled object leaves a scale in its displacement)."""
    u, _, vt = np.linalg.svd(d[:3, :3])
    r = u @ vt
    if np.linalg.det(r) < 0:
        u[:, -1] *= -1
        r = u @ vt
    out = np.eye(4)
    out[:3, :3] = r
    out[:3, 3] = d[:3, 3]
    return out


def _target(scene, obj, link_name=None, measure=None):
    g_inv = inverse(sc.ground_displacement(scene))
    if link_name is not None:
        link = scene.jointwise.links[link_name]
        d = g_inv @ _matrix(obj) @ home_inverse(link.home)
        return {link_name: _rigid(d)}
    p = g_inv @ np.append(np.asarray(obj.matrix_world.translation, dtype=float), 1.0)
    return {measure: p[:3]}


def key_values(scene, mech, names):
    """Key the values ``names`` at the current frame (auto-keying)."""
    jw = scene.jointwise
    frame = scene.frame_current
    curves = animation.coordinate_fcurves(scene)  # a value already animated keeps its channel
    for i, item in enumerate(jw.joints):
        if item.name in names:
            path = curves[item.name][0].data_path if item.name in curves else animation.value_path(i, item.kind)
            animation.key_value(scene, path, frame, item.value)


def drag(scene, obj, link_name=None, measure=None):
    """Pose the scene so that link ``link_name`` comes to ``obj``'s placement (or point
    measure ``measure`` to handle ``obj``). Returns (ok, message); on failure the scene is
    left as it was and the status says why."""
    what = link_name if link_name is not None else measure
    _busy[0] = True
    try:
        mech = sc.mechanism_from_scene(scene)
        targets = _target(scene, obj, link_name, measure)
        if measure is None:
            pose = mech.pose(start=posing.start_from_scene(scene, mech), targets=targets)
        else:  # the point measure of the scene's list (the scene's mechanism has none)
            from jointwise.targets import pose_to_targets
            pose = pose_to_targets(mech, None, posing.start_from_scene(scene, mech), targets,
                                   measures=_measure_target(scene, mech, measure))
        if not pose.converged:
            raise sc.core().AssemblyError(f"the loops did not close (closure error {pose.residual:.3g})",
                                          error=pose.residual)
        sc.apply_displacements(scene, pose.links)
        sc.write_values(scene, pose.joints)
        posing.remember(scene, mech, pose)
        place_handles(scene, pose.links)
        auto = scene.tool_settings.use_keyframe_insert_auto
        if auto:
            key_values(scene, mech, posing.held_values(scene, mech))
    except (SceneError, sc.core().JointwiseError) as exc:
        # nothing was placed yet (placements are checked before any is written): put the
        # moved object back where jointwise had it
        was = _shown.get(scene.as_pointer(), {}).get(obj.name)
        if was is not None:
            from mathutils import Matrix
            obj.matrix_world = Matrix(was.tolist())
        msg = f"dragging {what}: {posing.error_text(scene, exc)}"
        posing.set_status(scene, converged=False, error=getattr(exc, "error", None), message=msg)
        record(scene)
        return False, msg
    finally:
        _busy[0] = False
    label, k = sc.display_length_of(scene)
    miss = pose.target_error[what] * k
    if pose.reached:
        msg = f"dragged {what}: placed; loops closed"
    else:
        msg = (f"dragged {what}: {miss:.3g} {label} from where it was put, the nearest "
               f"placement the joints allow")
    if not auto and animation.coordinate_fcurves(scene):
        msg += "; keyed values go back on the next frame change (turn on auto-keying to key the drag)"
    posing.set_status(scene, converged=True, error=pose.residual, singular=pose.singular, message=msg)
    for f in posing.AFTER_POSE:
        if f is not _after_pose:
            f(scene, mech, pose)
    record(scene)
    return True, msg


@persistent
def jointwise_drag(scene, depsgraph=None):
    """``depsgraph_update_post``: a link object or handle moved by someone else is a drag."""
    if _busy[0] or properties.is_quiet() or depsgraph is None:
        return
    jw = scene.jointwise
    if not jw.joints:
        return
    moved = set()
    for u in depsgraph.updates:
        if u.is_updated_transform and isinstance(u.id, bpy.types.Object):
            moved.add(u.id.original.name)
    if not moved:
        return
    if any(animation.is_baked(link.object) for link in jw.links
           if link.name != jw.ground and sc.object_alive(scene, link.object)):
        return  # the links play baked keys (which also move them on every frame): no drag
    shown = _shown.get(scene.as_pointer())
    dragged = []
    for link in jw.links:
        obj = link.object
        if link.name == jw.ground or obj is None or obj.name not in moved or not sc.object_alive(scene, obj):
            continue
        if shown is None:
            try:
                shown = _expected(scene, sc.mechanism_from_scene(scene))
            except (SceneError, sc.core().JointwiseError):
                return
        was = shown.get(obj.name)
        if was is None or _differs(_matrix(obj), was):
            dragged.append((obj, link.name))
    if len(dragged) == 1:
        drag(scene, dragged[0][0], link_name=dragged[0][1])
        return
    if dragged:  # several links moved at once (an operator, animation removed): no drag
        record(scene)
        return
    for obj, measure in handles(scene):
        if obj.name not in moved:
            continue
        was = (shown or {}).get(obj.name)
        if was is None or _differs(_matrix(obj), was):
            drag(scene, obj, measure=measure)
            return


def _after_pose(scene, mech, pose):
    place_handles(scene, pose.links)
    record(scene)


@persistent
def jointwise_drag_load_post(*_args):
    _shown.clear()  # scene pointers of the file before mean nothing now
    posing.forget()


_HANDLERS = (
    (bpy.app.handlers.depsgraph_update_post, jointwise_drag),
    (bpy.app.handlers.load_post, jointwise_drag_load_post),
)


def register():
    for lst, fn in _HANDLERS:
        live_remove(lst, fn)
        lst.append(fn)
    if _after_pose not in posing.AFTER_POSE:
        posing.AFTER_POSE.append(_after_pose)


def unregister():
    for lst, fn in _HANDLERS:
        live_remove(lst, fn)
    if _after_pose in posing.AFTER_POSE:
        posing.AFTER_POSE.remove(_after_pose)
    _shown.clear()
    posing.forget()


def live_remove(lst, fn):
    for h in list(lst):
        if h is fn or (getattr(h, "__name__", None) == fn.__name__
                       and getattr(h, "__module__", "").split(".")[-1] == fn.__module__.split(".")[-1]):
            lst.remove(h)

