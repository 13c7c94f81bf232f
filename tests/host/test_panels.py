"""Panels are never drawn in background mode, so their draw code runs here against a
recording layout that checks every property and operator it names exists in RNA
(catches typos and stale names; the real drawing was not exercised headless)."""
from __future__ import annotations

import types

import bpy

import workshop as ws


class Recorder:
    def __init__(self, log):
        self.log = log

    def _child(self, *a, **k):
        return Recorder(self.log)
    row = column = box = split = _child

    def label(self, text="", icon=None, **k):
        assert isinstance(text, str)
        self.log.append(("label", text))
        if icon:
            self.log.append(("icon", icon))

    def prop(self, data, name, **k):
        assert name in data.bl_rna.properties, f"{type(data).__name__} has no property {name!r}"
        self.log.append(("prop", name))

    def prop_search(self, data, name, search_data, search_name, **k):
        assert name in data.bl_rna.properties, f"{type(data).__name__} has no property {name!r}"
        assert search_name in search_data.bl_rna.properties
        self.log.append(("prop", name))

    def operator(self, idname, **k):
        mod, name = idname.split(".")
        op = getattr(getattr(bpy.ops, mod), name)
        props = op.get_rna_type().properties
        log = self.log

        class Props:
            def __setattr__(self, key, value):
                assert key in props, f"{idname} has no property {key!r}"
        log.append(("operator", idname))
        return Props()

    def template_list(self, listtype, list_id, data, prop, active_data, active_prop, **k):
        assert hasattr(bpy.types, listtype), listtype
        assert prop in data.bl_rna.properties and active_prop in active_data.bl_rna.properties
        uilist = getattr(bpy.types, listtype)
        for i, item in enumerate(getattr(data, prop)):
            uilist.draw_item(None, bpy.context, Recorder(self.log), data, item, 0, active_data, active_prop, i)
        self.log.append(("list", listtype))


def test_every_panel_draws(fresh, tmp_path):
    ws.make_vise_objects(0.001)
    bpy.ops.jointwise.mechanism_import(filepath=str(ws.vise_file(tmp_path)))
    jw = fresh.jointwise
    c = jw.couplings.add()
    c.name, c.leader, c.follower = "k", "feed", "collar"
    drawn = []
    for i in range(len(jw.joints)):
        jw.joint_index = i
        for name in ("JOINTWISE_PT_mechanism", "JOINTWISE_PT_joints", "JOINTWISE_PT_links",
                     "JOINTWISE_PT_couplings", "JOINTWISE_PT_bake"):
            panel = getattr(bpy.types, name)
            assert panel.bl_category == "Jointwise" and panel.bl_space_type == 'VIEW_3D'
            log = []
            panel.draw(types.SimpleNamespace(layout=Recorder(log)), bpy.context)
            drawn.append(log)
    flat = [e for log in drawn for e in log]
    assert ("operator", "jointwise.bake") in flat and ("list", "JOINTWISE_UL_joints") in flat
    assert ("prop", "lead") in flat and ("prop", "limit_max_length") in flat


def test_panels_draw_without_a_mechanism(fresh):
    for name in ("JOINTWISE_PT_mechanism", "JOINTWISE_PT_joints", "JOINTWISE_PT_links",
                 "JOINTWISE_PT_couplings", "JOINTWISE_PT_bake"):
        getattr(bpy.types, name).draw(types.SimpleNamespace(layout=Recorder([])), bpy.context)


def test_a_motion_law_coupling_shows_no_ratio(installed):
    """The kittiwake sample's Geneva coupling: its box names the law and offers no ratio or
    offset fields (they are not its parameters, and editing them would do nothing)."""
    import os
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    bpy.ops.wm.open_mainfile(filepath=os.path.join(root, "blend_samples", "kittiwake_index.blend"))
    jw = bpy.context.scene.jointwise
    jw.coupling_index = next(i for i, c in enumerate(jw.couplings) if c.follower == "table_spindle")
    log = []
    bpy.types.JOINTWISE_PT_couplings.draw(types.SimpleNamespace(layout=Recorder(log)), bpy.context)
    assert ("label", "motion law geneva: its parameters come from the mechanism file") in log
    assert not {("prop", n) for n in ("ratio", "per_turn", "offset_angle", "offset_length")} & set(log)
