"""What jointwise stores in the .blend: one mechanism per scene, ``scene.jointwise``.

Units (host side, everywhere in this package): angles in radians, lengths in
scene length units (Blender units; ``unit_settings.scale_length`` metres each).
The UI shows them in degrees and the scene's length unit through the host's unit
subtypes (``ANGLE``, ``DISTANCE``).

One item of ``joints`` per *coordinate* of the core (a 1-DOF joint's coordinate
is the joint's name; compound joints have ``NAME.1``, ``NAME.2`` ...), so
``scene.jointwise.joints[NAME].value`` addresses a coordinate directly. The
joint-level settings (type, links, anchor, helical parameters) are repeated on
each coordinate item of a compound joint; the first item (``slot == 1``) is the
one that counts.

A coordinate's value is stored in ``angle`` (an angle joint) or ``length`` (a length
joint): each carries its unit subtype, is animatable, and is what the joint list draws,
so I over the field keys it. ``value`` reads and writes whichever of the two the
coordinate's ``kind`` names (Python: radians or scene units); it is not animatable.
``home``, ``limit_min`` and ``limit_max`` carry no unit subtype (one collection cannot
mix angle and length subtypes); the panels show them through the views
``home_angle``/``home_length`` ..., which read and write the same numbers.

Joint frames: a joint's point and axis at home come from its *anchor*, an empty (Z
axis = joint axis, X axis = second axis of a universal joint). The anchor is
parented to the joint's parent link object, and its placement is read relative
to that link: home frame = D_parent^-1 @ anchor.matrix_world, where D_parent is
the parent link's displacement from its stored home. So an anchor may be moved or
turned at any pose and is always understood in the parent link's frame.
``anchor_home`` keeps the anchor's home placement from the last set-home, used by
return-to-home. Files saved before the anchor was named so stored ``marker`` and
``marker_home``; :func:`upgrade_scene` moves them over on load.
"""
import contextlib
import math

import bpy
from bpy.props import (BoolProperty, CollectionProperty, EnumProperty, FloatProperty,
                       FloatVectorProperty, IntProperty, PointerProperty, StringProperty)

IDENTITY16 = tuple(float(i == j) for i in range(4) for j in range(4))
ANCHOR_TAG = "jointwise_anchor"  # custom property on anchor empties: the joint's name

JOINT_TYPES = (
    ("revolute", "Revolute", "Turns about the axis"),
    ("prismatic", "Prismatic", "Slides along the axis"),
    ("helical", "Helical", "Turns about the axis and advances by the lead per turn"),
    ("cylindrical", "Cylindrical", "Turns about and slides along the axis"),
    ("universal", "Universal", "Two perpendicular turns (anchor Z and X)"),
    ("spherical", "Spherical", "Three turns about the point"),
    ("planar", "Planar", "Two slides in the plane and a turn about its normal (anchor Z)"),
    ("fixed", "Fixed", "No relative motion"),
)

_quiet = [0]
VALUE_CHANGED = []  # set by ``live.register``: f(item, context) when a joint value changes
LIVE_CHANGED = []   # set by ``live.register``: f(scene) when following the animation is switched


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


JOINT_CHANGED = []  # set by ``edit.register``: f(item, context, prop) when type, parent or child is set


def _joint_update(prop):
    def update(self, context):
        for f in JOINT_CHANGED:
            f(self, context, prop)
    return update


def _value_update(self, context):
    if _quiet[0] or getattr(self.id_data, "is_evaluated", False):
        return
    for f in VALUE_CHANGED:
        f(self, context)


def _live_update(self, context):
    if _quiet[0]:
        return
    for f in LIVE_CHANGED:
        f(self.id_data)


def _view(target, label, subtype, unit, precision, description):
    """A unit-carrying view of the unit-less property ``target`` (same number)."""
    return FloatProperty(name=label, subtype=subtype, unit=unit, precision=precision, options=set(),
                         description=description,
                         get=lambda self: getattr(self, target),
                         set=lambda self, v: setattr(self, target, v))


def _angle(target, label, description):
    return _view(target, label, 'ANGLE', 'ROTATION', 3, description)


def _length(target, label, description):
    return _view(target, label, 'DISTANCE', 'LENGTH', 5, description)


def _value_get(self):
    return self.length if self.kind == "length" else self.angle


def _value_set(self, v):
    if self.kind == "length":
        self.length = v
    else:
        self.angle = v


_HOME = "Value at the home configuration (where the anchors were placed)"
_MIN = "Lowest value the joint may take; a value asked below it poses at it"
_MAX = "Highest value the joint may take; a value asked above it poses at it"
_VALUE = ("Joint value: the linkage moves at once. Keyed values are held by the animation "
          "(auto-keying on keys a drag)")


class JointwiseCoordinate(bpy.types.PropertyGroup):
    """One coordinate of a joint (the item name is the coordinate name)."""
    angle: FloatProperty(name="Angle", description=_VALUE, default=0.0, update=_value_update,
                         subtype='ANGLE', unit='ROTATION', precision=3, options={'ANIMATABLE'})
    length: FloatProperty(name="Length", description=_VALUE, default=0.0, update=_value_update,
                          subtype='DISTANCE', unit='LENGTH', precision=5, options={'ANIMATABLE'})
    value: FloatProperty(name="Value", get=_value_get, set=_value_set, options=set(), precision=6,
                         description="Joint value in radians or scene units (the angle or "
                                     "length field, whichever the joint has)")
    home_angle: _angle("home", "Home", _HOME)
    home_length: _length("home", "Home", _HOME)
    limit_min_angle: _angle("limit_min", "Min", _MIN)
    limit_min_length: _length("limit_min", "Min", _MIN)
    limit_max_angle: _angle("limit_max", "Max", _MAX)
    limit_max_length: _length("limit_max", "Max", _MAX)
    kind: EnumProperty(name="Kind", default="angle",
                       description="Whether this coordinate is a turn or a slide",
                       items=(("angle", "Angle", "A turn"), ("length", "Length", "A slide")))
    home: FloatProperty(name="Home", description=_HOME + " (radians or scene units)", precision=6)
    last: FloatProperty(name="Last solved", precision=6, options={'HIDDEN'},
                        description="Value of the last placement applied to the scene (warm start, undo of a failed change)")
    drive: BoolProperty(name="Drive", default=False,
                        description="Held at its value while the others are solved")
    use_limits: BoolProperty(name="Limits", default=False,
                             description="Keep the value between Min and Max")
    limit_min: FloatProperty(name="Min", precision=6, description=_MIN + " (radians or scene units)")
    limit_max: FloatProperty(name="Max", precision=6, description=_MAX + " (radians or scene units)")
    # joint-level data (the first coordinate of a joint counts)
    joint: StringProperty(name="Joint", description="Name of the joint this coordinate belongs to")
    slot: IntProperty(name="Slot", default=1, min=1, description="1-based index within the joint")
    type: EnumProperty(name="Type", items=JOINT_TYPES, default="revolute", update=_joint_update("type"),
                       description="How the child moves against the parent; changing it remakes the "
                                   "joint's coordinates when their kinds change")
    parent: StringProperty(name="Parent link", update=_joint_update("parent"),
                           description="Link the joint's anchor is fixed to")
    child: StringProperty(name="Child link", update=_joint_update("child"),
                          description="Link the joint moves")
    anchor: PointerProperty(name="Anchor", type=bpy.types.Object,
                            description="Empty whose Z axis is the joint axis and whose origin "
                                        "is the joint point (moves with the parent link)")
    use_axis2: BoolProperty(name="Second axis", default=False,
                            description="The anchor's X axis is the joint's second axis")
    anchor_home: FloatVectorProperty(name="Anchor home", size=16, default=IDENTITY16,
                                     description="The anchor's world matrix at home, row-major")
    lead: FloatProperty(name="Lead", description="Advance per turn",
                        default=0.0, precision=6, min=0.0, subtype='DISTANCE', unit='LENGTH')
    thread: StringProperty(name="Thread", description="Thread preset the lead came from, e.g. Tr16x4")
    hand: EnumProperty(name="Hand", default="right", description="Hand of the thread",
                       items=(("right", "Right", "Advances when turned anticlockwise seen from the tip of the axis"),
                              ("left", "Left", "Advances when turned clockwise seen from the tip of the axis")))


def _link_bound(self, context):
    """Binding an object to a link takes its current placement as the link's home."""
    obj = self.object
    if obj is not None:
        self.object_name = obj.name
        self.home = [float(x) for row in obj.matrix_world for x in row]


class JointwiseLink(bpy.types.PropertyGroup):
    """A rigid link bound to a scene object by pointer (renaming the object is harmless).
    Binding an object (also the ground's) takes its current placement as home."""
    object: PointerProperty(name="Object", type=bpy.types.Object, update=_link_bound,
                            description="Scene object that moves as this link; its placement "
                                        "when bound is the link's home")
    object_name: StringProperty(name="Object name", description="Last bound object name, for messages")
    home: FloatVectorProperty(name="Home", size=16, default=IDENTITY16,
                              description="World matrix at home, row-major")


def _coupling_kinds(self):
    jw = self.id_data.jointwise
    lead, fol = jw.joints.get(self.leader), jw.joints.get(self.follower)
    return (lead.kind if lead else "angle"), (fol.kind if fol else "angle")


def _per_turn_get(self):
    lk, fk = _coupling_kinds(self)
    if lk == "angle" and fk == "length":  # follower length per leader radian
        return self.ratio * 2 * math.pi
    if lk == "length" and fk == "angle" and self.ratio != 0:  # leader length per follower turn
        return 2 * math.pi / self.ratio
    return 0.0


def _per_turn_set(self, v):
    lk, fk = _coupling_kinds(self)
    if lk == "angle" and fk == "length":
        self.ratio = v / (2 * math.pi)
    elif lk == "length" and fk == "angle" and v != 0:
        self.ratio = 2 * math.pi / v


class JointwiseCoupling(bpy.types.PropertyGroup):
    """follower = ratio * leader + offset (host units)."""
    leader: StringProperty(name="Leader", description="Coordinate that sets the follower")
    follower: StringProperty(name="Follower", description="Coordinate that follows the leader")
    ratio: FloatProperty(name="Ratio", default=1.0, precision=6,
                         description="Follower change per leader change (radians or scene units "
                                     "of each; no unit when both turn or both slide)")
    per_turn: FloatProperty(name="Length per Turn", get=_per_turn_get, set=_per_turn_set,
                            subtype='DISTANCE', unit='LENGTH', precision=5, options=set(),
                            description="Rack and pinion, screw: the slide per full turn")
    offset: FloatProperty(name="Offset", default=0.0, precision=6,
                          description="Follower value when the leader is at zero (radians or scene units)")
    offset_angle: _angle("offset", "Offset", "Follower value when the leader is at zero")
    offset_length: _length("offset", "Offset", "Follower value when the leader is at zero")
    law_json: StringProperty(name="Motion law", default="",
                             description="A motion law's keys (JSON, host units); empty for follower = ratio * leader + offset")


MEASURE_KINDS = (
    ('POINT', "Point", "World position of a point fixed to a link"),
    ('DISTANCE', "Distance", "Distance between two points fixed to links"),
    ('ANGLE', "Angle", "Angle between two directions fixed to links"),
    ('RATE', "Rate", "Speed ratio d(of)/d(per) along the motion"),
)


class JointwiseMeasure(bpy.types.PropertyGroup):
    """One measure (the item name is the measure name); definition in host units, at home.
    ``value`` and ``location`` are refreshed on every pose and keyed by a bake (see
    ``measures``)."""
    kind: EnumProperty(name="Kind", items=MEASURE_KINDS, default='POINT',
                       description="What is measured")
    value: FloatProperty(name="Value", precision=6, options={'ANIMATABLE'},
                         description="Scene length (point: distance moved from home; distance), "
                                     "radians (angle) or rate in host units")
    location: FloatVectorProperty(name="Location", size=3, subtype='TRANSLATION', unit='LENGTH',
                                  options={'ANIMATABLE'},
                                  description="World position of a point measure (scene units)")
    problem: StringProperty(name="Problem", default="",
                            description="Why the measure has no value (empty when it has one)")
    link_a: StringProperty(name="Link A", description="Link carrying point or direction a")
    link_b: StringProperty(name="Link B", description="Link carrying point or direction b")
    at_a: FloatVectorProperty(name="Point A", size=3, subtype='TRANSLATION', unit='LENGTH',
                              description="Point a: world position at home (scene units)")
    at_b: FloatVectorProperty(name="Point B", size=3, subtype='TRANSLATION', unit='LENGTH',
                              description="Point b: world position at home (scene units)")
    axis_a: FloatVectorProperty(name="Direction A", size=3, subtype='XYZ', default=(1.0, 0.0, 0.0),
                                description="Direction a: world direction at home")
    axis_b: FloatVectorProperty(name="Direction B", size=3, subtype='XYZ', default=(1.0, 0.0, 0.0),
                                description="Direction b: world direction at home")
    of: StringProperty(name="Of", description="Coordinate whose rate is measured")
    per: StringProperty(name="Per", description="Coordinate the rate is measured per")
    source: StringProperty(name="File entry", options={'HIDDEN'},
                           description="The imported file's entry, written back while unchanged")


class JointwiseMechanism(bpy.types.PropertyGroup):
    name_text: StringProperty(name="Mechanism", default="", description="Name of the mechanism")
    ground: StringProperty(name="Ground link", default="ground",
                           description="Link that stays put (the world, or the object bound to it)")
    links: CollectionProperty(type=JointwiseLink)
    joints: CollectionProperty(type=JointwiseCoordinate)
    couplings: CollectionProperty(type=JointwiseCoupling)
    measures: CollectionProperty(type=JointwiseMeasure, description="Measures listed in the Measures panel")
    measure_index: IntProperty(name="Active Measure", default=0, description="The measure picked in the list")
    joint_index: IntProperty(name="Active joint", default=0, description="Joint shown below the list")
    coupling_index: IntProperty(name="Active coupling", default=0, description="Coupling selected in the list")
    live: BoolProperty(name="Follow Animation", default=True, update=_live_update,
                       description="Pose the linkage from the animated joint values on every "
                                   "frame change and during playback")
    # file units used by export (the units of the file last imported)
    file_length_unit: EnumProperty(name="File length unit", default="mm",
                                   description="Length unit written on export",
                                   items=(("mm", "mm", "Millimetres"), ("cm", "cm", "Centimetres"),
                                          ("m", "m", "Metres"), ("in", "in", "Inches")))
    file_angle_unit: EnumProperty(name="File angle unit", default="deg",
                                  description="Angle unit written on export",
                                  items=(("deg", "deg", "Degrees"), ("rad", "rad", "Radians")))
    measures_json: StringProperty(name="Measures", default="",
                                  description="Measures of the imported file, kept for export (file units)")
    geometry_json: StringProperty(name="File geometry", default="",
                                  description="Joint points and axes exactly as the imported file gave "
                                              "them, written back on export while the anchors stay put")
    # status of the last solve
    converged: BoolProperty(name="Converged", default=True, description="The last pose closed every loop")
    closure_error: FloatProperty(name="Closure error", default=0.0, precision=9,
                                 description="How far the loops stayed open at the last pose")
    mobility: IntProperty(name="Mobility", default=-1,
                          description="Independent motions at the last pose (-1: not known)")
    singular: BoolProperty(name="Singular", default=False,
                           description="The last pose is at or near a dead point")
    message: StringProperty(name="Status", default="", description="What the last action did")
    baked_values: StringProperty(name="Baked values", default="", options={'HIDDEN'},
                                 description="Joint values of the last bake per frame (JSON), "
                                             "shown while its keys play")


CLASSES = (JointwiseCoordinate, JointwiseLink, JointwiseCoupling, JointwiseMeasure, JointwiseMechanism)


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


def upgrade_scene(scene):
    """Bring a scene saved by an earlier version up to date (idempotent): the joint's
    ``marker`` becomes ``anchor``, ``marker_home`` ``anchor_home``, the stored ``value``
    moves into ``angle`` or ``length``. Returns True when anything changed."""
    jw = scene.jointwise
    changed = False
    with quiet():
        for item in jw.joints:
            old = item.get("marker")
            if old is not None:
                if item.anchor is None and isinstance(old, bpy.types.Object):
                    item.anchor = old
                del item["marker"]
                changed = True
            old = item.get("marker_home")
            if old is not None:
                item.anchor_home = [float(x) for x in old]
                del item["marker_home"]
                changed = True
            old = item.get("value")
            if old is not None:
                v = float(old)
                if item.kind == "length":
                    item.length = v
                else:
                    item.angle = v
                del item["value"]
                changed = True
            a = item.anchor
            if a is not None and a.get("jointwise_marker") is not None:
                a[ANCHOR_TAG] = a["jointwise_marker"]
                del a["jointwise_marker"]
                changed = True
    return changed
