"""Jointwise for Blender: registration only (see properties, scene, operators, panels,
bake, handlers)."""
from __future__ import annotations

import bpy

from . import clearance, handlers, operators, panels, properties, trace

CLASSES = (properties.CLASSES + operators.CLASSES + panels.CLASSES + trace.CLASSES
           + clearance.CLASSES)


def register():
    for cls in CLASSES:
        bpy.utils.register_class(cls)
    clearance.register()
    properties.register_scene_property()
    handlers.register()


def unregister():
    handlers.unregister()
    properties.unregister_scene_property()
    clearance.unregister()
    for cls in reversed(CLASSES):
        bpy.utils.unregister_class(cls)
