"""Test scenes from an invented workshop, Pell & Marrow Toolworks: the "Lintel" toggle
clamp (a planar four-bar crank-rocker) and the "Corbel" bench vise (a screw-driven jaw:
helical spindle, collar revolute and jaw slide in one loop). Objects are plain cubes
made here; the mechanism files are written here (millimetres, degrees)."""
from __future__ import annotations

import math
import pathlib

import bpy
import numpy as np

# Lintel clamp: ground pivots A, D; crank AB (shortest, turns fully), coupler BC, rocker CD.
# Grashof: s + l = 30 + 80 = 110 <= p + q = 70 + 60 = 130 -> crank-rocker.
A = np.array([0.0, 0.0, 0.0])
D = np.array([80.0, 0.0, 0.0])
AB, BC, CD = 30.0, 70.0, 60.0
B = np.array([0.0, 30.0, 0.0])  # crank at 90 degrees at home


def _circle_meet(p, r1, q, r2):
    """Upper intersection of circles (p, r1) and (q, r2) in the XY plane."""
    d = np.linalg.norm(q - p)
    a = (r1 * r1 - r2 * r2 + d * d) / (2 * d)
    h = math.sqrt(r1 * r1 - a * a)
    e = (q - p) / d
    n = np.array([-e[1], e[0], 0.0])
    return p + a * e + h * n


C = _circle_meet(B, BC, D, CD)


def fmt(v):
    return "[" + ", ".join(repr(float(x)) for x in v) + "]"


def cube(name, centre, size=(1, 1, 1), turn=0.0, rotation_mode="XYZ"):
    mesh = bpy.data.meshes.new(name)
    h = 0.5
    verts = [(x * h, y * h, z * h) for x in (-1, 1) for y in (-1, 1) for z in (-1, 1)]
    faces = [(0, 1, 3, 2), (4, 6, 7, 5), (0, 4, 5, 1), (2, 3, 7, 6), (0, 2, 6, 4), (1, 5, 7, 3)]
    mesh.from_pydata(verts, [], faces)
    obj = bpy.data.objects.new(name, mesh)
    bpy.context.scene.collection.objects.link(obj)
    obj.rotation_mode = rotation_mode
    obj.location = centre
    obj.scale = size
    if rotation_mode == "QUATERNION":
        from mathutils import Quaternion
        obj.rotation_quaternion = Quaternion((0, 0, 1), turn)
    elif rotation_mode == "AXIS_ANGLE":
        obj.rotation_axis_angle = (turn, 0, 0, 1)
    else:
        from mathutils import Euler
        obj.rotation_euler = Euler((0, 0, turn), 'XYZ').to_matrix().to_euler(rotation_mode)
    bpy.context.view_layer.update()
    return obj


def _bar(name, p, q, mode, scale):
    c = (p + q) / 2 * scale
    turn = math.atan2(q[1] - p[1], q[0] - p[0])
    return cube(name, tuple(c), (np.linalg.norm(q - p) * scale, 8 * scale, 5 * scale), turn, mode)


def make_clamp_objects(scale=0.001):
    """Cubes for the clamp links; ``scale`` = scene units per millimetre."""
    objs = {
        "Frame": cube("Frame", (40 * scale, -10 * scale, -5 * scale), (100 * scale, 10 * scale, 5 * scale)),
        "Crank": _bar("Crank", A, B, "XYZ", scale),
        "Coupler": _bar("Coupler", B, C, "QUATERNION", scale),
        "Rocker": _bar("Rocker", C, D, "ZXY", scale),
    }
    return objs


def clamp_file(folder, *, drive="a", axis_a=(0, 0, 1), frame_object=False):
    text = f"""format = 1
[mechanism]
name = "Lintel toggle clamp, Pell & Marrow Toolworks"
length_unit = "mm"
angle_unit = "deg"
ground = "frame"

[links.frame]
{'object = "Frame"' if frame_object else ''}
[links.crank]
object = "Crank"
[links.coupler]
object = "Coupler"
[links.rocker]
object = "Rocker"

[joints.a]
type = "revolute"
parent = "frame"
child = "crank"
point = {fmt(A)}
axis = {fmt(axis_a)}
home = 90
drive = {'true' if drive == 'a' else 'false'}

[joints.b]
type = "revolute"
parent = "crank"
child = "coupler"
point = {fmt(B)}
axis = [0, 0, 1]

[joints.c]
type = "revolute"
parent = "coupler"
child = "rocker"
point = {fmt(C)}
axis = [0, 0, 1]

[joints.d]
type = "revolute"
parent = "frame"
child = "rocker"
point = {fmt(D)}
axis = [0, 0, 1]
drive = {'true' if drive == 'd' else 'false'}
"""
    path = pathlib.Path(folder) / "lintel.toml"
    path.write_text(text)
    return path


def make_twin_clamp_objects(scale=0.001, lift=40.0):
    """Cubes for two Lintel clamps on one frame, the second ``lift`` mm above the first."""
    up = np.array([0.0, 0.0, lift])
    objs = {"Frame": cube("Frame", (40 * scale, -10 * scale, -5 * scale), (100 * scale, 10 * scale, 5 * scale))}
    for k, z in ((1, 0 * up), (2, up)):
        objs[f"Crank{k}"] = _bar(f"Crank{k}", A + z, B + z, "XYZ", scale)
        objs[f"Coupler{k}"] = _bar(f"Coupler{k}", B + z, C + z, "QUATERNION", scale)
        objs[f"Rocker{k}"] = _bar(f"Rocker{k}", C + z, D + z, "ZXY", scale)
    return objs


def twin_clamp_file(folder, lift=40.0, coupled=True):
    """Two Lintel clamps (loops closed by ``c1`` and ``c2``) joined by a coupling: the second
    crank follows the first rocker (``a2 = d1 + 90 deg``, a gear pair of ratio 1), so the two
    loops are one group. The first crank ``a1`` is the drive."""
    lines = ['format = 1', '[mechanism]', 'name = "Lintel twin clamp, Pell & Marrow Toolworks"',
             'length_unit = "mm"', 'angle_unit = "deg"', 'ground = "frame"', '[links.frame]']
    for k in (1, 2):
        lines += [f'[links.crank{k}]', f'object = "Crank{k}"', f'[links.coupler{k}]',
                  f'object = "Coupler{k}"', f'[links.rocker{k}]', f'object = "Rocker{k}"']
    for k in (1, 2):
        z = np.array([0.0, 0.0, lift * (k - 1)])
        for j, p, c, pt in (("a", "frame", "crank", A), ("b", "crank", "coupler", B),
                            ("c", "coupler", "rocker", C), ("d", "frame", "rocker", D)):
            par = p if p == "frame" else f"{p}{k}"
            lines += [f'[joints.{j}{k}]', 'type = "revolute"', f'parent = "{par}"',
                      f'child = "{c}{k}"', f'point = {fmt(pt + z)}', 'axis = [0, 0, 1]']
            if j == "a":
                lines += ['home = 90'] + (['drive = true'] if k == 1 else [])
    if coupled:
        lines += ['[couplings.rocker_to_crank]', 'leader = "d1"', 'follower = "a2"', 'ratio = 1',
                  'offset = 90']
    path = pathlib.Path(folder) / "lintel_twin.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


# "Pantile" five-bar (two freedoms): ground pivots FA, FE; cranks FA-FB, FE-FD (30 mm, both
# at 90 deg at home); couplers FB-FC, FD-FC (50 mm) meeting at FC.
FA, FE = np.array([0.0, 0.0, 0.0]), np.array([60.0, 0.0, 0.0])
FB, FD, FC = np.array([0.0, 30.0, 0.0]), np.array([60.0, 30.0, 0.0]), np.array([30.0, 70.0, 0.0])


def make_five_bar_objects(scale=0.001):
    return {"Left": _bar("Left", FA, FB, "XYZ", scale), "LeftArm": _bar("LeftArm", FB, FC, "XYZ", scale),
            "RightArm": _bar("RightArm", FD, FC, "QUATERNION", scale),
            "Right": _bar("Right", FE, FD, "XYZ", scale)}


def five_bar_file(folder):
    """Two cranks ``a`` and ``e`` (both Drive), one loop closed by ``c``; a rate measure of
    ``c`` per ``a``."""
    lines = ['format = 1', '[mechanism]', 'name = "Pantile five-bar, Pell & Marrow Toolworks"',
             'length_unit = "mm"', 'angle_unit = "deg"', 'ground = "frame"', '[links.frame]']
    for link, obj in (("left", "Left"), ("left_arm", "LeftArm"), ("right_arm", "RightArm"),
                      ("right", "Right")):
        lines += [f'[links.{link}]', f'object = "{obj}"']
    for j, p, c, pt, extra in (("a", "frame", "left", FA, ['home = 90', 'drive = true']),
                               ("b", "left", "left_arm", FB, []),
                               ("c", "left_arm", "right_arm", FC, []),
                               ("d", "right_arm", "right", FD, []),
                               ("e", "frame", "right", FE, ['home = 90', 'drive = true'])):
        lines += [f'[joints.{j}]', 'type = "revolute"', f'parent = "{p}"', f'child = "{c}"',
                  f'point = {fmt(pt)}', 'axis = [0, 0, 1]'] + extra
    lines += ['[measures.c_per_a]', 'type = "rate"', 'of = "c"', 'per = "a"']
    path = pathlib.Path(folder) / "pantile.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def make_vise_objects(scale=1.0):
    return {
        "Body": cube("Body", (0, 0, -10 * scale), (120 * scale, 40 * scale, 10 * scale)),
        "Spindle": cube("Spindle", (-40 * scale, 0, 20 * scale), (80 * scale, 16 * scale, 16 * scale),
                        0.3, "QUATERNION"),
        "Jaw": cube("Jaw", (5 * scale, 0, 15 * scale), (10 * scale, 40 * scale, 30 * scale), 0.0, "XZY"),
    }


def vise_file(folder, *, limits=(-10, 60)):
    text = f"""format = 1
[mechanism]
name = "Corbel bench vise"
length_unit = "mm"
angle_unit = "deg"
ground = "body"

[links.body]
object = "Body"
[links.spindle]
object = "Spindle"
[links.jaw]
object = "Jaw"

[joints.feed]
type = "helical"
parent = "body"
child = "spindle"
point = [0, 0, 20]
axis = [1, 0, 0]
thread = "Tr16x4"
drive = true

[joints.collar]
type = "revolute"
parent = "spindle"
child = "jaw"
point = [0, 0, 20]
axis = [1, 0, 0]

[joints.slide]
type = "prismatic"
parent = "body"
child = "jaw"
point = [0, 0, 0]
axis = [1, 0, 0]
limits = [{limits[0]}, {limits[1]}]
"""
    path = pathlib.Path(folder) / "corbel.toml"
    path.write_text(text)
    return path


def world(obj):
    return np.array(obj.matrix_world, dtype=float)


def expected_world(pose, link, home_world, unit_to_bu):
    """Core displacement (file units) -> world matrix in scene units."""
    d = np.array(pose.links[link], dtype=float)
    d[:3, 3] *= unit_to_bu
    return d @ home_world


def fcurves_of(idblock):
    ad = idblock.animation_data
    if ad is None or ad.action is None:
        return []
    action = ad.action
    out = []
    for layer in action.layers:
        for strip in layer.strips:
            bag = strip.channelbag(ad.action_slot)
            if bag is not None:
                out.extend(bag.fcurves)
    return out
