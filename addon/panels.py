"""The "Jointwise" tab of the 3D viewport's sidebar."""
from __future__ import annotations

import bpy

from . import scene as sc
from . import trace
from .convert import SceneError


class JOINTWISE_UL_joints(bpy.types.UIList):
    """One row per joint coordinate: name, value slider, drive flag."""

    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index):
        row = layout.row(align=True)
        row.label(text=item.name, icon='CON_PIVOT' if item.kind == "angle" else 'CON_LOCLIKE')
        if item.type == "fixed":
            row.label(text="fixed")
        else:
            row.prop(item, "angle" if item.kind == "angle" else "length", text="")
            row.operator("jointwise.value_key", text="", icon='KEY_HLT', emboss=False).index = index
        row.prop(item, "drive", text="", icon='AUTO' if item.drive else 'DOT', emboss=False)


class JOINTWISE_UL_couplings(bpy.types.UIList):
    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index):
        layout.label(text=f"{item.follower} = {item.ratio:g} x {item.leader} + {item.offset:g}")


class _Tab:
    bl_space_type = 'VIEW_3D'
    bl_region_type = 'UI'
    bl_category = "Jointwise"


class JOINTWISE_PT_mechanism(_Tab, bpy.types.Panel):
    bl_label = "Mechanism"

    def draw(self, context):
        jw = context.scene.jointwise
        layout = self.layout
        row = layout.row(align=True)
        row.operator("jointwise.mechanism_import", text="Import", icon='IMPORT')
        row.operator("jointwise.mechanism_export", text="Export", icon='EXPORT')
        if jw.links:
            layout.label(text=f"{jw.name_text or 'mechanism'}: {len(jw.links)} links, ground {jw.ground!r}")
        row = layout.row(align=True)
        row.prop(jw, "live", toggle=True, icon='PLAY' if jw.live else 'PAUSE')
        row.operator("jointwise.pose", text="Solve", icon='FILE_REFRESH')
        row = layout.row(align=True)
        row.operator("jointwise.home_set", text="Set Home", icon='PINNED')
        row.operator("jointwise.home_restore", text="To Home", icon='HOME')
        box = layout.box()
        ok = jw.converged and not jw.singular
        box.label(text=jw.message or "not solved yet", icon='CHECKMARK' if ok else 'ERROR')
        mob = "?" if jw.mobility < 0 else str(jw.mobility)
        box.label(text=f"closure error {jw.closure_error:.2e}  |  mobility {mob}"
                       f"{'  |  singular' if jw.singular else ''}")


class JOINTWISE_PT_joints(_Tab, bpy.types.Panel):
    bl_label = "Joints"

    def draw(self, context):
        jw = context.scene.jointwise
        layout = self.layout
        row = layout.row()
        row.template_list("JOINTWISE_UL_joints", "", jw, "joints", jw, "joint_index", rows=4)
        col = row.column(align=True)
        col.operator("jointwise.joint_add", text="", icon='ADD')
        col.operator("jointwise.joint_remove", text="", icon='REMOVE')
        if not 0 <= jw.joint_index < len(jw.joints):
            return
        it = jw.joints[jw.joint_index]
        box = layout.box()
        box.label(text=f"{it.type} joint {it.joint!r}: {it.parent} -> {it.child}")
        box.prop(it, "marker")
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
        row = self.layout.row()
        row.template_list("JOINTWISE_UL_couplings", "", jw, "couplings", jw, "coupling_index", rows=2)
        col = row.column(align=True)
        col.operator("jointwise.coupling_add", text="", icon='ADD')
        col.operator("jointwise.coupling_remove", text="", icon='REMOVE')


class JOINTWISE_PT_bake(_Tab, bpy.types.Panel):
    bl_label = "Bake"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        row = self.layout.row(align=True)
        row.operator("jointwise.bake", text="Bake Motion", icon='KEYINGSET')
        row.operator("jointwise.bake_clear", text="Clear", icon='X')


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
            layout.label(text=sc.message_core_to_host(str(exc)))
            return
        if not names:
            layout.label(text="No point measures in the mechanism file")
            return
        traced = {o.get(trace.TAG) for o in scene.objects if o.get(trace.TAG)}
        for name in names:
            row = layout.row(align=True)
            row.label(text=name + ("  (traced)" if name in traced else ""))
            op = row.operator("jointwise.trace_add", text="Trace")
            op.measure = name
            op.frame_start = scene.frame_start
            op.frame_end = scene.frame_end



CLASSES = (JOINTWISE_UL_joints, JOINTWISE_UL_couplings, JOINTWISE_PT_mechanism,
           JOINTWISE_PT_joints, JOINTWISE_PT_links, JOINTWISE_PT_couplings, JOINTWISE_PT_bake,
           JOINTWISE_PT_traces)
