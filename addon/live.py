"""Live posing: a changed value poses at once; following the animation re-poses on frame
change and playback (``scene.jointwise.live``).

A changed value travels: property update -> :func:`posing.pose_scene` (scene mapping ->
core solve -> scene mapping) -> ``matrix_world``. Values written back by the solve do not
re-enter (``properties.quiet``). Handlers are registered once; ``unregister`` removes them
(also stale copies left by an earlier load of this module, matched by name and module).
"""
from __future__ import annotations

import bpy
from bpy.app.handlers import persistent

from . import posing, properties
from . import scene as sc


def value_changed(item, context):
    """``update`` of a joint value: solve with that value held."""
    if properties.is_quiet():
        return
    scene = item.id_data
    if not isinstance(scene, bpy.types.Scene) or not scene.jointwise.live:
        return
    posing.pose_scene(scene, extra=(item.name,))


@persistent
def jointwise_frame_change(scene, depsgraph=None):
    if properties.is_quiet() or not scene.jointwise.live or not scene.jointwise.joints:
        return
    with properties.quiet():
        posing.pose_scene(scene, restore_values=False)


@persistent
def jointwise_load_post(*_args):
    sc.clear_cache()


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
    for lst, fn in _HANDLERS:
        _remove_same(lst, fn)
        lst.append(fn)


def unregister():
    properties.VALUE_CHANGED[:] = []
    for lst, fn in _HANDLERS:
        _remove_same(lst, fn)
    sc.clear_cache()
