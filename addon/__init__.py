"""Jointwise for Blender: registration only.

Layers, bottom to top (each module imports only from modules below it; the order is
written once, in tests/test_addon_pure.py): convert, keys, fit, proximity (pure, no bpy)
-> properties -> scene -> animation -> posing -> live, bake -> trace, files -> drag ->
operators -> panels, clearance -> __init__.
"""
from __future__ import annotations

import bpy

from . import axes, bake, cam, clearance, drag, edit, live, measures, operators, panels, posing, properties

CLASSES = (properties.CLASSES + operators.CLASSES + axes.CLASSES + edit.CLASSES + measures.CLASSES
           + panels.CLASSES + clearance.CLASSES + cam.CLASSES)


def register():
    for cls in CLASSES:
        bpy.utils.register_class(cls)
    clearance.register()
    properties.register_scene_property()
    live.register()
    drag.register()
    posing.AFTER_POSE.append(measures.refresh)
    bake.EXTRA_CHANNELS.append(measures.bake_channels)
    edit.register()
    measures.register()


def unregister():
    drag.unregister()
    measures.unregister()
    edit.unregister()
    for hooks, f in ((bake.EXTRA_CHANNELS, measures.bake_channels), (posing.AFTER_POSE, measures.refresh)):
        while f in hooks:
            hooks.remove(f)
    live.unregister()
    properties.unregister_scene_property()
    clearance.unregister()
    for cls in reversed(CLASSES):
        bpy.utils.unregister_class(cls)
