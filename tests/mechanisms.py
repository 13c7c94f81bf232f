"""Shared helpers that build mechanism files for the tests and benchmarks.

Every builder returns the mechanism-file structure as a plain dict (the Interface of
issue 2); :func:`write` stores it as TOML (own tiny writer, the stdlib has none) or
JSON.  Geometry comes from closed-form positions (circle intersections, right
triangles), never from jointwise itself, so tests compare the core against formulas.

The demo names belong to an invented workshop, "Harrow & Finch Bench Works", and its
invented products (the HF-3 bench vise, the Kestrel scissor table, ...).  All numbers
here are invented demo data.

Conventions used by the planar builders: the mechanism lies in the xy plane, every
revolute axis is +z, angles are in degrees and measured counter-clockwise from +x.
"""
from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

__all__ = [
    "run_cli", "no_traceback", "JOINTWISE", "write", "dumps_toml", "base", "revolute", "four_bar_positions", "four_bar",
    "slider_crank", "slider_position", "hooke", "five_bar", "watt_six_bar",
    "stephenson_six_bar", "screw_jaw", "scissor_stack", "four_bar_chain",
    "serial_chain", "branching_tree", "gear_pair", "grashof",
]


# -- running the real console script ----------------------------------------------------------
#: The installed console script next to the interpreter running the tests (.venv/bin/jointwise).
JOINTWISE = Path(sys.executable).parent / "jointwise"


class Run:
    def __init__(self, proc):
        self.code = proc.returncode
        self.out = proc.stdout
        self.err = proc.stderr

    def json(self):
        return json.loads(self.out)

    def __repr__(self):
        return f"Run(code={self.code}, out={self.out[:300]!r}, err={self.err[:300]!r})"


def run_cli(*args, cwd=None):
    """Run ``jointwise ARGS`` as a subprocess (no network, no stdin)."""
    cmd = [str(JOINTWISE)] if JOINTWISE.exists() else [sys.executable, "-m", "jointwise.cli"]
    env = dict(os.environ)
    env.pop("PYTHONPATH", None)
    proc = subprocess.run(cmd + [str(a) for a in args], capture_output=True, text=True,
                          stdin=subprocess.DEVNULL, cwd=cwd, env=env, timeout=120)
    return Run(proc)


def no_traceback(run):
    assert "Traceback" not in run.err, run.err
    assert "Traceback" not in run.out, run.out


# -- writing ----------------------------------------------------------------------------
def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)  # a TOML basic string for the plain text used here
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {v!r} as TOML")


def dumps_toml(data):
    """TOML text of the two-level mechanism structure (top scalars, tables of tables)."""
    lines = []
    for k, v in data.items():
        if not isinstance(v, dict):
            lines.append(f"{k} = {_toml_value(v)}")
    for k, v in data.items():
        if not isinstance(v, dict):
            continue
        scalars = {kk: vv for kk, vv in v.items() if not isinstance(vv, dict)}
        subs = {kk: vv for kk, vv in v.items() if isinstance(vv, dict)}
        if scalars or not subs:
            lines.append(f"\n[{k}]")
            lines.extend(f"{kk} = {_toml_value(vv)}" for kk, vv in scalars.items())
        for name, table in subs.items():
            lines.append(f"\n[{k}.{name}]")
            for kk, vv in table.items():
                lines.append(f"{kk} = {_toml_value(vv)}")
    return "\n".join(lines) + "\n"


def write(data, path):
    """Write ``data`` to ``path`` as TOML or JSON (by suffix); returns the path."""
    path = Path(path)
    if path.suffix.lower() == ".json":
        path.write_text(json.dumps(data, indent=1), encoding="utf-8")
    else:
        path.write_text(dumps_toml(data), encoding="utf-8")
    return path


# -- building blocks ------------------------------------------------------------------------
def base(name, ground="frame", links=(), length_unit="mm", angle_unit="deg"):
    return {
        "format": 1,
        "mechanism": {"name": name, "length_unit": length_unit, "angle_unit": angle_unit,
                      "ground": ground},
        "links": {ln: {} for ln in [ground, *links]},
        "joints": {},
    }


def revolute(parent, child, point, axis=(0, 0, 1), home=0.0, **extra):
    j = {"type": "revolute", "parent": parent, "child": child,
         "point": [float(c) for c in (list(point) + [0.0])[:3]], "axis": [float(c) for c in axis],
         "home": float(home)}
    j.update(extra)
    return j


def _pt(x, y):
    return [float(x), float(y), 0.0]


# -- four-bar -------------------------------------------------------------------------------
def grashof(a, b, c, d):
    """Grashof's rule (s + l <= p + q) and whether the input crank ``a`` turns fully.

    Classical statement (any machine-design text): a four-bar has a link that turns
    fully relative to the others iff s + l <= p + q; the input link adjacent to ground
    turns fully relative to ground iff Grashof and the shortest link is the crank or
    the ground.  Equality (change point) is left to the caller to avoid.
    """
    lengths = sorted([a, b, c, d])
    s, p, q, l = lengths
    is_grashof = s + l <= p + q
    shortest = min(a, b, c, d)
    crank_turns = is_grashof and (a == shortest or d == shortest)
    return is_grashof, crank_turns


def four_bar_positions(a, b, c, d, theta2_deg, branch="open"):
    """Joint points of a four-bar by circle intersection, or None if it cannot close.

    Ground pivots O2 = (0, 0) and O4 = (d, 0); crank O2A = a at angle theta2; coupler
    AB = b; rocker O4B = c.  ``branch``: "open" takes the intersection with
    cross(B - A, O4 - B) < 0 (the convex quadrilateral O2-A-B-O4 when drawn above the
    ground line), "crossed" the mirror one.  Returns (A, B, theta4_deg) with theta4
    the rocker's direction angle O4 -> B.
    """
    t = math.radians(theta2_deg)
    ax, ay = a * math.cos(t), a * math.sin(t)
    # circle (A, b) and circle (O4, c)
    dx, dy = d - ax, -ay
    e = math.hypot(dx, dy)
    if e > b + c or e < abs(b - c) or e == 0:
        return None
    along = (b * b - c * c + e * e) / (2 * e)
    h = math.sqrt(max(b * b - along * along, 0.0))
    mx, my = ax + along * dx / e, ay + along * dy / e
    cands = [(mx + h * dy / e, my - h * dx / e), (mx - h * dy / e, my + h * dx / e)]
    out = {}
    for bx, by in cands:
        cross = (bx - ax) * (-by) - (by - ay) * (d - bx)
        out["open" if cross < 0 else "crossed"] = (bx, by)
    if branch not in out:
        return None
    bx, by = out[branch]
    th4 = math.degrees(math.atan2(by, bx - d))
    return (ax, ay), (bx, by), th4


def four_bar(a, b, c, d, theta2_deg=60.0, branch="open", name="HF four-bar", drive=True,
             rocker_limits=None):
    """A planar four-bar built at crank angle theta2 on the given branch.

    Coordinates: ``crank`` (= theta2, absolute), ``rocker`` (= theta4, absolute
    direction of O4 -> B), ``pin_a``, ``pin_b`` (relative angles, 0 at home).
    """
    pos = four_bar_positions(a, b, c, d, theta2_deg, branch)
    if pos is None:
        raise ValueError("four-bar does not close at that crank angle")
    (ax, ay), (bx, by), th4 = pos
    m = base(name, links=["crank_arm", "coupler", "rocker_arm"])
    j = m["joints"]
    j["crank"] = revolute("frame", "crank_arm", (0, 0), home=theta2_deg, drive=drive)
    j["pin_a"] = revolute("crank_arm", "coupler", (ax, ay))
    j["pin_b"] = revolute("coupler", "rocker_arm", (bx, by))
    j["rocker"] = revolute("frame", "rocker_arm", (d, 0), home=th4)
    if rocker_limits is not None:
        j["rocker"]["limits"] = [float(x) for x in rocker_limits]
    return m


def four_bar_chain(k, a=1.0, b=3.0, c=2.5, d=3.0, theta2_deg=60.0, spacing=10.0):
    """K independent four-bars on one frame, each with its own driven crank ``crank_i``."""
    pos = four_bar_positions(a, b, c, d, theta2_deg)
    (ax, ay), (bx, by), th4 = pos
    m = base(f"{k} independent four-bars")
    for i in range(k):
        ox = i * spacing
        for ln in (f"crank_arm{i}", f"coupler{i}", f"rocker_arm{i}"):
            m["links"][ln] = {}
        j = m["joints"]
        j[f"crank{i}"] = revolute("frame", f"crank_arm{i}", (ox, 0), home=theta2_deg, drive=True)
        j[f"pin_a{i}"] = revolute(f"crank_arm{i}", f"coupler{i}", (ox + ax, ay))
        j[f"pin_b{i}"] = revolute(f"coupler{i}", f"rocker_arm{i}", (ox + bx, by))
        j[f"rocker{i}"] = revolute("frame", f"rocker_arm{i}", (ox + d, 0), home=th4)
    return m


# -- slider-crank ------------------------------------------------------------------------------
def slider_position(r, l, e, theta_deg):
    """Closed-form slider displacement x = r cos t + sqrt(l^2 - (r sin t - e)^2).

    Crank of radius r about the origin, connecting rod l, slider on the line y = e
    (offset e), moving along x.  Any machine-design text (slider-crank kinematics).
    """
    t = math.radians(theta_deg)
    return r * math.cos(t) + math.sqrt(l * l - (r * math.sin(t) - e) ** 2)


def slider_crank(r, l, e=0.0, theta_deg=40.0, name="HF press slider-crank", drive="crank"):
    """Slider-crank at crank angle theta; coordinate ``slide`` equals the slider's x."""
    t = math.radians(theta_deg)
    ax, ay = r * math.cos(t), r * math.sin(t)
    x = slider_position(r, l, e, theta_deg)
    m = base(name, links=["crank_arm", "rod", "slider"])
    j = m["joints"]
    j["crank"] = revolute("frame", "crank_arm", (0, 0), home=theta_deg, drive=(drive == "crank"))
    j["big_end"] = revolute("crank_arm", "rod", (ax, ay))
    j["wrist"] = revolute("rod", "slider", (x, e))
    j["slide"] = {"type": "prismatic", "parent": "frame", "child": "slider",
                  "point": _pt(x, e), "axis": [1.0, 0.0, 0.0], "home": float(x),
                  "drive": drive == "slide"}
    return m


# -- Hooke's joint ------------------------------------------------------------------------------
def hooke(beta_deg=30.0, name="HF angled drive"):
    """Input shaft along x, output shaft at angle beta in the xy plane, cross at the origin.

    The input yoke's arm (``axis``) is z, normal to the shafts' plane at home; the
    output yoke's arm (``axis2``) is z x u, perpendicular to the output shaft u.
    """
    b = math.radians(beta_deg)
    u = [math.cos(b), math.sin(b), 0.0]
    m = base(name, links=["shaft_in", "shaft_out"])
    j = m["joints"]
    j["input"] = revolute("frame", "shaft_in", (0, 0), axis=(1, 0, 0), drive=True)
    j["cross"] = {"type": "universal", "parent": "shaft_in", "child": "shaft_out",
                  "point": [0.0, 0.0, 0.0], "axis": [0.0, 0.0, 1.0],
                  "axis2": [-math.sin(b), math.cos(b), 0.0]}
    j["output"] = revolute("frame", "shaft_out", (0, 0), axis=u)
    return m


# -- multi-loop planar linkages -------------------------------------------------------------------
def five_bar(name="HF plotter five-bar"):
    """Five-bar: ground pivots P0, P4; links l1, l2, l3, l4; 5 revolutes, one loop."""
    m = base(name, links=["l1", "l2", "l3", "l4"])
    j = m["joints"]
    j["j0"] = revolute("frame", "l1", (0, 0), drive=True)
    j["j1"] = revolute("l1", "l2", (0.5, 2.0))
    j["j2"] = revolute("l2", "l3", (2.0, 3.1))
    j["j3"] = revolute("l3", "l4", (3.6, 2.2))
    j["j4"] = revolute("frame", "l4", (4.0, 0.0), drive=True)
    return m


def watt_six_bar(name="HF Watt six-bar"):
    """Watt chain: ternary links ``frame`` and ``tri`` joined directly; two four-loops."""
    m = base(name, links=["tri", "c", "d", "e", "f"])
    j = m["joints"]
    # loop 1: frame - c - d - tri - frame ; loop 2: frame - e - f - tri - frame
    j["ft"] = revolute("frame", "tri", (0.0, 0.0), drive=True)
    j["fc"] = revolute("frame", "c", (4.0, 0.3))
    j["cd"] = revolute("c", "d", (4.6, 2.9))
    j["dt"] = revolute("d", "tri", (1.1, 2.4))
    j["fe"] = revolute("frame", "e", (-3.5, 0.4))
    j["ef"] = revolute("e", "f", (-3.0, 3.3))
    j["ft2"] = revolute("f", "tri", (-0.8, 2.7))
    return m


def stephenson_six_bar(name="HF Stephenson six-bar"):
    """Stephenson chain: ternaries ``frame`` and ``tri`` not adjacent (paths 1, 1, 2 binaries)."""
    m = base(name, links=["tri", "c", "d", "e", "f"])
    j = m["joints"]
    # frame: c, d, e ; tri: c, d, f ; e-f
    j["fc"] = revolute("frame", "c", (0.0, 0.0), drive=True)
    j["fd"] = revolute("frame", "d", (4.0, 0.0))
    j["fe"] = revolute("frame", "e", (7.5, 0.5))
    j["ct"] = revolute("c", "tri", (0.9, 2.6))
    j["dt"] = revolute("d", "tri", (3.7, 2.9))
    j["ft"] = revolute("f", "tri", (5.0, 4.6))
    j["ef"] = revolute("e", "f", (8.1, 3.9))
    return m


# -- screw-driven jaw -------------------------------------------------------------------------------
def screw_jaw(lead=None, thread="Tr16x4", hand="right", name="HF-3 bench vise"):
    """Vise: screw turns in the frame (revolute), its thread drives the jaw (helical),
    the jaw slides in the frame (prismatic); all coaxial along x."""
    m = base(name, links=["screw", "jaw"])
    j = m["joints"]
    j["spindle"] = revolute("frame", "screw", (0, 0), axis=(1, 0, 0), drive=True)
    hel = {"type": "helical", "parent": "screw", "child": "jaw", "point": [0.0, 0.0, 0.0],
           "axis": [1.0, 0.0, 0.0], "hand": hand}
    if lead is not None:
        hel["lead"] = float(lead)
    else:
        hel["thread"] = thread
    j["nut"] = hel
    j["way"] = {"type": "prismatic", "parent": "frame", "child": "jaw", "point": [0.0, 0.0, 0.0],
                "axis": [1.0, 0.0, 0.0]}
    return m


# -- scissor stack --------------------------------------------------------------------------------
def scissor_stack(stages, width=400.0, height=120.0, name="Kestrel scissor table"):
    """Planar scissor lift of ``stages`` stages: bars L_k (0,kh)->(w,(k+1)h) and
    R_k (w,kh)->(0,(k+1)h) crossing at their middles; L_0 pinned to the frame, R_0 to a
    block sliding along x (``slide``, the drive).  One loop per stage, mobility 1."""
    w, h = width, height
    links = ["block"] + [f"L{k}" for k in range(stages)] + [f"R{k}" for k in range(stages)]
    m = base(f"{name} ({stages} stages)", links=links)
    j = m["joints"]
    j["foot"] = revolute("frame", "L0", (0, 0))
    j["slide"] = {"type": "prismatic", "parent": "frame", "child": "block", "point": _pt(w, 0),
                  "axis": [1.0, 0.0, 0.0], "home": float(w), "drive": True}
    j["roller"] = revolute("block", "R0", (w, 0))
    for k in range(stages):
        j[f"mid{k}"] = revolute(f"L{k}", f"R{k}", (w / 2, (k + 0.5) * h))
        if k + 1 < stages:
            j[f"right{k}"] = revolute(f"L{k}", f"R{k + 1}", (w, (k + 1) * h))
            j[f"left{k}"] = revolute(f"R{k}", f"L{k + 1}", (0, (k + 1) * h))
    return m


# -- open chains and trees -------------------------------------------------------------------------
_AXES = [(0, 0, 1), (0, 1, 0), (1, 0, 0), (0, 1, 1), (1, 0, 1), (1, 1, 0)]


def serial_chain(n, name="HF arm"):
    """Open chain of ``n`` revolutes with varying axes, joint k at (k, 0.1 k, 0.05 k^0.5)."""
    m = base(name, links=[f"s{k}" for k in range(n)])
    prev = "frame"
    for k in range(n):
        m["joints"][f"q{k}"] = revolute(prev, f"s{k}", (float(k), 0.1 * k, 0.05 * math.sqrt(k)),
                                        axis=_AXES[k % len(_AXES)])
        prev = f"s{k}"
    return m


def branching_tree(n, name="HF tree"):
    """Binary tree of ``n`` joints: joint k joins link of joint (k-1)//2 (or the frame)."""
    m = base(name, links=[f"t{k}" for k in range(n)])
    for k in range(n):
        parent = "frame" if k == 0 else f"t{(k - 1) // 2}"
        depth = int(math.log2(k + 1))
        m["joints"][f"q{k}"] = revolute(parent, f"t{k}", (float(depth), float(k % 7) * 0.3, 0.1 * k),
                                        axis=_AXES[(k * 5) % len(_AXES)])
    return m


def gear_pair(z1=18, z2=42, offset=0.0, name="HF gearbox"):
    """Two gears on frame pivots, coupled ``wheel = -z1/z2 * pinion + offset`` (consistent at home)."""
    m = base(name, links=["pinion", "wheel"])
    j = m["joints"]
    j["pinion"] = revolute("frame", "pinion", (0, 0), drive=True)
    j["wheel"] = revolute("frame", "wheel", (30, 0), home=offset)
    m["couplings"] = {"mesh": {"leader": "pinion", "follower": "wheel",
                               "ratio": -z1 / z2, "offset": float(offset)}}
    return m


#: Ball B of the RSSR at home: on the rocker's circle (radius 3 about x through (0, 6, 1))
#: at distance 6 from ball A = (2, 0, 0), so that the crank turns fully.
RSSR_B0 = (0.0, 6 + 3 * math.sin(-0.5588374901659106), 1 + 3 * math.cos(-0.5588374901659106))


def rssr(name="HF spatial crank"):
    """Spatial RSSR four-bar: crank about z at the origin, rocker about x at (0, 6, 1),
    a coupler with ball joints at both ends.  Kutzbach 6*3 - (5+3+3+5) = 2: one input
    plus the coupler's idle spin about its own line."""
    m = base(name, links=["crank_arm", "coupler", "rocker_arm"])
    j = m["joints"]
    j["crank"] = revolute("frame", "crank_arm", (0, 0), axis=(0, 0, 1), drive=True)
    j["ball_a"] = {"type": "spherical", "parent": "crank_arm", "child": "coupler",
                   "point": [2.0, 0.0, 0.0], "axis": [0.0, 0.0, 1.0]}
    j["ball_b"] = {"type": "spherical", "parent": "coupler", "child": "rocker_arm",
                   "point": list(RSSR_B0), "axis": [0.0, 0.0, 1.0]}
    j["rocker"] = revolute("frame", "rocker_arm", (0, 6, 1), axis=(1, 0, 0))
    return m
