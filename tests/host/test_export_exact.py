"""Issue 14 item 7: export writes the file's own numbers (shortest round-trip form of the
float64 the file gave) for homes, limits, leads, points, axes and couplings, although
Blender keeps them in float32 properties; a value edited in Blender is written as edited."""
from __future__ import annotations

import json
import tomllib

import bpy

import workshop as ws

SLIDE_HOME = 1.234567890123
SCREW_HOME = 72.988297687263
RATIO = 0.333333333333333
OFFSET = SCREW_HOME - RATIO * SLIDE_HOME


def _file(tmp_path):
    data = {"format": 1, "mechanism": {"length_unit": "mm", "angle_unit": "deg", "ground": "world"},
            "links": {"world": {}, "block": {"object": "Block"}, "nut": {"object": "Nut"}},
            "joints": {"slide": {"type": "prismatic", "parent": "world", "child": "block",
                                 "point": [10.000000000001, 20.1234567890123, 30], "axis": [0.1, 0.2, 0.9],
                                 "home": SLIDE_HOME, "limits": [-5.123456789012, 5.98765432101]},
                       "screw": {"type": "helical", "parent": "block", "child": "nut",
                                 "point": [10.000000000001, 20.1234567890123, 30], "axis": [0.1, 0.2, 0.9],
                                 "lead": 2.000000123456789, "home": SCREW_HOME,
                                 "limits": [-720.000000000001, 1440.123456789012]}},
            "couplings": {"feed": {"leader": "slide", "follower": "screw", "ratio": RATIO, "offset": OFFSET}}}
    path = tmp_path / "exact.json"
    path.write_text(json.dumps(data))
    return data, path


def test_unchanged_import_exports_every_number_exactly(fresh, tmp_path):
    ws.cube("Block", (0, 0, 0))
    ws.cube("Nut", (0, 0, 0))
    data, path = _file(tmp_path)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}, fresh.jointwise.message
    out = tmp_path / "again.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    got = tomllib.loads(out.read_text())
    for name, j in data["joints"].items():
        for key in ("point", "axis", "home", "limits", "lead"):
            if key in j:
                assert got["joints"][name][key] == j[key], (name, key, got["joints"][name][key], j[key])
    assert got["couplings"]["feed"]["ratio"] == RATIO
    assert got["couplings"]["feed"]["offset"] == OFFSET
    # the text holds the shortest round-trip form (repr of the float64)
    assert "72.988297687263" in out.read_text()


def test_edited_value_is_exported_as_edited(fresh, tmp_path):
    ws.cube("Block", (0, 0, 0))
    ws.cube("Nut", (0, 0, 0))
    data, path = _file(tmp_path)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = fresh.jointwise
    jw.joints["slide"].limit_max = 4.5  # host units: a mm file in a metre scene is scaled
    out = tmp_path / "edited.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    got = tomllib.loads(out.read_text())["joints"]["slide"]["limits"]
    assert got[0] == data["joints"]["slide"]["limits"][0]
    assert got[1] != data["joints"]["slide"]["limits"][1]
