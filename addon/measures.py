"""Measures in the scene: ``scene.jointwise.measures[NAME]`` with live values and baked F-curves.

Each item defines one measure in host units (scene lengths, world positions at home,
directions fixed to links, coordinate names) and carries its value:

``POINT``     a point fixed to ``link_a`` at ``at_a``: ``location`` its world position now;
              ``value`` how far it has moved from its home position (scene length).
``DISTANCE``  between ``at_a`` on ``link_a`` and ``at_b`` on ``link_b``: ``value``, scene length.
``ANGLE``     between direction ``axis_a`` on ``link_a`` and ``axis_b`` on ``link_b``:
              ``value``, radians (0..pi).
``RATE``      d(``of``)/d(``per``) along the mechanism's motion: ``value`` in host units
              (radian per radian, scene length per radian, ...).

The values come from the core's own evaluation (``jointwise.measures.evaluate``, the same
code as ``jointwise sweep``'s measure columns) on the scene mechanism, which is built in
radians and scene units, so no conversion is needed on the way back except the core's
degrees for angles.  ``refresh`` runs after every pose (``posing.AFTER_POSE``);
``bake_channels`` (``bake.EXTRA_CHANNELS``) keys ``value`` and ``location`` on the scene's
action for every baked frame, by name (``jointwise.measures["NAME"].value``), so the
measures play back, show in the Graph Editor and can drive other properties.
"""
from __future__ import annotations

import json
import math

import bpy
import numpy as np
from bpy.props import EnumProperty, FloatVectorProperty, StringProperty

from . import animation, convert, posing
from . import scene as sc
from .convert import SceneError
from .reporting import Base

__all__ = ["refresh", "bake_channels", "clear_keys", "import_from", "export_entries",
           "format_measure", "CLASSES"]

KIND_OF_TYPE = {"point": "POINT", "distance": "DISTANCE", "angle": "ANGLE", "rate": "RATE"}
PATH_PREFIX = "jointwise.measures["


def _path(name, prop):
    esc = name.replace("\\", "\\\\").replace('"', '\\"')
    return f'jointwise.measures["{esc}"].{prop}'


# -- definitions -> core ---------------------------------------------------------------------

def definitions(scene, mech):
    """({name: core Measure} in host units, {name: problem}) for the scene's measures."""
    from jointwise.mechanism import Measure
    defs, problems = {}, {}
    links, coords = set(mech.links), set(mech.coordinates)
    for m in scene.jointwise.measures:
        def link(which):
            name = getattr(m, f"link_{which}")
            if name not in links:
                raise SceneError(f"link {name!r} is not a link of the mechanism")
            return name
        try:
            if m.kind == 'POINT':
                defs[m.name] = Measure(m.name, "point", a=(link("a"), list(m.at_a)))
            elif m.kind == 'DISTANCE':
                defs[m.name] = Measure(m.name, "distance", a=(link("a"), list(m.at_a)),
                                       b=(link("b"), list(m.at_b)))
            elif m.kind == 'ANGLE':
                for which in "ab":
                    if not np.linalg.norm(getattr(m, f"axis_{which}")) > 0:
                        raise SceneError(f"direction {which} has zero length")
                defs[m.name] = Measure(m.name, "angle", a=(link("a"), list(m.axis_a)),
                                       b=(link("b"), list(m.axis_b)))
            else:
                for c in (m.of, m.per):
                    if c not in coords:
                        raise SceneError(f"{c!r} is not a joint coordinate")
                if m.of == m.per:
                    raise SceneError("'of' and 'per' are the same coordinate")
                defs[m.name] = Measure(m.name, "rate", of=m.of, per=m.per)
        except SceneError as exc:
            problems[m.name] = str(exc)
    return defs, problems


class _WithMeasures:
    """The scene mechanism seen with the scene's measures (everything else delegated)."""

    def __init__(self, mech, measures):
        self._mech = mech
        self.measures = measures

    def __getattr__(self, name):
        return getattr(self._mech, name)


def evaluate(scene, mech, Q, links, ramp=None):
    """Measures at states ``Q`` (N, n) with link displacements ``links`` {name: (N, 4, 4)}:
    ``({name: (value (N,), location (N, 3) or None)}, {name: problem})``, host units.
    ``ramp``: the coordinate a bake ramps (rates are taken along its motion)."""
    defs, problems = definitions(scene, mech)
    if not defs:
        return {}, problems
    from jointwise.measures import evaluate as core_evaluate
    Q = np.atleast_2d(Q)
    rates = {n: m for n, m in defs.items() if m.type == "rate"}
    rest = {n: m for n, m in defs.items() if n not in rates}
    values = core_evaluate(_WithMeasures(mech, rest), Q, links)[0] if rest else {}
    for name, m in rates.items():
        held = rate_held(scene, mech, m.of, m.per, ramp)
        if len(Q) == 1:
            values[name] = np.array([_rate_at(mech, Q[0], m.of, m.per, held)])
        else:
            masters = {int(mech.coupling_table.master[i]) for i in held}
            values.update(core_evaluate(_WithMeasures(mech, {name: m}), Q, links,
                                        held_masters=masters)[0])
    g = sc.ground_displacement(scene)
    out = {}
    for name, m in defs.items():
        v = np.asarray(values[name], dtype=float)
        if m.type == "point":
            at = np.asarray(m.a[1], dtype=float)
            out[name] = (np.linalg.norm(v - at, axis=1), v @ g[:3, :3].T + g[:3, 3])
        elif m.type == "angle":
            out[name] = (np.radians(v), None)
        else:
            out[name] = (v, None)
    return out, problems


def rate_held(scene, mech, of, per, ramp=None):
    """Coordinate indices held while ``per`` moves, for the rate d(of)/d(per), by the core's
    one holding rule with the list's Drive flags and animated coordinates: ``per`` given (a
    passive ``per`` releases the drives of its loop group: it takes their place as the
    input); in a bake ramping ``ramp``, the bake's held set with ``per`` in the ramp's place
    (as the core's batched rate does). ``of`` and ``per`` are left out."""
    if ramp and ramp in mech.coordinates:
        names = posing.held_names(scene, mech, given=[ramp], inputs=[ramp])
        if per not in names:
            names = [c for c in names if c != ramp]
    else:
        names = posing.held_names(scene, mech, given=[per])
    return {mech.coordinates.index(c) for c in names if c not in (of, per)}


def _rate_at(mech, q, of, per, held):
    """d(of)/d(per) at one state ``q`` (host units: the scene mechanism is in radians and
    scene units) from the constraint Jacobian (``Solver.tangent``, least norm) with the
    coordinates ``held`` (indices, :func:`rate_held`) kept.

    The same quantity as the core's batched rate (``jointwise.measures.rate``) with the
    same held set, which a bake uses; one pose costs a fraction of it (host tests compare
    both with a sweep)."""
    io, ip = mech.coordinates.index(of), mech.coordinates.index(per)
    return float(mech.solver.tangent(np.asarray(q, dtype=float), held, ip)[io])


# -- live values -----------------------------------------------------------------------------

def refresh(scene, mech, pose):
    """``posing.AFTER_POSE`` hook: every measure's value (and location) at ``pose``."""
    jw = scene.jointwise
    if not len(jw.measures):
        return
    q = getattr(pose, "q", None)
    if q is None:
        q = np.array([pose.joints[c] for c in mech.coordinates], dtype=float)
    links = {k: np.asarray(v, dtype=float)[None] for k, v in pose.links.items()}
    try:
        out, problems = evaluate(scene, mech, np.asarray(q, dtype=float)[None], links)
    except (SceneError, sc.core().JointwiseError, ValueError, np.linalg.LinAlgError) as exc:
        why = posing.error_text(scene, exc)
        out, problems = {}, {m.name: why for m in jw.measures}
    _show(jw, out, problems)


def _show(jw, out, problems):
    """Put one state's measures (``evaluate``'s first row) and problems on the list; a value
    that is not finite leaves the shown one as it was."""
    for m in jw.measures:
        m.problem = problems.get(m.name, "")
        if m.name not in out:
            continue
        value, loc = out[m.name]
        if np.isfinite(value[0]):
            m.value = float(value[0])
        if loc is not None and np.all(np.isfinite(loc[0])):
            m.location = [float(x) for x in loc[0]]


# -- baked F-curves --------------------------------------------------------------------------

def bake_channels(scene, solved):
    """``bake.EXTRA_CHANNELS`` hook: the measures over the solved frames, checked before
    anything is written; returns the writer (or None without measures)."""
    jw = scene.jointwise
    if not len(jw.measures):
        return None
    mech = sc.mechanism_from_scene(scene)
    try:
        Q = np.column_stack([np.asarray(solved.joints[c], dtype=float) for c in mech.coordinates])
    except KeyError as exc:
        raise SceneError(f"measures: the bake has no values of coordinate {exc}; no keys were written") from None
    links = {k: np.asarray(v, dtype=float) for k, v in solved.links.items()}
    ramp = getattr(solved, "ramp", None)
    out, problems = evaluate(scene, mech, Q, links, ramp=ramp[0] if ramp else None)
    channels = {}
    for name, (value, loc) in out.items():
        if not np.all(np.isfinite(value)) or (loc is not None and not np.all(np.isfinite(loc))):
            raise SceneError(f"measure {name!r}: non-finite values in the baked frames; no keys were written")
        channels[(_path(name, "value"), 0)] = value
        if loc is not None:
            for i in range(3):
                channels[(_path(name, "location"), i)] = loc[:, i]
    frames = np.asarray(solved.frames, dtype=float)

    def write():
        clear_keys(scene)
        curves = animation.scene_curves(scene)
        co = np.empty(2 * len(frames), dtype=np.float32)
        co[0::2] = frames
        for (path, index), values in channels.items():
            fc = curves.new(path, index=index)
            fc.keyframe_points.add(len(frames))
            co[1::2] = values
            fc.keyframe_points.foreach_set("co", co)
            lin = animation.linear_interpolation(fc)
            fc.keyframe_points.foreach_set("interpolation", np.full(len(frames), lin, dtype=np.int32))
            fc.update()
    return write


def clear_keys(scene, names=None):
    """Remove the measures' F-curves from the scene's action (all, or those of ``names``).
    Returns how many were removed."""
    ad = scene.animation_data
    if ad is None or ad.action is None:
        return 0
    curves = animation.scene_curves(scene, create=False)
    if curves is None:
        return 0
    wanted = None if names is None else {_path(n, p) for n in names for p in ("value", "location")}
    gone = [fc for fc in curves if fc.data_path.startswith(PATH_PREFIX)
            and (wanted is None or fc.data_path in wanted)]
    for fc in gone:
        curves.remove(fc)
    return len(gone)


def refresh_from_scene(scene):
    """Every measure's value at the placement the scene shows (no solve): the links'
    displacements as placed, the coordinates' last solved values."""
    jw = scene.jointwise
    if not len(jw.measures):
        return
    mech = sc.mechanism_from_scene(scene)
    q = np.array([float(jw.joints[c].last) if c in jw.joints else 0.0 for c in mech.coordinates])[None]
    links = {l: sc.scene_displacement(scene, l)[None] for l in mech.links}
    out, problems = evaluate(scene, mech, q, links)
    _show(jw, out, problems)


# -- files -----------------------------------------------------------------------------------

def import_from(scene, mech):
    """The file's measures into ``scene.jointwise.measures`` (file units -> host units)."""
    import_entries(scene, mech, mech.to_dict().get("measures", {}))


def import_entries(scene, mech, entries):
    """Measures ``entries`` (file structure, file units of ``mech``) into the scene."""
    jw = scene.jointwise
    jw.measures.clear()
    k = sc.length_file_to_host(scene, mech.length_unit)
    for name, m in mech.measures.items():
        it = jw.measures.add()
        it.name = name
        it.kind = KIND_OF_TYPE[m.type]
        if m.type in ("point", "distance"):
            it.link_a, it.at_a = m.a[0], [float(x) * k for x in m.a[1]]
        if m.type == "distance":
            it.link_b, it.at_b = m.b[0], [float(x) * k for x in m.b[1]]
        if m.type == "angle":
            it.link_a, it.axis_a = m.a[0], [float(x) for x in m.a[1]]
            it.link_b, it.axis_b = m.b[0], [float(x) for x in m.b[1]]
        if m.type == "rate":
            it.of, it.per = m.of, m.per
        it.source = json.dumps({"unit": mech.length_unit, "k": k, "entry": entries.get(name, {})})
    jw.measure_index = 0


def adopt_stored(scene):
    """A scene saved before measures were listed keeps the file's measures only as text
    (``measures_json``): list them (once, when the list is empty). Returns True if it did."""
    jw = scene.jointwise
    if len(jw.measures) or not jw.measures_json or not len(jw.joints):
        return False
    try:
        entries = json.loads(jw.measures_json)
    except ValueError:
        return False
    if not entries:
        return False
    try:
        fake = _measures_only(entries, jw.file_length_unit)
    except (KeyError, TypeError, ValueError):  # a stored text we cannot read: leave the list empty
        return False
    import_entries(scene, fake, entries)
    return True


def _measures_only(entries, length_unit):
    """A mechanism-like holder of stored measure entries (file units)."""
    from types import SimpleNamespace
    from jointwise.mechanism import Measure
    out = {}
    for name, e in entries.items():
        t = e["type"]
        if t == "point":
            out[name] = Measure(name, t, a=(e["link"], e["at"]))
        elif t == "distance":
            out[name] = Measure(name, t, a=(e["a"]["link"], e["a"]["at"]), b=(e["b"]["link"], e["b"]["at"]))
        elif t == "angle":
            out[name] = Measure(name, t, a=(e["a"]["link"], e["a"]["axis"]), b=(e["b"]["link"], e["b"]["axis"]))
        elif t == "rate":
            out[name] = Measure(name, t, of=e["of"], per=e["per"])
        else:
            raise ValueError(t)
    return SimpleNamespace(measures=out, length_unit=length_unit)


@bpy.app.handlers.persistent
def jointwise_measures_load_post(*_args):
    for scene in bpy.data.scenes:
        try:
            if not adopt_stored(scene):
                continue
            for layer in scene.view_layers:  # placements as evaluated, not as last stored
                layer.update()
            refresh_from_scene(scene)
        except (SceneError, ValueError, KeyError):
            pass
        finally:
            sc.clear_cache()  # nothing built while loading outlives it


def register():
    if jointwise_measures_load_post not in bpy.app.handlers.load_post:
        bpy.app.handlers.load_post.append(jointwise_measures_load_post)


def unregister():
    if jointwise_measures_load_post in bpy.app.handlers.load_post:
        bpy.app.handlers.load_post.remove(jointwise_measures_load_post)


def _entry(it, k):
    if it.kind == 'POINT':
        return {"type": "point", "link": it.link_a, "at": [convert.tidy(x * k) for x in it.at_a]}
    if it.kind == 'DISTANCE':
        return {"type": "distance", "a": {"link": it.link_a, "at": [convert.tidy(x * k) for x in it.at_a]},
                "b": {"link": it.link_b, "at": [convert.tidy(x * k) for x in it.at_b]}}
    if it.kind == 'ANGLE':
        return {"type": "angle", "a": {"link": it.link_a, "axis": [convert.tidy(x) for x in it.axis_a]},
                "b": {"link": it.link_b, "axis": [convert.tidy(x) for x in it.axis_b]}}
    return {"type": "rate", "of": it.of, "per": it.per}


def _same(a, b):
    """Two file entries equal up to float32 storage (7 significant digits)."""
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same(a[x], b[x]) for x in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool):
        return abs(float(a) - float(b)) <= 1e-6 * max(1.0, abs(float(b)))
    return a == b


def export_entries(scene, length_unit):
    """The scene's measures as mechanism-file entries in ``length_unit``; an imported
    measure left as it was keeps the file's own numbers."""
    k = 1.0 / sc.length_file_to_host(scene, length_unit)
    out = {}
    for it in scene.jointwise.measures:
        entry = _entry(it, k)
        try:
            src = json.loads(it.source) if it.source else {}
        except ValueError:
            src = {}
        if src.get("unit") == length_unit and src.get("entry") and _same(entry, src["entry"]):
            entry = src["entry"]
        out[it.name] = entry
    return out


# -- display ---------------------------------------------------------------------------------

def _kind_of(jw, coordinate):
    it = jw.joints.get(coordinate)
    return it.kind if it is not None else "angle"


def format_measure(scene, it):
    """The value of measure item ``it`` as text in display units."""
    length = sc.display_length_of(scene)
    if it.problem:
        return f"— ({it.problem})"
    if it.kind == 'POINT':
        return convert.point_text(it.location, length)
    if it.kind == 'DISTANCE':
        return convert.format_value(it.value, "length", length)
    if it.kind == 'ANGLE':
        return convert.format_value(it.value, "angle")
    jw = scene.jointwise
    ko, kp = _kind_of(jw, it.of), _kind_of(jw, it.per)
    label, f = length
    unit = {"angle": "°", "length": label}
    scale = (f if ko == "length" else math.degrees(1.0)) / (f if kp == "length" else math.degrees(1.0))
    if ko == kp:
        return convert.number_text(it.value, 4)
    return f"{convert.number_text(it.value * scale, 4)} {unit[ko]}/{unit[kp]}"


# -- operators -------------------------------------------------------------------------------

def draw_fields(layout, owner, jw, places=True):
    """The fields that define a measure, for the Measures panel (``owner``: the active list
    item) and the Add Measure dialog (the operator): its kind, then ``of`` and ``per`` for a
    rate, else link a (and b), each with its point or direction when ``places``."""
    layout.prop(owner, "kind")
    if owner.kind == 'RATE':
        layout.prop_search(owner, "of", jw, "joints")
        layout.prop_search(owner, "per", jw, "joints")
        return
    for which in ("a", "b") if owner.kind != 'POINT' else ("a",):
        layout.prop_search(owner, f"link_{which}", jw, "links")
        if places:
            layout.prop(owner, f"axis_{which}" if owner.kind == 'ANGLE' else f"at_{which}")


def _link_of_object(jw, obj):
    for l in jw.links:
        if obj is not None and l.object == obj:
            return l.name
    return jw.ground


class JOINTWISE_OT_measure_add(Base, bpy.types.Operator):
    """Add a measure. Defaults: the active object's link carries point a at the 3D cursor
    (or its local X direction for an angle); the other selected object's link carries
    point b at its origin; a rate is of the active joint per the first drive"""
    bl_idname = "jointwise.measure_add"
    bl_label = "Add Measure"

    name: StringProperty(name="Name", default="", description="Name of the measure (unique)")
    kind: EnumProperty(name="Kind", items=(
        ('POINT', "Point", "World position of a point fixed to a link"),
        ('DISTANCE', "Distance", "Distance between two points fixed to links"),
        ('ANGLE', "Angle", "Angle between two directions fixed to links"),
        ('RATE', "Rate", "Speed ratio d(of)/d(per) along the motion")), default='POINT',
        description="What the measure measures")
    link_a: StringProperty(name="Link A", default="", description="Link carrying point or direction a")
    link_b: StringProperty(name="Link B", default="", description="Link carrying point or direction b")
    at_a: FloatVectorProperty(name="Point A", size=3, subtype='TRANSLATION', unit='LENGTH',
                              description="Point a, world position now (default: the 3D cursor)")
    at_b: FloatVectorProperty(name="Point B", size=3, subtype='TRANSLATION', unit='LENGTH',
                              description="Point b, world position now (default: link b's object origin)")
    axis_a: FloatVectorProperty(name="Direction A", size=3, subtype='XYZ',
                                description="Direction a, world now (default: link a's object X axis)")
    axis_b: FloatVectorProperty(name="Direction B", size=3, subtype='XYZ',
                                description="Direction b, world now (default: link b's object X axis)")
    of: StringProperty(name="Of", default="", description="Coordinate whose rate is measured")
    per: StringProperty(name="Per", default="", description="Coordinate it is measured per")

    def invoke(self, context, event):
        return context.window_manager.invoke_props_dialog(self)

    def draw(self, context):
        jw = context.scene.jointwise
        lay = self.layout
        lay.prop(self, "name")
        draw_fields(lay, self, jw, places=False)  # places default to the cursor and origins

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        if not jw.links:
            return self.fail("the scene has no mechanism: import one or add joints first")
        active = context.active_object
        others = [o for o in context.selected_objects if o != active]
        a = self.link_a or _link_of_object(jw, active)
        b = self.link_b or _link_of_object(jw, others[0] if others else None)
        name = self.name.strip() or self.kind.lower()
        base, n = name, 1
        while name in jw.measures:
            n += 1
            name = f"{base}.{n}"
        try:
            for link in ((a,) if self.kind == 'POINT' else (a, b)) if self.kind != 'RATE' else ():
                if link not in jw.links:
                    raise SceneError(f"{link!r} is not a link")
            it_def = {}
            if self.kind in ('POINT', 'DISTANCE'):
                pa = np.array(self.at_a) if self.properties.is_property_set("at_a") else np.array(scene.cursor.location)
                it_def["at_a"] = _home_point(scene, a, pa)
            if self.kind == 'DISTANCE':
                if self.properties.is_property_set("at_b"):
                    pb = np.array(self.at_b)
                else:
                    obj = sc.link_object(scene, jw.links[b], required=False)
                    pb = np.array(obj.matrix_world.translation) if obj is not None else np.zeros(3)
                it_def["at_b"] = _home_point(scene, b, pb)
            if self.kind == 'ANGLE':
                for which, link in (("a", a), ("b", b)):
                    prop = f"axis_{which}"
                    if self.properties.is_property_set(prop):
                        d = np.array(getattr(self, prop))
                    else:
                        obj = sc.link_object(scene, jw.links[link], required=False)
                        d = np.array(obj.matrix_world)[:3, 0] if obj is not None else np.array([1.0, 0, 0])
                    if not np.linalg.norm(d) > 0:
                        raise SceneError(f"direction {which} has zero length")
                    it_def[prop] = _home_direction(scene, link, d)
            if self.kind == 'RATE':
                of = self.of or (jw.joints[jw.joint_index].name if 0 <= jw.joint_index < len(jw.joints) else "")
                per = self.per or next((j.name for j in jw.joints if j.drive and j.name != of), "")
                for c in (of, per):
                    if c not in jw.joints:
                        raise SceneError(f"{c!r} is not a joint coordinate")
                if of == per:
                    raise SceneError("'of' and 'per' must be different coordinates")
                it_def.update(of=of, per=per)
        except SceneError as exc:
            return self.fail(f"cannot add measure {name!r}: {exc}")
        it = jw.measures.add()
        it.name, it.kind, it.link_a, it.link_b = name, self.kind, a, b
        for k, v in it_def.items():
            setattr(it, k, v)
        jw.measure_index = len(jw.measures) - 1
        try:
            refresh_from_scene(scene)
        except (SceneError, sc.core().JointwiseError) as exc:
            it.problem = posing.error_text(scene, exc)
        return self.done(f"added measure {name!r}: {format_measure(scene, it)}")

def _home_point(scene, link, world):
    d = sc.scene_displacement(scene, link)
    return [float(x) for x in (convert.inverse(d) @ np.append(np.asarray(world, float), 1.0))[:3]]


def _home_direction(scene, link, world):
    d = sc.scene_displacement(scene, link)
    v = d[:3, :3].T @ np.asarray(world, float)
    return [float(x) for x in v / np.linalg.norm(v)]


class JOINTWISE_OT_measure_remove(Base, bpy.types.Operator):
    """Remove the active measure (and its baked F-curves)"""
    bl_idname = "jointwise.measure_remove"
    bl_label = "Remove Measure"

    name: StringProperty(name="Name", default="", description="Measure to remove (default: the active one)")

    def run(self, context):
        scene = context.scene
        jw = scene.jointwise
        name = self.name or (jw.measures[jw.measure_index].name
                             if 0 <= jw.measure_index < len(jw.measures) else "")
        i = jw.measures.find(name)
        if i < 0:
            return self.fail(f"no measure named {name!r}")
        clear_keys(scene, [name])
        jw.measures.remove(i)
        jw.measure_index = min(jw.measure_index, len(jw.measures) - 1)
        return self.done(f"removed measure {name!r}")


CLASSES = (JOINTWISE_OT_measure_add, JOINTWISE_OT_measure_remove)
