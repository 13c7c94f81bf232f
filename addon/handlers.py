"""Live posing: a value's update callback and the frame-change handler.

A changed value travels: property update -> scene.pose_scene (scene mapping -> core
solve -> scene mapping) -> ``matrix_world``. Values written back by the solve do not
re-enter (``quiet``). Handlers are registered once; ``unregister`` removes them (also
stale copies left by an earlier load of this module, matched by name and module).
"""
from __future__ import annotations

import contextlib

import bpy
from bpy.app.handlers import persistent

_quiet = 0


@contextlib.contextmanager
def quiet():
    """Write properties without triggering live posing."""
    global _quiet
    _quiet += 1
    try:
        yield
    finally:
        _quiet -= 1


def value_changed(item, context):
    """``update`` of ``joints[i].value``: with live posing on, solve with that value held."""
    if _quiet:
        return
    scene = item.id_data
    if not isinstance(scene, bpy.types.Scene) or not scene.jointwise.live:
        return
    from . import scene as sc
    sc.pose_scene(scene, extra=(item.name,))


@persistent
def jointwise_frame_change(scene, depsgraph=None):
    if _quiet or not scene.jointwise.live or not scene.jointwise.joints:
        return
    from . import scene as sc
    with quiet():
        sc.pose_scene(scene, restore_values=False)


@persistent
def jointwise_load_post(*_args):
    from . import scene as sc
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
    for lst, fn in _HANDLERS:
        _remove_same(lst, fn)
        lst.append(fn)


def unregister():
    for lst, fn in _HANDLERS:
        _remove_same(lst, fn)
    from . import scene as sc
    sc.clear_cache()
