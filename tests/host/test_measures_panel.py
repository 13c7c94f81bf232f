"""The Measures panel and the Joints panel's new fields, drawn against a recording layout
(panels are never drawn headless): every property and operator named exists in RNA,
and the recorded calls make a text picture of the panel (printed with -s)."""
from __future__ import annotations

import os
import types

import bpy

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


class Picture:
    """A layout that checks names against RNA and writes one text line per call."""

    def __init__(self, lines, depth=0):
        self.lines, self.depth = lines, depth

    def _child(self, *a, **k):
        return Picture(self.lines, self.depth + 1)
    column = split = _child

    def row(self, *a, **k):
        self.lines.append("  " * self.depth + "-" * 8)
        return Picture(self.lines, self.depth)

    def box(self, *a, **k):
        self.lines.append("  " * self.depth + "+" + "-" * 30)
        return Picture(self.lines, self.depth + 1)

    def _add(self, text):
        self.lines.append("  " * self.depth + text)

    def label(self, text="", icon='NONE', **k):
        self._add(f"{text}" + (f"  <{icon}>" if icon != 'NONE' else ""))

    def prop(self, data, name, text=None, **k):
        assert name in data.bl_rna.properties, f"{type(data).__name__} has no property {name!r}"
        shown = getattr(data, name)
        if not isinstance(shown, str):
            try:
                shown = tuple(round(float(x), 4) for x in shown)
            except TypeError:
                pass
        label = data.bl_rna.properties[name].name if text is None else text
        self._add(f"[{label}: {shown}]")

    def prop_search(self, data, name, search_data, search_prop, text=None, **k):
        assert name in data.bl_rna.properties and search_prop in search_data.bl_rna.properties
        label = data.bl_rna.properties[name].name if text is None else text
        self._add(f"[{label}: {getattr(data, name)!r} v]")

    def operator(self, idname, text=None, icon='NONE', **k):
        mod, name = idname.split(".")
        op = getattr(getattr(bpy.ops, mod), name)
        rna = op.get_rna_type()
        props = rna.properties
        self._add(f"({text if text is not None else rna.name}" + (f" <{icon}>" if icon != 'NONE' else "") + ")")

        class Props:
            def __setattr__(self, key, value):
                assert key in props, f"{idname} has no property {key!r}"
        return Props()

    def template_list(self, listtype, list_id, data, prop, active_data, active_prop, **k):
        assert prop in data.bl_rna.properties and active_prop in active_data.bl_rna.properties
        uilist = getattr(bpy.types, listtype)
        self._add(f"= list {prop} =")
        for i, item in enumerate(getattr(data, prop)):
            mark = ">" if i == getattr(active_data, active_prop) else " "
            sub = []
            uilist.draw_item(None, bpy.context, Picture(sub, 0), data, item, 0, active_data, active_prop, i)
            self._add(mark + " " + " | ".join(s.strip() for s in sub if s.strip() and not s.startswith("-")))


def draw(panel_name):
    lines = []
    getattr(bpy.types, panel_name).draw(types.SimpleNamespace(layout=Picture(lines)), bpy.context)
    return lines


def test_measures_panel_draws_the_live_values(installed):
    import math
    bpy.ops.wm.open_mainfile(filepath=os.path.join(ROOT, "blend_samples", "wagtail_rocker.blend"))
    jw = bpy.context.scene.jointwise
    jw.joints["crank_pin"].value = math.radians(95)
    bpy.ops.jointwise.pose()
    pictures = {}
    for i in range(len(jw.measures)):
        jw.measure_index = i
        pictures[i] = draw("JOINTWISE_PT_measures")
    text = "\n".join(pictures[1])
    print("\n--- Measures panel (wagtail_rocker, crank 95°, sign_hook active) ---\n" + text)
    assert "transmission" in text and "°" in text and "mm" in text
    assert any("rocker_speed" in ln for ln in text.splitlines())
    jw.joint_index = 0
    joints = "\n".join(draw("JOINTWISE_PT_joints"))
    print("\n--- Joints panel ---\n" + joints)
    assert "(Fit Axis to Selection" in joints and "(Tidy Axes" in joints
    assert "[Parent link: 'frame' v]" in joints or "'frame' v]" in joints


def test_measures_panel_draws_without_a_mechanism(fresh):
    assert draw("JOINTWISE_PT_measures")


def test_new_operators_have_tooltips_and_title_case_labels(installed):
    import importlib
    for mod in ("axes", "measures", "edit"):
        m = importlib.import_module(installed + "." + mod)
        for cls in m.CLASSES:
            assert cls.__doc__ and cls.__doc__.strip(), cls.__name__
            assert all(w[0].isupper() or w in ("to", "a", "of") for w in cls.bl_label.split()), cls.bl_label
            own = set(cls.__annotations__)
            mod_name, name = cls.bl_idname.split(".")
            for p in getattr(getattr(bpy.ops, mod_name), name).get_rna_type().properties:
                if p.identifier in own and not p.is_hidden:
                    assert p.description, f"{cls.bl_idname}.{p.identifier} has no tooltip"
    props = importlib.import_module(installed + ".properties")
    for p in props.JointwiseMeasure.bl_rna.properties:
        if p.identifier not in ("rna_type", "name") and not p.is_hidden:
            assert p.description, f"JointwiseMeasure.{p.identifier} has no tooltip"
    for name in ("measures", "measure_index"):
        assert props.JointwiseMechanism.bl_rna.properties[name].description or name == "measures"
