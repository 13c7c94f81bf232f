"""The "Jointwise" tab of the 3D viewport's sidebar."""
from __future__ import annotations

import bpy

from . import convert, posing
from . import scene as sc
from . import measures, trace
from .convert import SceneError


def _marked(scene):
    """(keyed, marked): the coordinates with keys, and those plus the Drive-ticked ones: the
    marks the list shows. Which of them a solve holds the core decides (``posing.held_names``)."""
    keyed = posing.animated_coordinates(scene)
    return keyed, {it.name for it in scene.jointwise.joints if it.drive} | keyed


class JOINTWISE_UL_joints(bpy.types.UIList):
    """One row per joint coordinate: name, value (animatable, display units), key, held mark."""

    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index):
        keyed, held = _marked(context.scene)
        row = layout.row(align=True)
        row.label(text=item.name, icon='CON_PIVOT' if item.kind == "angle" else 'CON_LOCLIKE')
        if item.type == "fixed":
            row.label(text="fixed")
        else:
            row.prop(item, "length" if item.kind == "length" else "angle", text="")
            row.operator("jointwise.value_key", text="", icon='KEY_HLT' if item.name in keyed else 'KEY_DEHLT',
                         emboss=False).index = index
        if item.name in keyed:
            row.label(text="", icon='DECORATE_KEYFRAME')  # held by its keys
        row.prop(item, "drive", text="", icon='AUTO' if item.drive else 'DOT', emboss=False)


def _law_name(coupling):
    """The motion law of a coupling item (program, geneva, table)."""
    import json
    try:
        return str(json.loads(coupling.law_json).get("law", "law"))
    except (ValueError, AttributeError):
        return "law"


class JOINTWISE_UL_couplings(bpy.types.UIList):
    """One row per coupling: follower = ratio x leader + offset, in display units."""

    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index):
        if item.law_json:  # a motion law (program, geneva, table): named, not a ratio
            layout.label(text=f"{item.follower} = {_law_name(item)}({item.leader})")
            return
        jw = context.scene.jointwise
        length = sc.display_length_of(context.scene)
        lead, fol = jw.joints.get(item.leader), jw.joints.get(item.follower)
        lk = lead.kind if lead else "angle"
        fk = fol.kind if fol else "angle"
        if lk == fk:
            ratio = f"{item.ratio:g} x"
        else:
            ratio = f"({convert.format_value(abs(item.per_turn), 'length', length)} per turn) x"
        off = convert.format_value(item.offset, fk, length)
        layout.label(text=f"{item.follower} = {ratio} {item.leader} + {off}")


def _list_with_buttons(layout, jw, items, one, rows):
    """The list ``jw.<items>`` (drawn by ``JOINTWISE_UL_<items>``, active ``jw.<one>_index``)
    with its Add and Remove buttons (``jointwise.<one>_add`` / ``_remove``) beside it;
    returns the active item, or None."""
    row = layout.row()
    row.template_list(f"JOINTWISE_UL_{items}", "", jw, items, jw, f"{one}_index", rows=rows)
    col = row.column(align=True)
    col.operator(f"jointwise.{one}_add", text="", icon='ADD')
    col.operator(f"jointwise.{one}_remove", text="", icon='REMOVE')
    coll, i = getattr(jw, items), getattr(jw, f"{one}_index")
    return coll[i] if 0 <= i < len(coll) else None


class _Tab:
    bl_space_type = 'VIEW_3D'
    bl_region_type = 'UI'
    bl_category = "Jointwise"


class JOINTWISE_PT_mechanism(_Tab, bpy.types.Panel):
    bl_label = "Mechanism"

    def draw(self, context):
        scene = context.scene
        jw = scene.jointwise
        layout = self.layout
        row = layout.row(align=True)
        row.operator("jointwise.mechanism_import", icon='IMPORT')
        row.operator("jointwise.mechanism_export", icon='EXPORT')
        if jw.links:
            layout.label(text=f"{jw.name_text or 'mechanism'}: {len(jw.links)} links, ground {jw.ground!r}")
        row = layout.row(align=True)
        row.prop(jw, "live", toggle=True, icon='PLAY' if jw.live else 'PAUSE')
        row.operator("jointwise.pose", icon='FILE_REFRESH')
        row = layout.row(align=True)
        row.operator("jointwise.home_set", icon='PINNED')
        row.operator("jointwise.home_restore", icon='HOME')
        box = layout.box()
        ok = jw.converged and not jw.singular
        box.label(text=jw.message or "not posed yet: drag a joint value", icon='CHECKMARK' if ok else 'ERROR')
        label, k = sc.display_length_of(scene)
        mob = "?" if jw.mobility < 0 else str(jw.mobility)
        box.label(text=f"loops closed within {jw.closure_error * k:.2g} {label}  |  mobility {mob}"
                       f"{'  |  near a dead point' if jw.singular else ''}")


class JOINTWISE_PT_joints(_Tab, bpy.types.Panel):
    bl_label = "Joints"

    def draw(self, context):
        jw = context.scene.jointwise
        layout = self.layout
        it = _list_with_buttons(layout, jw, "joints", "joint", 4)
        if it is None:
            return
        keyed, held = _marked(context.scene)
        box = layout.box()
        box.label(text=f"{it.type} joint {it.joint!r}: {it.parent} -> {it.child}")
        if it.name in held:
            box.label(text="held: " + ("keyed, the animation sets it" if it.name in keyed else "a drive"),
                      icon='LOCKED')
        row = box.row(align=True)
        row.prop(it, "type", text="")
        row.prop_search(it, "parent", jw, "links", text="")
        row.prop_search(it, "child", jw, "links", text="")
        box.prop(it, "anchor")
        row = box.row(align=True)
        row.operator("jointwise.axis_from_selection", icon='MESH_CYLINDER')
        row.operator("jointwise.axes_tidy", icon='SNAP_PERPENDICULAR')
        if it.type == "helical":
            row = box.row(align=True)
            row.prop(it, "lead")
            row.prop(it, "hand", text="")
            if it.thread:
                box.label(text=f"thread {it.thread}")
        row = box.row(align=True)
        row.prop(it, "drive")
        row.prop(it, "use_limits")
        suffix = "_angle" if it.kind == "angle" else "_length"
        if it.use_limits:
            row = box.row(align=True)
            row.prop(it, "limit_min" + suffix)
            row.prop(it, "limit_max" + suffix)
        box.prop(it, "home" + suffix)


class JOINTWISE_PT_links(_Tab, bpy.types.Panel):
    bl_label = "Links"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        jw = context.scene.jointwise
        col = self.layout.column(align=True)
        for link in jw.links:
            row = col.row(align=True)
            row.label(text=link.name + ("  (ground)" if link.name == jw.ground else ""))
            row.prop(link, "object", text="")
        if jw.ground in jw.links and jw.links[jw.ground].object is None:
            col.label(text="ground: the world")


class JOINTWISE_PT_couplings(_Tab, bpy.types.Panel):
    bl_label = "Couplings"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        jw = context.scene.jointwise
        c = _list_with_buttons(self.layout, jw, "couplings", "coupling", 2)
        if c is None:
            return
        box = self.layout.box()
        box.prop_search(c, "leader", jw, "joints", icon='VIEWZOOM')
        box.prop_search(c, "follower", jw, "joints", icon='VIEWZOOM')
        if c.law_json:  # a motion law: ratio and offset are not its parameters
            box.label(text=f"motion law {_law_name(c)}: its parameters come from the mechanism file")
            return
        lead, fol = jw.joints.get(c.leader), jw.joints.get(c.follower)
        lk = lead.kind if lead else "angle"
        fk = fol.kind if fol else "angle"
        box.prop(c, "ratio" if lk == fk else "per_turn")
        box.prop(c, "offset_length" if fk == "length" else "offset_angle")


class JOINTWISE_PT_bake(_Tab, bpy.types.Panel):
    bl_label = "Bake"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        scene = context.scene
        row = self.layout.row(align=True)
        row.operator("jointwise.bake", icon='KEYINGSET')
        row.operator("jointwise.bake_clear", icon='X')
        self.layout.label(text=f"scene frames {scene.frame_start}-{scene.frame_end}")
        if scene.jointwise.baked_values:
            self.layout.label(text="baked: the link keys play; Clear Baked Motion to pose by hand",
                              icon='KEYFRAME')


class JOINTWISE_PT_traces(_Tab, bpy.types.Panel):
    """Point measures of the mechanism file, each with a button drawing its path over the
    scene's frame range."""
    bl_label = "Traces"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        layout = self.layout
        scene = context.scene
        try:
            names = sorted(trace.point_measures(scene))
        except SceneError as exc:
            layout.label(text=str(exc))
            return
        if not names:
            layout.label(text="No point measures in the mechanism file")
            return
        traced = {o.get(trace.TAG) for o in scene.objects if o.get(trace.TAG)}
        for name in names:
            row = layout.row(align=True)
            row.label(text=name + ("  (traced)" if name in traced else ""))
            op = row.operator("jointwise.trace_add")
            op.measure = name
            op.frame_start = scene.frame_start
            op.frame_end = scene.frame_end
            row.operator("jointwise.handle_add", text="Handle").measure = name



class JOINTWISE_UL_measures(bpy.types.UIList):
    """One row per measure: name, kind, live value in display units."""

    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index):
        icons = {'POINT': 'EMPTY_SINGLE_ARROW', 'DISTANCE': 'DRIVER_DISTANCE', 'ANGLE': 'DRIVER_ROTATIONAL_DIFFERENCE',
                 'RATE': 'DRIVER_TRANSFORM'}
        row = layout.row(align=True)
        row.label(text=item.name, icon=icons.get(item.kind, 'DOT'))
        row.label(text=measures.format_measure(context.scene, item))


class JOINTWISE_PT_measures(_Tab, bpy.types.Panel):
    """The mechanism's measures with their values at the pose on screen; a bake keys them."""
    bl_label = "Measures"

    def draw(self, context):
        jw = context.scene.jointwise
        layout = self.layout
        m = _list_with_buttons(layout, jw, "measures", "measure", 3)
        if m is None:
            return
        box = layout.box()
        measures.draw_fields(box, m, jw)
        if m.problem:
            box.label(text=m.problem, icon='ERROR')


CLASSES = (JOINTWISE_UL_joints, JOINTWISE_UL_couplings, JOINTWISE_PT_mechanism,
           JOINTWISE_PT_joints, JOINTWISE_PT_links, JOINTWISE_PT_couplings, JOINTWISE_PT_bake,
           JOINTWISE_PT_traces, JOINTWISE_UL_measures, JOINTWISE_PT_measures)
