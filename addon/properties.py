"""What jointwise stores in the .blend: one mechanism per scene, ``scene.jointwise``.

Units (host side, everywhere in this package): angles in radians, lengths in
scene length units (Blender units; ``unit_settings.scale_length`` metres each).
Angle values show in degrees in the UI through the ``ANGLE`` subtype.

One item of ``joints`` per *coordinate* of the core (a 1-DOF joint's coordinate
is the joint's name; compound joints have ``NAME.1``, ``NAME.2`` ...), so
``scene.jointwise.joints[NAME].value`` addresses a coordinate directly. The
joint-level settings (type, links, marker, helical parameters) are repeated on
each coordinate item of a compound joint; the first item (``slot == 1``) is the
one that counts.

``value``, ``home``, ``limit_min`` and ``limit_max`` carry no unit subtype (one
collection cannot mix angle and length subtypes); the panel shows them through the
views ``angle``/``length``, ``home_angle``/``home_length`` ... which read and write
the same numbers (not animatable: key ``value``, e.g. with the key button).

Joint frames: a joint's point and axis at home come from its marker empty (Z
axis = joint axis, X axis = second axis of a universal joint). The marker is
parented to the joint's parent link object, and its placement is read relative
to that link: home frame = D_parent^-1 @ marker.matrix_world, where D_parent is
the parent link's displacement from its stored home. So a marker may be moved or
turned at any pose and is always understood in the parent link's frame.
``marker_home`` keeps the marker's home placement from the last set-home, used by
return-to-home.
"""
import contextlib
import math

import bpy
from bpy.props import (BoolProperty, CollectionProperty, EnumProperty, FloatProperty,
                       FloatVectorProperty, IntProperty, PointerProperty, StringProperty)

IDENTITY16 = tuple(float(i == j) for i in range(4) for j in range(4))

JOINT_TYPES = (
    ("revolute", "Revolute", "Turns about the axis"),
    ("prismatic", "Prismatic", "Slides along the axis"),
    ("helical", "Helical", "Turns about the axis and advances by the lead per turn"),
    ("cylindrical", "Cylindrical", "Turns about and slides along the axis"),
    ("universal", "Universal", "Two perpendicular turns (marker Z and X)"),
    ("spherical", "Spherical", "Three turns about the point"),
    ("planar", "Planar", "Two slides in the plane and a turn about its normal (marker Z)"),
    ("fixed", "Fixed", "No relative motion"),
)


_quiet = [0]
VALUE_CHANGED = []  # set by ``live.register``: called as f(item, context) when a value changes


@contextlib.contextmanager
def quiet():
    """Write properties without triggering posing."""
    _quiet[0] += 1
    try:
        yield
    finally:
        _quiet[0] -= 1


def is_quiet():
    return _quiet[0] > 0


def _value_update(self, context):
    if _quiet[0]:
        return
    for f in VALUE_CHANGED:
        f(self, context)


def _view(target, label, subtype, unit, precision):
    """A unit-carrying view of the unit-less property ``target`` (same number)."""
    return FloatProperty(name=label, subtype=subtype, unit=unit, precision=precision, options=set(),
                         get=lambda self: getattr(self, target),
                         set=lambda self, v: setattr(self, target, v))


def _angle(target, label):
    return _view(target, label, 'ANGLE', 'ROTATION', 3)


def _length(target, label):
    return _view(target, label, 'DISTANCE', 'LENGTH', 5)


class JointwiseCoordinate(bpy.types.PropertyGroup):
    """One coordinate of a joint (the item name is the coordinate name)."""
    value: FloatProperty(name="Value", description="Joint value: radians or scene length units",
                         default=0.0, update=_value_update, options={'ANIMATABLE'}, precision=6)
    angle: _angle("value", "Value")
    length: _length("value", "Value")
    home_angle: _angle("home", "Home")
    home_length: _length("home", "Home")
    limit_min_angle: _angle("limit_min", "Min")
    limit_min_length: _length("limit_min", "Min")
    limit_max_angle: _angle("limit_max", "Max")
    limit_max_length: _length("limit_max", "Max")
    kind: EnumProperty(name="Kind", items=(("angle", "Angle", ""), ("length", "Length", "")),
                       default="angle")
    home: FloatProperty(name="Home", description="Value at the home configuration", precision=6)
    last: FloatProperty(name="Last solved", precision=6, options={'HIDDEN'},
                        description="Value of the last placement applied to the scene (warm start, undo of a failed change)")
    drive: BoolProperty(name="Drive", description="Held at its value while the others are solved",
                        default=False)
    use_limits: BoolProperty(name="Limits", default=False)
    limit_min: FloatProperty(name="Min", precision=6)
    limit_max: FloatProperty(name="Max", precision=6)
    # joint-level data (the first coordinate of a joint counts)
    joint: StringProperty(name="Joint", description="Name of the joint this coordinate belongs to")
    slot: IntProperty(name="Slot", default=1, min=1, description="1-based index within the joint")
    type: EnumProperty(name="Type", items=JOINT_TYPES, default="revolute")
    parent: StringProperty(name="Parent link")
    child: StringProperty(name="Child link")
    marker: PointerProperty(name="Marker", type=bpy.types.Object,
                            description="Empty whose Z axis is the joint axis and location the joint point")
    use_axis2: BoolProperty(name="Second axis", default=False,
                            description="The marker's X axis is the joint's second axis")
    marker_home: FloatVectorProperty(name="Marker home", size=16, default=IDENTITY16)
    lead: FloatProperty(name="Lead", description="Advance per turn (scene length units)",
                        default=0.0, precision=6, min=0.0, subtype='DISTANCE', unit='LENGTH')
    thread: StringProperty(name="Thread", description="Thread preset the lead came from, e.g. Tr16x4")
    hand: EnumProperty(name="Hand", items=(("right", "Right", ""), ("left", "Left", "")),
                       default="right")


def _link_bound(self, context):
    """Binding an object to a link takes its current placement as the link's home."""
    obj = self.object
    if obj is not None:
        self.object_name = obj.name
        self.home = [float(x) for row in obj.matrix_world for x in row]


class JointwiseLink(bpy.types.PropertyGroup):
    """A rigid link bound to a scene object by pointer (renaming the object is harmless).
    Binding an object (also the ground's) takes its current placement as home."""
    object: PointerProperty(name="Object", type=bpy.types.Object, update=_link_bound)
    object_name: StringProperty(name="Object name", description="Last bound object name, for messages")
    home: FloatVectorProperty(name="Home", size=16, default=IDENTITY16,
                              description="World matrix at home, row-major")


class JointwiseCoupling(bpy.types.PropertyGroup):
    """follower = ratio * leader + offset (host units)."""
    leader: StringProperty(name="Leader")
    follower: StringProperty(name="Follower")
    ratio: FloatProperty(name="Ratio", default=1.0, precision=6)
    offset: FloatProperty(name="Offset", default=0.0, precision=6)
    law_json: StringProperty(name="Motion law", default="",
                             description="A motion law's keys (JSON, host units); empty for follower = ratio * leader + offset")


class JointwiseMechanism(bpy.types.PropertyGroup):
    name_text: StringProperty(name="Mechanism", default="")
    ground: StringProperty(name="Ground link", default="ground")
    links: CollectionProperty(type=JointwiseLink)
    joints: CollectionProperty(type=JointwiseCoordinate)
    couplings: CollectionProperty(type=JointwiseCoupling)
    joint_index: IntProperty(name="Active joint", default=0)
    coupling_index: IntProperty(name="Active coupling", default=0)
    live: BoolProperty(name="Live posing", default=False,
                       description="Solve and move the links when a value changes and on every frame")
    # file units used by export (the units of the file last imported)
    file_length_unit: EnumProperty(name="File length unit", default="mm",
                                   items=(("mm", "mm", ""), ("cm", "cm", ""), ("m", "m", ""),
                                          ("in", "in", "")))
    file_angle_unit: EnumProperty(name="File angle unit", default="deg",
                                  items=(("deg", "deg", ""), ("rad", "rad", "")))
    measures_json: StringProperty(name="Measures", default="",
                                  description="Measures of the imported file, kept for export (file units)")
    geometry_json: StringProperty(name="File geometry", default="",
                                  description="Joint points and axes exactly as the imported file gave "
                                              "them, written back on export while the markers stay put")
    # status of the last solve
    converged: BoolProperty(name="Converged", default=True)
    closure_error: FloatProperty(name="Closure error", default=0.0, precision=9)
    mobility: IntProperty(name="Mobility", default=-1)
    singular: BoolProperty(name="Singular", default=False)
    message: StringProperty(name="Status", default="")


CLASSES = (JointwiseCoordinate, JointwiseLink, JointwiseCoupling, JointwiseMechanism)


def register_scene_property():
    bpy.types.Scene.jointwise = PointerProperty(type=JointwiseMechanism)


def add_settings(props):
    """Attach more settings ``{name: property}`` to the scene's mechanism, after the
    classes are registered (for modules above this one, e.g. the clearance results)."""
    for name, prop in props.items():
        setattr(JointwiseMechanism, name, prop)


def remove_settings(names):
    for name in names:
        if name in JointwiseMechanism.bl_rna.properties:
            delattr(JointwiseMechanism, name)


def unregister_scene_property():
    if hasattr(bpy.types.Scene, "jointwise"):
        del bpy.types.Scene.jointwise


def is_finite(*xs):
    return all(math.isfinite(x) for x in xs)
