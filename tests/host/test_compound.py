"""Compound joints through the extension: a Hooke's joint drive (universal joint between
two revolute shafts, a spatial loop) and a cylindrical joint in an open chain. Reference:
the core's pose of the same file (whose Hooke's-joint kinematics the core tests check)."""
from __future__ import annotations

import math

import bpy
import numpy as np

import workshop as ws

BETA = math.radians(30)


def hooke_file(folder):
    text = f"""format = 1
[mechanism]
name = "Pell & Marrow angle drive"
length_unit = "mm"
angle_unit = "deg"
ground = "housing"

[links.housing]
object = "Housing"
[links.input]
object = "InputShaft"
[links.output]
object = "OutputShaft"
[links.sleeve]
object = "Sleeve"
[links.handle]
object = "Handle"

[joints.grip]
type = "fixed"
parent = "input"
child = "handle"

[joints.in]
type = "revolute"
parent = "housing"
child = "input"
point = [0, 0, 0]
axis = [1, 0, 0]
drive = true

[joints.cross]
type = "universal"
parent = "input"
child = "output"
point = [0, 0, 0]
axis = [0, 0, 1]
axis2 = [{-math.sin(BETA)!r}, {math.cos(BETA)!r}, 0]

[joints.out]
type = "revolute"
parent = "housing"
child = "output"
point = [0, 0, 0]
axis = [{math.cos(BETA)!r}, {math.sin(BETA)!r}, 0]

[joints.sl]
type = "cylindrical"
parent = "housing"
child = "sleeve"
point = [0, 50, 0]
axis = [0, 0, 1]
"""
    p = folder / "angle_drive.toml"
    p.write_text(text)
    return p


def test_hooke_joint_and_cylindrical(fresh, tmp_path):
    import jointwise
    objs = {
        "Housing": ws.cube("Housing", (0, 0, -0.05), (0.2, 0.2, 0.01)),
        "InputShaft": ws.cube("InputShaft", (-0.05, 0, 0), (0.1, 0.01, 0.01)),
        "OutputShaft": ws.cube("OutputShaft", (0.05 * math.cos(BETA), 0.05 * math.sin(BETA), 0),
                               (0.1, 0.01, 0.01), BETA, "QUATERNION"),
        "Sleeve": ws.cube("Sleeve", (0, 0.05, 0), (0.02, 0.02, 0.04)),
        "Handle": ws.cube("Handle", (-0.1, 0, 0.02), (0.01, 0.01, 0.04)),
    }
    homes = {n: ws.world(o) for n, o in objs.items()}
    path = hooke_file(tmp_path)
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = fresh.jointwise
    assert [j.name for j in jw.joints] == ["grip", "in", "cross.1", "cross.2", "out", "sl.1", "sl.2"]
    assert jw.joints["sl.2"].kind == "length" and jw.joints["sl.1"].kind == "angle"
    mech = jointwise.load(path)
    assert jw.joints["grip"].type == "fixed" and jw.joints["grip"].anchor is None
    jw.live = True
    jw.joints["sl.2"].value = 0.012  # 12 mm in a metre scene
    jw.joints["sl.1"].value = math.radians(40)
    prev = None
    for deg in (20.0, 60.0, 90.0, 135.0):
        jw.joints["in"].value = math.radians(deg)
        assert jw.converged, jw.message
        prev = mech.pose({"in": deg, "sl.1": 40.0, "sl.2": 12.0}, start=prev)
        for link, oname in (("input", "InputShaft"), ("output", "OutputShaft"), ("sleeve", "Sleeve"),
                            ("handle", "Handle")):
            want = ws.expected_world(prev, link, homes[oname], 0.001)
            assert np.allclose(ws.world(objs[oname]), want, atol=1e-5), (deg, oname)
    out = tmp_path / "again.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    again = jointwise.load(out)
    assert again.joints["grip"].type == "fixed" and again.joints["cross"].type == "universal"
    p1 = mech.pose({"in": 50.0, "sl.1": 5.0, "sl.2": 1.0})
    p2 = again.pose({"in": 50.0, "sl.1": 5.0, "sl.2": 1.0})
    for link in ("output", "sleeve", "handle"):
        assert np.allclose(p1.links[link], p2.links[link], atol=1e-5)
