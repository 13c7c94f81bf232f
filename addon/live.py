"""Live posing: a changed value poses at once; following the animation (``scene.jointwise.live``)
re-poses on frame change and playback.

A changed value travels: property update -> :func:`posing.pose_scene` (scene mapping ->
core solve -> scene mapping) -> ``matrix_world``. Values written back by the solve do not
re-enter (``properties.quiet``). Handlers are registered once; ``unregister`` removes them
(also stale copies left by an earlier load of this module, matched by name and module).

On a frame change the joint list keeps showing the values of the pose on screen:
* following the animation, with baked link keys: the keys play (no live pose overrides
  them) and the values are the baked ones of that frame (:func:`bake.baked_values`);
* following the animation, no bake: the scene is posed from the animated values;
* not following: the links stay, and animated values are set back to the pose's.
"""
from __future__ import annotations

import math

import bpy
from bpy.app.handlers import persistent

from . import animation, bake, convert, posing, properties
from . import scene as sc


def value_changed(item, context):
    """``update`` of a joint value: refuse a non-finite number, else solve with it held."""
    scene = item.id_data
    if not isinstance(scene, bpy.types.Scene):
        return
    v = float(item.value)
    if not (math.isfinite(v) and abs(v) < 3e38):  # the host stores inf as the float32 maximum
        with properties.quiet():
            item.value = item.last
        posing.set_status(scene, converged=False,
                          message=f"{item.name}: type a finite number; kept "
                                  f"{convert.format_value(item.last, item.kind, sc.display_length_of(scene))}")
        return
    ok, msg = posing.pose_scene(scene, extra=(item.name,))
    if ok and item.name in animation.coordinate_fcurves(scene):
        if getattr(scene.tool_settings, "use_keyframe_insert_auto", False):
            # the host's convention: with auto-keying on, a changed keyed value is keyed
            i = scene.jointwise.joints.find(item.name)
            animation.key_value(scene, animation.value_path(i, item.kind), scene.frame_current,
                                float(item.value))
            posing.set_status(scene, message=f"{msg}; keyed {item.name} at frame "
                                             f"{scene.frame_current} (auto-keying)")
        elif scene.jointwise.live:  # not following, a frame change keeps the pose on screen
            posing.set_status(scene, message=f"{msg}; {item.name} is keyed: the animation sets it "
                                             f"back on the next frame change (key it with I, or "
                                             f"turn on auto-keying)")


def _show_pose_values(scene):
    """Animated values back at the values of the pose on screen (not following)."""
    jw = scene.jointwise
    animated = animation.coordinate_fcurves(scene)
    if not animated:
        return
    with properties.quiet():
        for name in animated:
            item = jw.joints.get(name)
            if item is not None and abs(item.value - item.last) > 1e-12 * max(1.0, abs(item.last)):
                item.value = item.last


def follow(scene):
    """What a frame change does (see the module's docstring)."""
    jw = scene.jointwise
    if not jw.joints:
        return
    with properties.quiet():
        baked = bake.baked_values(scene, scene.frame_current + scene.frame_subframe)
        if baked is not None:  # the link keys play, following or not
            sc.write_values(scene, baked)
            return
        if not jw.live:
            _show_pose_values(scene)
            return
        # the animated values at this frame (also when switched on after showing the pose's)
        f = scene.frame_current + scene.frame_subframe
        for name, (fc, _view) in animation.coordinate_fcurves(scene).items():
            item = jw.joints.get(name)
            v = fc.evaluate(f)
            if item is not None and math.isfinite(v):
                item.value = v
        posing.pose_scene(scene, restore_values=False)


def live_switched(scene):
    """Following the animation switched on: pose from the animated values at once."""
    if scene.jointwise.live and scene.jointwise.joints:
        follow(scene)


@persistent
def jointwise_frame_change(scene, depsgraph=None):
    if properties.is_quiet():
        return
    follow(scene)


@persistent
def jointwise_load_post(*_args):
    sc.clear_cache()
    for scene in bpy.data.scenes:
        upgrade(scene)


def upgrade(scene):
    """A scene saved by an earlier version: stored names and animation paths brought up to
    date (see ``properties.upgrade_scene``)."""
    try:
        changed = properties.upgrade_scene(scene)
        changed |= animation.retarget_value_paths(scene)
    except (AttributeError, ReferenceError):
        return False
    old = bpy.data.collections.get("joint markers")
    if old is not None and bpy.data.collections.get("joint anchors") is None:
        old.name = "joint anchors"
    return changed


_HANDLERS = (
    (bpy.app.handlers.frame_change_post, jointwise_frame_change),
    (bpy.app.handlers.load_post, jointwise_load_post),
)


def _remove_same(lst, fn):
    for h in list(lst):
        if h is fn or (getattr(h, "__name__", None) == fn.__name__
                       and getattr(h, "__module__", "").split(".")[-1] == fn.__module__.split(".")[-1]):
            lst.remove(h)


def register():
    properties.VALUE_CHANGED[:] = [value_changed]
    properties.LIVE_CHANGED[:] = [live_switched]
    for lst, fn in _HANDLERS:
        _remove_same(lst, fn)
        lst.append(fn)


def unregister():
    properties.VALUE_CHANGED[:] = []
    properties.LIVE_CHANGED[:] = []
    for lst, fn in _HANDLERS:
        _remove_same(lst, fn)
    sc.clear_cache()
