"""The zip and its manifest; registration that leaves nothing behind."""
from __future__ import annotations

import tomllib
import zipfile

import bpy
import pytest

from conftest import MODULE, ROOT


def test_zip_contents_and_manifest(extension_zip):
    with zipfile.ZipFile(extension_zip) as z:
        names = set(z.namelist())
        manifest = tomllib.loads(z.read("blender_manifest.toml").decode())
    with open(ROOT / "pyproject.toml", "rb") as f:
        version = tomllib.load(f)["project"]["version"]
    assert extension_zip.name == f"jointwise-{version}.zip"
    assert {"__init__.py", "properties.py", "scene.py", "operators.py", "panels.py", "bake.py",
            "convert.py", "keys.py", "animation.py", "posing.py", "live.py", "files.py"} <= names
    assert "package.py" not in names
    wheel = f"wheels/jointwise-{version}-py3-none-any.whl"
    assert wheel in names
    assert manifest["id"] == "jointwise" and manifest["version"] == version
    assert manifest["schema_version"] == "1.0.0" and manifest["type"] == "add-on"
    assert manifest["blender_version_min"] == "4.4.0"
    assert manifest["license"] == ["SPDX:GPL-3.0-or-later"]
    assert manifest["wheels"] == [f"./{wheel}"]
    assert set(manifest["permissions"]) == {"files"} and manifest["permissions"]["files"]


def _count(lst, name):
    return sum(1 for h in lst if getattr(h, "__name__", "") == name)


def test_disable_enable_leaves_no_duplicates(installed):
    import addon_utils
    h = bpy.app.handlers
    assert _count(h.frame_change_post, "jointwise_frame_change") == 1
    assert _count(h.load_post, "jointwise_load_post") == 1
    bpy.ops.preferences.addon_disable(module=MODULE)
    assert not addon_utils.check(MODULE)[1]
    assert _count(h.frame_change_post, "jointwise_frame_change") == 0
    assert _count(h.load_post, "jointwise_load_post") == 0
    assert not hasattr(bpy.types.Scene, "jointwise")
    assert not hasattr(bpy.types, "JOINTWISE_PT_mechanism")
    for _ in range(2):
        bpy.ops.preferences.addon_enable(module=MODULE)
        bpy.ops.preferences.addon_disable(module=MODULE)
    bpy.ops.preferences.addon_enable(module=MODULE)
    assert addon_utils.check(MODULE)[1]
    assert _count(h.frame_change_post, "jointwise_frame_change") == 1
    assert _count(h.load_post, "jointwise_load_post") == 1
    assert hasattr(bpy.types.Scene, "jointwise")
    for cls in ("JOINTWISE_PT_mechanism", "JOINTWISE_PT_joints", "JOINTWISE_UL_joints",
                "JOINTWISE_OT_bake"):
        assert hasattr(bpy.types, cls), cls
    assert hasattr(bpy.ops.jointwise, "mechanism_import")


def test_operators_are_undoable(installed):
    for name in ("mechanism_import", "bake", "bake_clear", "home_set", "home_restore",
                 "joint_add", "joint_remove", "coupling_add", "live_toggle"):
        op = getattr(bpy.types, f"JOINTWISE_OT_{name}")
        assert {"REGISTER", "UNDO"} <= set(op.bl_options), name


def test_value_property_units(fresh):
    jw = fresh.jointwise
    item = jw.joints.add()
    item.name = "x"
    rna = item.bl_rna.properties
    assert rna["angle"].subtype == "ANGLE" and rna["length"].subtype == "DISTANCE"
    # the fields the joint list draws are the animatable ones; value reads whichever the
    # coordinate's kind names (issue 10: I over the drawn field keys it)
    assert rna["angle"].is_animatable and rna["length"].is_animatable
    assert not rna["value"].is_animatable
    item.kind = "angle"
    item["angle"] = 1.25  # stored directly: no mechanism here to pose
    assert item.value == pytest.approx(1.25)
    item.kind = "length"
    item["length"] = 0.5
    assert item.value == pytest.approx(0.5)


def test_views_and_key_button(fresh):
    jw = fresh.jointwise
    item = jw.joints.add()
    item.name = "x"
    item.home_angle = 0.5
    item.limit_max_length = 2.0
    assert item.home == pytest.approx(0.5) and item.limit_max == pytest.approx(2.0)
    rna = item.bl_rna.properties
    assert rna["home_angle"].subtype == "ANGLE" and rna["limit_min_length"].subtype == "DISTANCE"
    fresh.frame_set(7)
    assert bpy.ops.jointwise.value_key(index=0) == {"FINISHED"}
    import workshop as ws
    assert [fc.data_path for fc in ws.fcurves_of(fresh)] == ["jointwise.joints[0].angle"]
    with pytest.raises(RuntimeError, match="no joint value"):
        bpy.ops.jointwise.value_key(index=5)
    # a second key on the same curve, at another frame
    fresh.frame_set(19)  # (evaluates the animation: set the value after it)
    # no mechanism here to pose (a typed value would be refused and go back): stored directly
    item["angle"] = 1.25
    assert bpy.ops.jointwise.value_key(index=0) == {"FINISHED"}
    (fc,) = ws.fcurves_of(fresh)
    assert [tuple(k.co) for k in fc.keyframe_points] == [(7.0, 0.0), (19.0, 1.25)]


def test_toml_writer_round_trips_awkward_names(installed, tmp_path):
    import importlib
    tw = importlib.import_module(installed + ".tomlwrite")
    data = {"format": 1,
            "mechanism": {"name": 'Pell & Marrow "Lintel"\tclamp\n', "ground": "base"},
            "links": {"base": {}, "arm 2": {"object": "Arm.001 – ünïcode"}},
            "joints": {"a.b": {"type": "revolute", "point": [0.1, -2.5e-07, 3.0], "axis": [0, 0, 1],
                               "limits": [-1.0, 1.0], "drive": True}},
            "measures": {"tip": {"type": "distance", "a": {"link": "base", "at": [1.0, 2.0, 3.0]},
                                 "b": {"link": "arm 2", "at": [0.0, 0.0, 0.0]}}}}
    out = tmp_path / "x.toml"
    tw.write(out, data)
    assert tomllib.loads(out.read_text(encoding="utf-8")) == data
    assert [p.name for p in tmp_path.iterdir()] == ["x.toml"]  # no temporary file left
    with pytest.raises(ValueError, match="non-finite"):
        tw.write(tmp_path / "bad.toml", {"a": {"b": float("nan")}})
    assert not (tmp_path / "bad.toml").exists()
