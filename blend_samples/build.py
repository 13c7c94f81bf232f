"""Build the Fennwick Row Workshop sample scenes (``<name>.blend``) from their mechanism files.

Run with a Python that has bpy (Blender as a module)::

    .venv-bpy45/bin/python blend_samples/build.py [NAME ...]      # all samples by default
    .venv-bpy45/bin/python blend_samples/build.py --check [NAME ...]

The committed files are written with Blender 4.5 LTS (``.venv-bpy45``): 4.5 and 5.0 both
open them without warnings (a file written by 5.0 opens in 4.5 only with a "newer
Blender, expect loss of data" warning).

Each sample: an empty scene in millimetres (``scale_length = 0.001``: 1 BU = 1 mm, so the
file's millimetres map 1:1), plain meshes per link placed at the home geometry read
from the mechanism file (bars with pin holes, blocks, threaded rods, yokes), named by the
file's ``object`` keys; then ``jointwise.mechanism_import``, the drive's value keyed as a
linear ramp over the documented sweep (read from the file's header comment) and the
links baked over the same frames; a trace of every point measure; camera, sun and
Workbench settings; a text block "README" with the description (and, for machines that
could hurt someone, the caution that jointwise checks kinematics only).

The extension zip (``$JOINTWISE_ZIP`` or ``dist/jointwise-*.zip``, built by
``.venv/bin/python addon/package.py``) is installed under a temporary HOME, as in the
host tests. ``--check`` rebuilds each sample in memory and compares the stored home
placements with the committed files (exit 1 on a difference).

The functions below (``build_scene``, ``save``, ``home_placements``) are used by the
main job and the host tests with bpy already imported and the extension enabled.
"""
from __future__ import annotations

import argparse
import math
import os
import pathlib
import re
import shutil
import sys
import tempfile

import numpy as np

HERE = pathlib.Path(__file__).resolve().parent
ROOT = HERE.parent
MODULE = "bl_ext.user_default.jointwise"
SAMPLES = ("linnet_vise", "wagtail_rocker", "dipper_pump", "heron_shaft", "heron_twin_shaft",
           "plover_lift", "kittiwake_index")
DEFAULT_FRAMES = 120
FRAMES = {"plover_lift": 240}  # 50 screw turns: 75 deg a frame rather than 150
CAUTION = ("jointwise checks kinematics only: no loads, strength, stability or guarding. "
           "Local codes and a qualified engineer decide whether a real machine like this is safe.")
CAUTIONED = ("linnet_vise", "plover_lift", "kittiwake_index")
HOME_TOL = 1e-5

SWEEP = re.compile(r"Documented sweep:\s*\w+\s+(-?[\d.]+)\s+to\s+(-?[\d.]+)\s+deg")

COLOURS = {
    "frame": (0.30, 0.36, 0.34, 1.0),
    "steel": (0.72, 0.73, 0.75, 1.0),
    "moving": (0.90, 0.55, 0.18, 1.0),
    "second": (0.25, 0.50, 0.80, 1.0),
    "third": (0.45, 0.70, 0.35, 1.0),
    "deck": (0.80, 0.78, 0.70, 1.0),
}


class SampleError(RuntimeError):
    """A sample cannot be built as asked; the message says which and why."""


# -- what a sample is ---------------------------------------------------------------------

def toml_path(name):
    return HERE / f"{name}.toml"


def blend_path(name):
    return HERE / f"{name}.blend"


def header_lines(name):
    """The leading comment lines of the mechanism file, without the ``# ``."""
    out = []
    for line in toml_path(name).read_text(encoding="utf-8").splitlines():
        if not line.startswith("#"):
            break
        out.append(line[1:].strip())
    return out


def documented_sweep(name):
    """(drive coordinate, start, end) in file units (degrees) from the header comment."""
    import jointwise
    text = " ".join(header_lines(name))
    m = SWEEP.search(text)
    if m is None:
        raise SampleError(f"{name}.toml: no 'Documented sweep: <input> A to B deg' in its header")
    mech = jointwise.load(toml_path(name))
    drives = mech.driven
    if len(drives) != 1:
        raise SampleError(f"{name}.toml: expected one coordinate with drive = true, got {drives}")
    return drives[0], float(m.group(1)), float(m.group(2))


def frame_range(name, frames=None):
    n = frames or FRAMES.get(name, DEFAULT_FRAMES)
    if n < 2:
        raise SampleError(f"need at least 2 frames, got {n}")
    return 1, n


# -- meshes (world coordinates, millimetres) -------------------------------------------------

def _unit(v):
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


def _perp(a):
    a = _unit(a)
    t = np.array([1.0, 0, 0]) if abs(a[0]) < 0.9 else np.array([0, 1.0, 0])
    x = _unit(t - a * (t @ a))
    return x, np.cross(a, x)


class Shape:
    """Vertices and faces gathered for one object (world coordinates)."""

    def __init__(self):
        self.verts = []
        self.faces = []

    def add(self, verts, faces):
        off = len(self.verts)
        self.verts.extend(np.asarray(v, dtype=float) for v in verts)
        self.faces.extend(tuple(i + off for i in f) for f in faces)
        return self

    def box(self, centre, size, x=(1, 0, 0), y=(0, 1, 0)):
        """A box of ``size`` (along x, y, z) centred at ``centre``; axes x, y (z = x cross y)."""
        x, y = _unit(x), _unit(y)
        z = np.cross(x, y)
        c = np.asarray(centre, dtype=float)
        h = np.asarray(size, dtype=float) / 2
        verts = [c + sx * h[0] * x + sy * h[1] * y + sz * h[2] * z
                 for sx in (-1, 1) for sy in (-1, 1) for sz in (-1, 1)]
        faces = [(0, 1, 3, 2), (4, 6, 7, 5), (0, 4, 5, 1), (2, 3, 7, 6), (0, 2, 6, 4), (1, 5, 7, 3)]
        return self.add(verts, faces)

    def span(self, lo, hi, x=(1, 0, 0), y=(0, 1, 0)):
        """A box between corners ``lo`` and ``hi`` given in the (x, y, z) frame."""
        x, y = _unit(x), _unit(y)
        z = np.cross(x, y)
        lo, hi = np.asarray(lo, float), np.asarray(hi, float)
        c = (lo + hi) / 2
        return self.box(c[0] * x + c[1] * y + c[2] * z, np.abs(hi - lo), x, y)

    def cylinder(self, p0, p1, r, n=24):
        """A capped cylinder of radius ``r`` from ``p0`` to ``p1``."""
        p0, p1 = np.asarray(p0, float), np.asarray(p1, float)
        u, v = _perp(p1 - p0)
        t = np.linspace(0, 2 * math.pi, n, endpoint=False)
        ring = [r * (math.cos(a) * u + math.sin(a) * v) for a in t]
        verts = [p0 + d for d in ring] + [p1 + d for d in ring]
        faces = [(i, (i + 1) % n, n + (i + 1) % n, n + i) for i in range(n)]
        faces += [tuple(reversed(range(n))), tuple(range(n, 2 * n))]
        return self.add(verts, faces)

    def ridge(self, p0, axis, length, r, lead, depth, hand="right", per_turn=24):
        """A helical thread ridge (triangular section) on a rod of radius ``r``."""
        p0 = np.asarray(p0, float)
        a = _unit(axis)
        u, v = _perp(a)
        turns = length / lead
        n = max(2, int(turns * per_turn) + 1)
        s = np.linspace(0.0, turns, n)
        sign = 1.0 if hand == "right" else -1.0
        w = 0.35 * lead
        verts = []
        for si in s:
            ang = sign * 2 * math.pi * si
            radial = math.cos(ang) * u + math.sin(ang) * v
            base = p0 + a * (si * lead)
            verts += [base + radial * (r - 0.2) - a * w / 2, base + radial * (r + depth),
                      base + radial * (r - 0.2) + a * w / 2]
        faces = []
        for i in range(n - 1):
            for k in range(3):
                k2 = (k + 1) % 3
                faces.append((3 * i + k, 3 * i + k2, 3 * (i + 1) + k2, 3 * (i + 1) + k))
        faces += [(2, 1, 0), (3 * (n - 1), 3 * (n - 1) + 1, 3 * (n - 1) + 2)]
        return self.add(verts, faces)

    def bar(self, pins, normal, half_width, thick, hole, n=20):
        """A flat bar with rounded ends through collinear ``pins``, a hole at each pin.

        The bar lies across ``normal`` (the pin axis), centred on the pins' plane; each
        hole fills its own cell of the bar (ring from the hole to the cell's outline), so
        the mesh needs no booleans."""
        pins = [np.asarray(p, float) for p in pins]
        zax = _unit(normal)
        xax = _unit(pins[-1] - pins[0] - zax * ((pins[-1] - pins[0]) @ zax))
        yax = np.cross(zax, xax)
        o = pins[0]
        us = sorted(float((p - o) @ xax) for p in pins)
        R, r, t = half_width, hole, thick / 2
        cells = [-math.inf] + [(a + b) / 2 for a, b in zip(us, us[1:])] + [math.inf]
        for i, u0 in enumerate(us):
            left, right = cells[i] - u0, cells[i + 1] - u0  # signed distances (left < 0)
            angs = list(np.linspace(-math.pi, math.pi, n, endpoint=False))
            for d in (left, right):
                if math.isfinite(d):
                    angs += [math.atan2(R, d), math.atan2(-R, d)]
            angs = sorted(set(round(a, 12) for a in angs))
            inner, outer, wall = [], [], []
            for a in angs:
                c, s = math.cos(a), math.sin(a)
                inner.append((r * c, r * s))
                end = left if c < 0 else right
                if not math.isfinite(end):
                    outer.append((R * c, R * s))
                    wall.append(True)
                else:
                    k = abs(end / c) if abs(c) > 1e-12 else math.inf
                    ks = R / abs(s) if abs(s) > 1e-12 else math.inf
                    kk = min(k, ks)
                    outer.append((kk * c, kk * s))
                    wall.append(ks <= k + 1e-9)
            m = len(angs)

            def at(uv, h):
                return o + (u0 + uv[0]) * xax + uv[1] * yax + h * zax
            verts = ([at(p, t) for p in inner] + [at(p, t) for p in outer]
                     + [at(p, -t) for p in inner] + [at(p, -t) for p in outer])
            I, O, Ib, Ob = 0, m, 2 * m, 3 * m
            faces = []
            for k in range(m):
                k2 = (k + 1) % m
                faces.append((I + k, O + k, O + k2, I + k2))
                faces.append((Ib + k2, Ob + k2, Ob + k, Ib + k))
                faces.append((I + k2, Ib + k2, Ib + k, I + k))
                if wall[k] and wall[k2]:  # on the outline, not on a cell boundary
                    faces.append((O + k, Ob + k, Ob + k2, O + k2))
            self.add(verts, faces)
        return self

    def yoke(self, centre, body, ear, reach=10.0, pin=2.0):
        """A Hooke's joint yoke at ``centre``: its shaft lies towards ``body``; the two
        ears hold the cross arm along ``ear`` (with the arm, a pin along ``ear``)."""
        c = np.asarray(centre, float)
        s, e = _unit(body), _unit(ear)
        w = np.cross(s, e)
        self.box(c + s * 14, (4, 2 * reach + 6, 12), s, e)
        for sign in (-1, 1):
            self.box(c + sign * e * reach + s * 6, (20, 3, 10), s, e)
        self.cylinder(c - e * (reach + 1.5), c + e * (reach + 1.5), pin, 16)
        return w


def make_object(scene, name, shape, origin, material):
    """A mesh object ``name`` from ``shape`` with its origin at ``origin`` (no rotation)."""
    import bmesh
    import bpy
    origin = np.asarray(origin, float)
    mesh = bpy.data.meshes.new(name)
    mesh.from_pydata([tuple(v - origin) for v in shape.verts], [], shape.faces)
    bm = bmesh.new()
    bm.from_mesh(mesh)
    bmesh.ops.remove_doubles(bm, verts=bm.verts, dist=1e-4)
    bmesh.ops.recalc_face_normals(bm, faces=bm.faces)
    bm.to_mesh(mesh)
    bm.free()
    mesh.materials.append(material)
    obj = bpy.data.objects.new(name, mesh)
    obj.rotation_mode = 'QUATERNION'
    obj.location = tuple(origin)
    obj.color = material.diffuse_color
    scene.collection.objects.link(obj)
    return obj


def materials():
    import bpy
    out = {}
    for key, rgba in COLOURS.items():
        mat = bpy.data.materials.get(f"fennwick {key}") or bpy.data.materials.new(f"fennwick {key}")
        mat.diffuse_color = rgba
        mat.roughness = 0.6
        out[key] = mat
    return out


# -- the samples' parts -----------------------------------------------------------------------

def _pts(mech):
    return ({n: np.asarray(j.point, float) for n, j in mech.joints.items()},
            {n: np.asarray(j.axis, float) for n, j in mech.joints.items()})


def parts_wagtail(mech):
    P, A = _pts(mech)
    a, b, c, d = (P[k] for k in ("crank_pin", "coupler_pin", "rocker_pin", "rocker_pivot"))
    z = A["crank_pin"]
    hook = np.asarray(mech.measures["sign_hook"].a[1], float)
    frame = Shape().bar([a - z * 6, d - z * 6], z, 7, 3, 2.2)
    frame.span((-14, -12, -16), (74, -8, -7.5))
    frame.span((-14, -12, -16), (-6, 12, -7.5))
    frame.cylinder(a - z * 7.5, a + z * 1.8, 2.0)
    frame.cylinder(d - z * 7.5, d + z * 9.8, 2.0)
    crank = Shape().bar([a, b], z, 5, 3, 2.2).cylinder(b - z * 1.5, b + z * 5.8, 2.0)
    coupler = Shape().bar([b + z * 4, c + z * 4], z, 5, 3, 2.2)
    coupler.bar([b + z * 4.6, hook + z * 4.6], z, 4, 3, 1.6)
    coupler.cylinder(c + z * 2.5, c + z * 9.8, 2.0).cylinder(hook + z * 3, hook + z * 9, 1.4)
    u = _unit(c - d)
    rocker = Shape().bar([c + z * 8, d + z * 8], z, 5, 3, 2.2)
    rocker.box(c + u * 16 + z * 8, (18, 26, 2), u, np.cross(z, u))
    return {"rocker_frame": (frame, a, "frame"), "rocker_crank": (crank, a, "moving"),
            "rocker_coupler": (coupler, b, "second"), "rocker_arm": (rocker, d, "third")}


def parts_dipper(mech):
    P, A = _pts(mech)
    o, e, s = P["crank_pin"], P["rod_big_end"], P["rod_small_end"]
    z = A["crank_pin"]
    body = Shape().span((-25, -22, -12), (130, 30, -8))
    body.cylinder(o - z * 8, o - z * 1.5, 7).cylinder(o - z * 8, o + z * 1.6, 2.5)
    body.span((45, s[1] + 6, -8), (130, s[1] + 10, 8)).span((45, s[1] - 10, -8), (130, s[1] - 6, 8))
    crank = Shape().bar([o, e], z, 5, 3, 2.6).cylinder(e - z * 1.5, e + z * 5.5, 2.4)
    crank.cylinder(o - e * 0.6 + z * 1.5, o - e * 0.6 + z * 12, 2.5)  # handle knob
    rod = Shape().bar([e + z * 3.5, s + z * 3.5], z, 4, 3, 2.6)
    plunger = Shape().span((s[0] - 5, s[1] - 5, -3), (s[0] + 40, s[1] + 5, 8))
    plunger.cylinder(s - z * 4, s + z * 9, 2.4)
    return {"pump_body": (body, o, "frame"), "pump_crank": (crank, o, "moving"),
            "pump_rod": (rod, e, "second"), "pump_plunger": (plunger, s, "steel")}


def _shaft(shape, start, end, r=5.0):
    shape.cylinder(start, end, r)
    return shape


def _pedestal(shape, point, axis, floor):
    a = _unit(axis)
    side = np.cross(np.array([0, 0, 1.0]), a)
    c = np.asarray(point, float)
    shape.box((c[0], c[1], (floor + 8) / 2), (14, 30, 8 - floor), a, side)
    shape.cylinder(c - a * 7, c + a * 7, 9)


def parts_heron(mech):
    P, A = _pts(mech)
    j = mech.joints["cross"]
    c = P["cross"]
    ai, ao = A["input_bearing"], A["output_bearing"]
    frame = Shape().span((-120, -30, -44), (100, 75, -40))
    _pedestal(frame, c - ai * 70, ai, -40)
    _pedestal(frame, c + ao * 70, ao, -40)
    inp = _shaft(Shape(), c - ai * 115, c - ai * 14, 5)
    inp.yoke(c, -ai, j.axis)
    inp.box(c - ai * 100 + np.array([0, 8, 0]), (6, 10, 3), ai, (0, 1, 0))
    out = _shaft(Shape(), c + ao * 14, c + ao * 110, 5)
    out.yoke(c, ao, j.axis2)
    out.box(c + ao * 96 + np.cross((0, 0, 1.0), ao) * 8, (6, 10, 3), ao, np.cross((0, 0, 1.0), ao))
    return {"heron_frame": (frame, c, "frame"), "heron_input": (inp, c, "moving"),
            "heron_output": (out, c, "second")}


def parts_twin(mech):
    P, A = _pts(mech)
    n, f = P["near_cross"], P["far_cross"]
    jn, jf = mech.joints["near_cross"], mech.joints["far_cross"]
    ai, ao = A["input_bearing"], A["output_bearing"]
    m = _unit(f - n)
    frame = Shape().span((-110, -30, -44), (220, 80, -40))
    _pedestal(frame, n - ai * 60, ai, -40)
    _pedestal(frame, f + ao * 60, ao, -40)
    inp = _shaft(Shape(), n - ai * 100, n - ai * 14, 5)
    inp.yoke(n, -ai, jn.axis)
    inp.box(n - ai * 85 + np.array([0, 8, 0]), (6, 10, 3), ai, (0, 1, 0))
    mid = _shaft(Shape(), n + m * 14, f - m * 14, 5)
    mid.yoke(n, m, jn.axis2)
    mid.yoke(f, -m, jf.axis)
    out = _shaft(Shape(), f + ao * 14, f + ao * 100, 5)
    out.yoke(f, ao, jf.axis2)
    out.box(f + ao * 85 + np.array([0, 8, 0]), (6, 10, 3), ao, (0, 1, 0))
    return {"twin_frame": (frame, n, "frame"), "twin_input": (inp, n, "moving"),
            "twin_middle": (mid, (n + f) / 2, "third"), "twin_output": (out, f, "second")}


def parts_vise(mech):
    P, A = _pts(mech)
    p = P["screw_bearing"]
    x = A["screw_bearing"]
    j = mech.joints["screw_nut"]
    lead = abs(float(j.lead))
    frame = Shape().span((-20, -30, 0), (210, 30, 20))
    frame.span((-20, -40, 20), (10, 40, 70))  # fixed jaw, face at x = 10
    frame.span((192, -20, 20), (208, 20, 56))  # rear bearing block
    screw = Shape().cylinder(p + x * 20, p + x * 226, 8)
    screw.ridge(p + x * 24, x, 164, 8, lead, 1.2, j.source.get("hand", "right"))
    screw.cylinder(p + x * 222 + np.array([0, -45, 0]), p + x * 222 + np.array([0, 45, 0]), 3)
    for sy in (-1, 1):
        screw.cylinder(p + x * 222 + np.array([0, sy * 45, 0]), p + x * 222 + np.array([0, sy * 50, 0]), 5)
    jaw = Shape().span((60, -40, 20), (80, 40, 70)).span((60, -16, 12), (80, 16, 20))
    return {"vise_frame": (frame, p, "frame"), "vise_screw": (screw, p, "steel"),
            "vise_jaw": (jaw, p + x * 60, "moving")}


def parts_plover(mech):
    P, A = _pts(mech)
    y = np.array([0, 1.0, 0])
    sp, fp = P["screw_bearing"], P["foot_pin"]
    x = A["screw_bearing"]
    j = mech.joints["screw_nut"]
    lead = abs(float(j.lead))
    base = Shape().span((-40, -75, -52), (480, 75, -44))
    for sy in (-1, 1):
        base.span((-14, sy * 56 - 4, -44), (14, sy * 56 + 4, 8))
    base.cylinder((0, -62, 0), (0, 62, 0), 6)
    base.span((440, -16, -44), (458, 16, -16))
    screw = Shape().cylinder(sp + x * -230, sp + x * 50, 8)
    screw.ridge(sp + x * -225, x, 260, 8, lead, 1.0, j.source.get("hand", "right"), per_turn=12)
    screw.cylinder(sp + x * 46, sp + x * 52, 34).cylinder(sp + x * 52 + np.array([0, 0, 26]),
                                                          sp + x * 66 + np.array([0, 0, 26]), 4)
    foot = Shape().span((fp[0] - 14, -55, -20), (fp[0] + 14, 55, -8))
    foot.span((fp[0] - 10, -14, -40), (fp[0] + 10, 14, -20))
    for sy in (-1, 1):
        foot.span((fp[0] - 8, sy * 47 - 3, -8), (fp[0] + 8, sy * 47 + 3, 6))
    foot.cylinder(fp - y * 50, fp + y * 50, 6)
    out = {"lift_base": (base, P["heel_pin"], "frame"), "lift_screw": (screw, sp, "steel"),
           "lift_foot": (foot, fp, "steel")}
    stages = 3
    for k in range(stages):
        a_lo = P["heel_pin"] if k == 0 else P[f"left_pin{k - 1}"]
        a_hi = P[f"right_pin{k}"] if k < stages - 1 else P["top_pin"]
        b_lo = P["foot_pin"] if k == 0 else P[f"right_pin{k - 1}"]
        b_hi = P[f"left_pin{k}"] if k < stages - 1 else P["platform_pin"]
        mid = P[f"middle_pin{k}"]
        arm_a, arm_b = Shape(), Shape()
        for sy in (-1, 1):
            arm_a.bar([a_lo + y * sy * 50, mid + y * sy * 50, a_hi + y * sy * 50], y, 12, 8, 6.5)
            arm_b.bar([b_lo + y * sy * 38, mid + y * sy * 38, b_hi + y * sy * 38], y, 12, 8, 6.5)
        for q in (a_lo, mid, a_hi):
            arm_a.cylinder(q - y * 54, q + y * 54, 6)
        for q in (b_lo, b_hi):
            arm_b.cylinder(q - y * 42, q + y * 42, 6)
        arm_b.cylinder(mid - y * 34 + 0 * y, mid + y * 34, 9)  # spacer tube
        out[f"lift_arm_a{k}"] = (arm_a, mid, "moving")
        out[f"lift_arm_b{k}"] = (arm_b, mid, "second")
    pp, tp = P["platform_pin"], P["top_pin"]
    deck = Shape().span((-30, -75, pp[2] + 14), (420, 75, pp[2] + 24))
    for sy in (-1, 1):
        deck.span((-10, sy * 60 - 4, pp[2] - 8), (10, sy * 60 + 4, pp[2] + 14))
        deck.span((300, sy * 62 - 3, pp[2] + 6), (415, sy * 62 + 3, pp[2] + 14))
    deck.cylinder(pp - y * 64, pp + y * 64, 6)
    slider = Shape().span((tp[0] - 12, -59, tp[2] + 6), (tp[0] + 12, 59, tp[2] + 13))
    for sy in (-1, 1):
        slider.span((tp[0] - 6, sy * 56.5 - 2.5, tp[2] - 7), (tp[0] + 6, sy * 56.5 + 2.5, tp[2] + 6))
    slider.cylinder(tp - y * 59, tp + y * 59, 5)
    out["lift_platform"] = (deck, pp, "deck")
    out["lift_top_slider"] = (slider, tp, "steel")
    return out


def _plate(shape, outline, z0, z1):
    """A flat plate between heights z0 and z1 over a closed outline of (x, y) points."""
    n = len(outline)
    verts = [(x, y, z0) for x, y in outline] + [(x, y, z1) for x, y in outline]
    faces = [tuple(reversed(range(n))), tuple(range(n, 2 * n))]
    faces += [(i, (i + 1) % n, n + (i + 1) % n, n + i) for i in range(n)]
    shape.add(verts, faces)
    return shape


def parts_kittiwake(mech):
    """Six-slot Geneva wheel under a round table, pin crank and plate cam on one shaft,
    marking slide with its roller on the cam (the cam outline from ``jointwise.cam``)."""
    from jointwise.cam import cam_profile
    P, A = _pts(mech)
    o, w, sp = P["drive_shaft"], P["table_spindle"], P["marking_slide"]
    frame = Shape().span((-45, -70, -22), (125, 70, -16))
    frame.cylinder(o + (0, 0, -16), o + (0, 0, -4), 8).cylinder(w + (0, 0, -16), w + (0, 0, -6), 8)
    frame.span((-14, 48, 12), (-9, 80, 28)).span((9, 48, 12), (14, 80, 28))          # slide guide
    # driver: pin crank (30 mm, towards the wheel at 0 deg; home 180 deg) and the cam above
    home = float(mech.joints["drive_shaft"].home[0])  # the core keeps angles in radians
    pin = o + 30 * np.array([math.cos(home), math.sin(home), 0.0])
    driver = Shape().bar([o, pin], (0, 0, 1), 6, 4, 2.0)
    driver.cylinder(pin + (0, 0, 2), pin + (0, 0, 12), 3.0).cylinder(o + (0, 0, -4), o + (0, 0, 26), 4.0)
    prof = cam_profile(mech, "marking_cam", 22.0, 5.0, 0.0, np.radians(np.arange(0.0, 360.0, 3.0)))["profile"]
    # cam-fixed (x, y) -> world at home: the line of lift is the slide's axis (+y); turn by the home angle
    c, s_ = math.cos(home), math.sin(home)
    outline = [(o[0] + c * x - s_ * y, o[1] + s_ * x + c * y) for x, y in prof]
    _plate(driver, outline, 16.0, 24.0)
    # table: Geneva wheel (radius C cos(pi/6)) with six slots, and the marking table on top
    R = 60 * math.cos(math.pi / 6)
    table = Shape().cylinder(w + (0, 0, 0), w + (0, 0, 6), R, 48)
    table.cylinder(w + (0, 0, 6), w + (0, 0, 9), 12, 24).cylinder(w + (0, 0, 9), w + (0, 0, 12), 26, 48)
    phi = float(mech.joints["table_spindle"].home[0])  # radians
    for k in range(6):  # slot k points at the crank centre when the wheel is at phi = 0 (turning about -z)
        a = math.pi - phi + k * math.pi / 3
        u = np.array([math.cos(a), math.sin(a), 0.0])
        table.box(w + u * (R + 28) / 2 + (0, 0, 6.5), (R - 28, 6.5, 1.0), u, np.cross((0, 0, 1.0), u))
    mark = np.asarray(mech.measures["station_mark"].a[1], float)
    table.cylinder(mark + (0, 0, 0), mark + (0, 0, 8), 3.0)
    slide = Shape().span((-9, sp[1], 14), (9, sp[1] + 45, 26))
    slide.cylinder(sp + (0, 0, -4.5), sp + (0, 0, 4.5), 5.0)                         # roller
    return {"index_frame": (frame, o, "frame"), "index_driver": (driver, o, "moving"),
            "index_table": (table, w, "second"), "index_marking_slide": (slide, sp, "steel")}


PARTS = {"wagtail_rocker": parts_wagtail, "dipper_pump": parts_dipper, "heron_shaft": parts_heron,
         "heron_twin_shaft": parts_twin, "linnet_vise": parts_vise, "plover_lift": parts_plover,
         "kittiwake_index": parts_kittiwake}
# camera: direction from the scene's middle towards the camera (z up)
VIEWS = {"wagtail_rocker": (0.25, -0.55, 1.0), "dipper_pump": (0.25, -0.55, 1.0),
         "heron_shaft": (0.45, -0.9, 0.75), "heron_twin_shaft": (0.35, -0.9, 0.8),
         "linnet_vise": (0.7, -1.0, 0.6), "plover_lift": (0.55, -1.0, 0.35),
         "kittiwake_index": (0.35, -0.8, 1.0)}
LABELS = {"heron_shaft": "30°", "heron_twin_shaft": "25°"}


# -- the scene ------------------------------------------------------------------------------

def ensure_enabled():
    """Make sure the extension is enabled (after a file or the factory startup was read)."""
    import addon_utils
    import bpy
    if not addon_utils.check(MODULE)[1]:
        bpy.ops.preferences.addon_enable(module=MODULE)
    if not hasattr(bpy.types.Scene, "jointwise"):
        raise SampleError(f"the jointwise extension ({MODULE}) is not enabled")


def _ok(result, what):
    if result != {"FINISHED"}:
        raise SampleError(f"{what} did not finish ({result}); see the messages above")


def _swept_bounds(mech, objs, drive, a, b, home_worlds):
    """Bounding box (2, 3) of all link meshes over the sweep (13 samples)."""
    sw = mech.sweep(drive, np.linspace(a, b, 13))
    pts = []
    for link_name, link in mech.links.items():
        obj = objs.get(link.object)
        if obj is None:
            continue
        corners = np.array([list(c) + [1.0] for c in obj.bound_box]) @ home_worlds[link.object].T
        for i in range(len(sw.values)):
            if not sw.converged[i]:
                continue
            d = sw.links[link_name][i]
            pts.append(corners @ d.T)
    pts = np.concatenate(pts)[:, :3]
    return np.array([pts.min(axis=0), pts.max(axis=0)])


def add_camera(scene, bounds, view, aspect=4 / 3):
    import bpy
    from mathutils import Matrix
    d = _unit(view)
    up = np.array([0, 0, 1.0])
    right = _unit(np.cross(up, d)) if abs(d @ up) < 0.999 else np.array([1.0, 0, 0])
    cam_up = np.cross(d, right)
    centre = bounds.mean(axis=0)
    corners = np.array([[bounds[i][0], bounds[j][1], bounds[k][2]]
                        for i in (0, 1) for j in (0, 1) for k in (0, 1)]) - centre
    w = np.ptp(corners @ right)
    h = np.ptp(corners @ cam_up)
    size = float(np.linalg.norm(bounds[1] - bounds[0]))
    cam = bpy.data.cameras.new("camera")
    cam.type = 'ORTHO'
    cam.ortho_scale = 1.05 * max(w, h * aspect)
    cam.clip_start = 0.01 * size
    cam.clip_end = 10 * size
    obj = bpy.data.objects.new("camera", cam)
    m = np.eye(4)
    m[:3, 0], m[:3, 1], m[:3, 2] = right, cam_up, d
    m[:3, 3] = centre + d * 3 * size
    obj.matrix_world = Matrix(m.tolist())
    scene.collection.objects.link(obj)
    scene.camera = obj
    sun = bpy.data.lights.new("sun", 'SUN')
    sun.energy = 3.0
    lamp = bpy.data.objects.new("sun", sun)
    lm = np.eye(4)
    ld = _unit(view + np.array([0.4, 0.2, 0.8]))
    lr = _unit(np.cross(up, ld)) if abs(ld @ up) < 0.999 else np.array([1.0, 0, 0])
    lm[:3, 0], lm[:3, 1], lm[:3, 2] = lr, np.cross(ld, lr), ld
    lm[:3, 3] = centre + ld * 2 * size
    lamp.matrix_world = Matrix(lm.tolist())
    scene.collection.objects.link(lamp)
    return obj


def setup_render(scene, width=640, height=480):
    import bpy
    scene.render.engine = 'BLENDER_WORKBENCH'
    scene.render.resolution_x, scene.render.resolution_y = width, height
    scene.render.resolution_percentage = 100
    scene.render.film_transparent = False
    shading = scene.display.shading
    shading.light = 'STUDIO'
    shading.color_type = 'MATERIAL'
    shading.show_object_outline = True
    shading.show_cavity = False
    shading.show_shadows = False
    scene.view_settings.view_transform = 'Standard'
    world = bpy.data.worlds.new("workshop")
    world.color = (0.93, 0.93, 0.91)
    scene.world = world
    for screen in bpy.data.screens:  # the file's own layout, for when it is opened
        for area in screen.areas:
            if area.type != 'VIEW_3D':
                continue
            for space in area.spaces:
                if space.type == 'VIEW_3D':
                    space.shading.color_type = 'MATERIAL'
                    space.show_region_ui = True
                    space.clip_start, space.clip_end = 0.1, 100000.0
                    if space.region_3d is not None:
                        space.region_3d.view_perspective = 'CAMERA'


def readme_text(name, drive, a, b, frames):
    lines = ["Fennwick Row Workshop sample: " + name, ""]
    body = [ln for ln in header_lines(name) if not ln.startswith("jointwise checks")
            and not ln.startswith("Local codes")]
    lines += body + [""]
    if name in CAUTIONED:
        lines += ["CAUTION: " + CAUTION, ""]
    lines += [f"Mechanism file: {name}.toml (beside this .blend; the scene was generated from it by "
              f"blend_samples/build.py).",
              f"Timeline: frames {frames[0]}-{frames[1]} hold the baked sweep of {drive} "
              f"from {a:g} to {b:g} deg (link keys, playable without jointwise).",
              f"The value of {drive} is keyed with the same ramp, so Follow Animation and Bake "
              f"Motion reproduce it.",
              "Jointwise tab in the 3D viewport's sidebar: drag a joint value and the linkage "
              "follows at once; drives, Follow Animation, bake, home; the scene is in "
              "millimetres (1 unit = 1 mm)."]
    return "\n".join(lines) + "\n"


def add_label(scene, text, at, parent, material):
    import bpy
    curve = bpy.data.curves.new(f"label {text}", 'FONT')
    curve.body = text
    curve.size = 14.0
    curve.materials.append(material)
    obj = bpy.data.objects.new(f"label {text}", curve)
    obj.location = tuple(at)
    scene.collection.objects.link(obj)
    if parent is not None:
        obj.parent = parent
        obj.matrix_parent_inverse = parent.matrix_world.inverted()
    return obj


def build_scene(name, frames=None, trace=True):
    """Build sample ``name`` in a fresh scene (extension enabled); returns the scene.

    ``frames``: number of frames of the bake (default per sample)."""
    import bpy
    import jointwise
    if name not in PARTS:
        raise SampleError(f"unknown sample {name!r}; samples: {', '.join(SAMPLES)}")
    bpy.ops.wm.read_homefile(use_empty=True, use_factory_startup=True)
    ensure_enabled()
    scene = bpy.context.scene
    scene.name = name
    us = scene.unit_settings
    us.system = 'METRIC'
    us.length_unit = 'MILLIMETERS'
    us.scale_length = 0.001
    mech = jointwise.load(toml_path(name))
    drive, a, b = documented_sweep(name)
    f0, f1 = frame_range(name, frames)
    mats = materials()
    objs = {}
    for oname, (shape, origin, colour) in PARTS[name](mech).items():
        objs[oname] = make_object(scene, oname, shape, origin, mats[colour])
    missing = [l.object for l in mech.links.values() if l.object not in objs]
    if missing:
        raise SampleError(f"{name}: no mesh made for objects {missing}")
    bpy.context.view_layer.update()
    home_worlds = {n: np.array(o.matrix_world, dtype=float) for n, o in objs.items()}
    _ok(bpy.ops.jointwise.mechanism_import(filepath=str(toml_path(name))), f"{name}: import")
    jw = scene.jointwise
    scene.frame_start, scene.frame_end = f0, f1
    scene.render.fps = 24
    # drive value keyed as a linear ramp (radians), then the links baked over it
    i = jw.joints.find(drive)
    ra, rb = math.radians(a), math.radians(b)
    for frame, v in ((f0, ra), (f1, rb)):
        jw.joints[drive].value = v
        scene.keyframe_insert(f"jointwise.joints[{i}].angle", frame=frame)
    from bl_ext.user_default.jointwise import animation as bk  # noqa: E402 (the installed extension)
    for fc in bk.scene_fcurves(scene):
        for kp in fc.keyframe_points:
            kp.interpolation = 'LINEAR'
        fc.update()
    _ok(bpy.ops.jointwise.bake(frame_start=f0, frame_end=f1, drive=drive, value_from=ra, value_to=rb),
        f"{name}: bake")
    if trace:
        for mname, m in mech.measures.items():
            if m.type == "point":
                _ok(bpy.ops.jointwise.trace_add(measure=mname, frame_start=f0, frame_end=f1),
                    f"{name}: trace {mname}")
    scene.frame_set(f0)
    bounds = _swept_bounds(mech, objs, drive, a, b, home_worlds)
    add_camera(scene, bounds, np.asarray(VIEWS[name], float))
    setup_render(scene)
    if name in LABELS:
        ground = objs[mech.links[mech.ground].object]
        c = np.asarray(next(j.point for j in mech.joints.values() if j.type == "universal"), float)
        add_label(scene, LABELS[name], c + np.array([8.0, -28.0, -39.0]), ground, mats["deck"])
    text = bpy.data.texts.new("README")
    text.write(readme_text(name, drive, a, b, (f0, f1)))
    scene["jointwise_sample"] = name
    jw.live = True  # opens ready to drag and to play
    return scene


def save(path):
    """Save the open file to ``path`` (compressed, relative paths), via a temp file."""
    import bpy
    path = pathlib.Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = pathlib.Path(tempfile.mkdtemp(prefix=".build-", dir=path.parent))
    try:
        part = tmp / path.name
        r = bpy.ops.wm.save_as_mainfile(filepath=str(part), compress=True, relative_remap=True)
        _ok(r, f"saving {path.name}")
        os.replace(part, path)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return path


def home_placements(scene):
    """{link: 16 floats (row-major world matrix at home)} stored in the scene."""
    return {link.name: [float(v) for v in link.home] for link in scene.jointwise.links}


def compare_homes(a, b, tol=HOME_TOL):
    """Differences between two home-placement dicts (empty list: the same)."""
    out = []
    for k in sorted(set(a) | set(b)):
        if k not in a or k not in b:
            out.append(f"link {k!r} only in one of them")
            continue
        d = float(np.max(np.abs(np.subtract(a[k], b[k]))))
        if not d <= tol:
            out.append(f"link {k!r}: home differs by {d:.3g}")
    return out


# -- command line ------------------------------------------------------------------------------

def find_zip():
    z = os.environ.get("JOINTWISE_ZIP")
    if z:
        if not pathlib.Path(z).is_file():
            raise SampleError(f"JOINTWISE_ZIP={z!r} is not a file")
        return pathlib.Path(z)
    zips = sorted((ROOT / "dist").glob("jointwise-*.zip"), key=lambda p: p.stat().st_mtime)
    if not zips:
        raise SampleError("no extension zip: run .venv/bin/python addon/package.py "
                          "(or set JOINTWISE_ZIP)")
    return zips[-1]


def isolate_home():
    """Point HOME at a fresh temporary folder (before bpy is imported); returns it."""
    if "bpy" in sys.modules:
        raise SampleError("isolate_home must run before bpy is imported")
    home = tempfile.mkdtemp(prefix="jointwise-home-")
    os.environ["HOME"] = home
    for k in ("BLENDER_USER_CONFIG", "BLENDER_USER_SCRIPTS", "BLENDER_USER_EXTENSIONS"):
        os.environ.pop(k, None)
    return home


def install(zip_path):
    import addon_utils
    import bpy
    r = bpy.ops.extensions.package_install_files(filepath=str(zip_path), repo="user_default",
                                                 enable_on_install=True)
    _ok(r, f"installing {zip_path}")
    if not addon_utils.check(MODULE)[1]:
        raise SampleError(f"{zip_path}: installed but not enabled")


def main(argv=None):
    ap = argparse.ArgumentParser(prog="build.py", description="Build the sample .blend files "
                                 "from their mechanism files.")
    ap.add_argument("names", nargs="*", metavar="NAME", help=f"samples (default: all): {', '.join(SAMPLES)}")
    ap.add_argument("--check", action="store_true",
                    help="rebuild in memory and compare home placements with the committed files")
    args = ap.parse_args(argv)
    names = args.names or list(SAMPLES)
    for n in names:
        if n not in SAMPLES:
            ap.error(f"unknown sample {n!r}; samples: {', '.join(SAMPLES)}")
    home = isolate_home()
    try:
        zip_path = find_zip()
        import bpy
        install(zip_path)
        failed = []
        for n in names:
            scene = build_scene(n)
            if args.check:  # the rebuilt scene stays in memory; nothing is written
                fresh = home_placements(scene)
                if not blend_path(n).exists():
                    raise SampleError(f"{blend_path(n)} does not exist; build it first")
                bpy.ops.wm.open_mainfile(filepath=str(blend_path(n)))
                ensure_enabled()
                diffs = compare_homes(home_placements(bpy.context.scene), fresh)
                print(f"{n}: {'same home placements' if not diffs else '; '.join(diffs)}")
                if diffs:
                    failed.append(n)
            else:
                out = save(blend_path(n))
                print(f"{n}: wrote {out} ({out.stat().st_size // 1024} KB)")
        if failed:
            print(f"build.py --check: {', '.join(failed)} differ from the committed files", file=sys.stderr)
            return 1
        return 0
    except SampleError as exc:
        print(f"build.py: {exc}", file=sys.stderr)
        return 2
    finally:
        shutil.rmtree(home, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
