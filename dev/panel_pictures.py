"""Text pictures of the Jointwise sidebar: each panel's draw calls recorded (headless
Blender draws no UI), one line per row, ``[Button]``, ``(field: value)``, ``{icon}``.

    .venv-bpy50/bin/python dev/panel_pictures.py [SAMPLE] [--joint NAME]

Used by tests/host/test_panels.py (the pictures must show what the issue asks for) and by
hand to look at the panels of a sample.
"""
from __future__ import annotations

import math
import os
import pathlib
import sys
import tempfile
import types

ROOT = pathlib.Path(__file__).resolve().parents[1]
MODULE = "bl_ext.user_default.jointwise"
PANELS = ("JOINTWISE_PT_mechanism", "JOINTWISE_PT_joints", "JOINTWISE_PT_links",
          "JOINTWISE_PT_couplings", "JOINTWISE_PT_measures", "JOINTWISE_PT_bake",
          "JOINTWISE_PT_traces", "JOINTWISE_PT_clearance")


def _value(data, name):
    """A property as the host would show it (degrees, the scene's length unit)."""
    import bpy
    prop = data.bl_rna.properties[name]
    v = getattr(data, name)
    if prop.type == 'FLOAT' and prop.subtype == 'ANGLE':
        d = math.degrees(v)
        d = 0.0 if abs(d) < 5e-7 else d
        return f"{d:.0f}°" if abs(d) >= 1e4 else f"{d:.4g}°"
    if prop.type == 'FLOAT' and prop.subtype == 'DISTANCE':
        import importlib
        sc = importlib.import_module(MODULE + ".scene")
        label, k = sc.display_length_of(bpy.context.scene)
        x = v * k
        return f"{0.0 if abs(x) < 5e-9 else x:.5g} {label}"
    if prop.type == 'POINTER':
        return v.name if v is not None else "-"
    if prop.type == 'BOOLEAN':
        return "[x]" if v else "[ ]"
    if prop.type == 'FLOAT' and getattr(prop, "is_array", False):
        return "(" + ", ".join(f"{x:.4g}" for x in v) + ")"
    if prop.type == 'FLOAT':
        return f"{v:.4g}"
    return str(v)


class Picture:
    """A stand-in for ``layout``: records what a panel draws as lines of text. A row takes
    one line (a slot reserved where it was made) and joins its cells on it."""

    def __init__(self, lines, depth=0, row=None):
        self.lines, self.depth, self.row_at = lines, depth, row

    def _put(self, text):
        if self.row_at is not None:
            cur = self.lines[self.row_at]
            self.lines[self.row_at] = (cur + "  " if cur else "  " * self.depth) + text
        else:
            self.lines.append("  " * self.depth + text)

    def row(self, *a, **k):
        if self.row_at is not None:  # a row in a row: same line
            return Picture(self.lines, self.depth, self.row_at)
        self.lines.append("")
        return Picture(self.lines, self.depth, len(self.lines) - 1)

    def column(self, *a, **k):
        if self.row_at is not None:
            return Picture(self.lines, self.depth, self.row_at)
        return Picture(self.lines, self.depth)

    def box(self, *a, **k):
        self.lines.append("  " * self.depth + "+" + "-" * 40)
        return Picture(self.lines, self.depth + 1)

    split = column

    def label(self, text="", icon=None, **k):
        self._put((f"{{{icon}}} " if icon else "") + text)

    def prop(self, data, name, text=None, icon=None, toggle=False, **k):
        prop = data.bl_rna.properties[name]
        label = prop.name if text is None else text
        if toggle:
            self._put(f"[{label}: {'on' if getattr(data, name) else 'off'}]")
        elif prop.type == 'BOOLEAN' and not label:
            self._put(f"{{{icon}}}" if icon else _value(data, name))
        else:
            self._put(f"({label + ': ' if label else ''}{_value(data, name)})")

    def prop_search(self, data, name, search_data, search_name, **k):
        self._put(f"({data.bl_rna.properties[name].name}: {getattr(data, name) or '…'} ⌕)")

    def operator(self, idname, text=None, icon=None, **k):
        import bpy
        mod, name = idname.split(".")
        op = getattr(getattr(bpy.ops, mod), name)
        label = op.get_rna_type().name if text is None else text
        self._put(f"[{label}]" if label else f"[{{{icon}}}]")
        return types.SimpleNamespace()

    def template_list(self, listtype, list_id, data, prop, active_data, active_prop, **k):
        import bpy
        uilist = getattr(bpy.types, listtype)
        if self.row_at is not None:
            self._put("| list")
        else:
            self.lines.append("  " * self.depth + "| list")
        for i, item in enumerate(getattr(data, prop)):
            self.lines.append("")
            row = Picture(self.lines, self.depth + 1, len(self.lines) - 1)
            row._put(">" if i == getattr(active_data, active_prop) else " ")
            uilist.draw_item(None, bpy.context, row, data, item, 0, active_data, active_prop, i)


def picture(panel_name, context):
    import bpy
    lines = []
    panel = getattr(bpy.types, panel_name)
    panel.draw(types.SimpleNamespace(layout=Picture(lines)), context)
    return [f"== {panel.bl_label} =="] + [ln for ln in lines if ln.strip()]


def sidebar(context):
    out = []
    for name in PANELS:
        out += picture(name, context) + [""]
    return "\n".join(out)


def main(argv=None):
    import argparse
    ap = argparse.ArgumentParser()
    ap.add_argument("sample", nargs="?", default="wagtail_rocker")
    ap.add_argument("--joint", default="")
    args = ap.parse_args(argv)
    os.environ["HOME"] = tempfile.mkdtemp(prefix="jointwise-pictures-")
    import bpy
    z = os.environ.get("JOINTWISE_ZIP") or str(ROOT / "dist" / "jointwise-0.1.0.zip")
    bpy.ops.extensions.package_install_files(filepath=z, repo="user_default", enable_on_install=True)
    bpy.ops.wm.open_mainfile(filepath=str(ROOT / "blend_samples" / f"{args.sample}.blend"))
    import addon_utils
    if not addon_utils.check(MODULE)[1]:
        bpy.ops.preferences.addon_enable(module=MODULE)
    jw = bpy.context.scene.jointwise
    if args.joint:
        jw.joint_index = jw.joints.find(args.joint)
    print(sidebar(bpy.context))


if __name__ == "__main__":
    sys.exit(main())
