"""Tidy axes: find loop joints whose axes are nearly, but not exactly, parallel and make them so.

A loop of revolute joints moves in a plane only when its axes are exactly parallel: a
planar four-bar with one pin tilted by a fraction of a degree is, strictly, a spatial
loop of four revolutes, and such a loop is rigid (spatial Kutzbach count
6(n - 1) - 5n = -2 for n = 4; Norton, Design of Machinery, ch. 2).  Modelled or
received geometry is often off by that much, so the mechanism locks.

The model layer already settles axes within ``ASSEMBLY_TOLERANCE`` (drawing noise) when a
file is read; this module finds larger tilts, names the joints, and writes a corrected
file on request (``jointwise tidy``), within an angle tolerance the user chooses.

What is looked at: each loop whose joints are revolute, helical, cylindrical, prismatic or
fixed (loops with spherical, universal or planar joints are spatial by design and left
alone).  Its turning axes are compared with a reference axis: the one most other axes
already agree with exactly (ties: a joint on the ground link, then the file's order).
Slides are compared with the plane normal to that axis (perpendicular, as in a planar
slider-crank) or with the axis itself (parallel, as a nut on a screw), whichever is nearer.
Tilts above ``SPATIAL`` (or the tolerance, if larger) mean a spatial loop by design.

Directions are compared as lines (a reversed axis is not a tilt); a tidied axis keeps
its own sense.
"""
from __future__ import annotations

import json
import math
import os
import re
import tomllib
from dataclasses import dataclass

import numpy as np

from .errors import AssemblyError, SpecError
from .outputs import write_text

__all__ = ["Tilt", "TiltError", "find_tilts", "plan", "tidy_text", "DEFAULT_TOLERANCE_DEG",
           "SPATIAL_DEG"]

#: Default largest tilt ``tidy`` corrects, degrees (our choice: a modelling slip, not a design).
DEFAULT_TOLERANCE_DEG = 2.0
#: Loops with tilts above this (degrees) are taken as spatial by design and left alone.
SPATIAL_DEG = 10.0
#: Below this angle (radians) two lines count as exactly parallel (float noise of unit vectors).
EXACT = 1e-12

_TURNING = ("revolute", "helical", "cylindrical")
_PLANAR_LOOP = _TURNING + ("prismatic", "fixed")


class TiltError(AssemblyError):
    """Some tilt lies beyond the tolerance (the loop stays locked): nothing was changed."""

    def __init__(self, message, tilts=()):
        self.tilts = list(tilts)
        super().__init__(message, joint=self.tilts[0].joint if self.tilts else None)


@dataclass
class Tilt:
    """One joint axis out of line with its loop's reference.

    ``tilt`` in radians; ``relation`` is ``"parallel"`` (to the reference axis) or
    ``"perpendicular"`` (a slide across it); ``axis`` the unit axis now, ``fixed`` the
    unit axis it should have (same sense)."""
    joint: str
    reference: str
    loop: str
    relation: str
    tilt: float
    axis: np.ndarray
    fixed: np.ndarray

    @property
    def degrees(self):
        return math.degrees(self.tilt)

    def describe(self):
        what = "parallel with" if self.relation == "parallel" else "perpendicular to"
        return (f"joint {self.joint}: axis tilted {self.degrees:.3g} deg out of {what} the axis of "
                f"joint {self.reference} (loop closed by {self.loop})")

    def to_json(self):
        return {"joint": self.joint, "reference": self.reference, "loop": self.loop,
                "relation": self.relation, "tilt_deg": self.degrees,
                "axis": [float(x) for x in self.axis], "fixed": [float(x) for x in self.fixed]}


def _unit(v):
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


def _line_angle(a, b):
    """Angle between the lines along unit vectors a and b, 0..pi/2 (atan2: accurate near 0)."""
    return math.atan2(float(np.linalg.norm(np.cross(a, b))), abs(float(np.dot(a, b))))


def file_axes(mech):
    """Each joint's axis as its file gave it (unit vectors), before any settling."""
    out = {}
    for n, j in mech.joints.items():
        raw = j.source.get("axis") if isinstance(getattr(j, "source", None), dict) else None
        out[n] = _unit(raw if raw is not None else j.axis)
    return out


def find_tilts(mech, axes=None, *, limit_deg=SPATIAL_DEG):
    """Loop joints whose axes are out of line by more than :data:`EXACT` and at most
    ``limit_deg`` degrees: a list of :class:`Tilt`, in loop order.

    ``axes``: joint -> direction to judge (default: the axes as the file gave them,
    :func:`file_axes`; pass ``{n: j.axis}`` to judge the axes as settled on reading)."""
    axes = file_axes(mech) if axes is None else {n: _unit(a) for n, a in axes.items()}
    limit = math.radians(limit_deg)
    order = list(mech.joints)
    found, seen = [], set()
    for lp in mech.loops:
        names = []
        for jn, _ in lp.steps:
            if jn not in names:
                names.append(jn)
        if any(mech.joints[jn].type not in _PLANAR_LOOP for jn in names):
            continue
        turning = [jn for jn in names if mech.joints[jn].type in _TURNING]
        slides = [jn for jn in names if mech.joints[jn].type == "prismatic"]
        if not turning:
            continue

        def rank(jn):
            agree = sum(_line_angle(axes[jn], axes[k]) <= EXACT for k in turning)
            j = mech.joints[jn]
            grounded = mech.ground in (j.parent, j.child)
            return (-agree, not grounded, order.index(jn))

        ref = min(turning, key=rank)
        n = axes[ref]
        loop_tilts = []
        for jn in turning:
            if jn == ref:
                continue
            t = _line_angle(axes[jn], n)
            if t > EXACT:
                sign = 1.0 if float(np.dot(axes[jn], n)) >= 0 else -1.0
                loop_tilts.append(Tilt(jn, ref, lp.name, "parallel", t, axes[jn], sign * n))
        for jn in slides:
            a = axes[jn]
            d = float(np.dot(a, n))
            along = _line_angle(a, n)
            across = math.pi / 2 - along
            if along <= across and along > EXACT:
                loop_tilts.append(Tilt(jn, ref, lp.name, "parallel", along, a, math.copysign(1.0, d) * n))
            elif across < along and across > EXACT:
                p = a - d * n
                loop_tilts.append(Tilt(jn, ref, lp.name, "perpendicular", across, a, p / np.linalg.norm(p)))
        if any(t.tilt > limit for t in loop_tilts):
            continue  # a spatial loop by design
        for t in loop_tilts:
            if t.joint not in seen:
                seen.add(t.joint)
                found.append(t)
    return found


def plan(mech, tolerance_deg=DEFAULT_TOLERANCE_DEG):
    """The tilts ``tidy`` would correct; raises :class:`TiltError` (naming every joint
    beyond it) when any tilt exceeds ``tolerance_deg``."""
    if not (isinstance(tolerance_deg, (int, float)) and math.isfinite(tolerance_deg) and tolerance_deg >= 0):
        raise ValueError(f"angle tolerance must be a finite number of degrees >= 0, got {tolerance_deg!r}")
    tilts = find_tilts(mech, limit_deg=max(SPATIAL_DEG, tolerance_deg))
    beyond = [t for t in tilts if t.degrees > tolerance_deg]
    if beyond:
        raise TiltError("; ".join(f"{t.describe()}, beyond the tolerance of {tolerance_deg:g} deg"
                                  for t in beyond) + "; nothing changed (raise --angle-tolerance, or fix "
                                  "the model)", beyond)
    return tilts


# -- writing the corrected file -------------------------------------------------------------

def _number(x):
    """Shortest round-trip text of a number (repr), ints as written."""
    if isinstance(x, bool):
        raise TypeError("not a number")
    if isinstance(x, int):
        return str(x)
    if not math.isfinite(x):
        raise ValueError(f"cannot write a non-finite number ({x})")
    return repr(float(x))


def new_axis(mech, tilt):
    """The corrected axis as it will be written: the reference joint's file axis (its
    own numbers, sense turned to match) for parallel axes; the projected unit vector for
    slides made perpendicular."""
    if tilt.relation == "parallel":
        raw = mech.joints[tilt.reference].source.get("axis", list(tilt.fixed))
        same = float(np.dot(_unit(raw), tilt.fixed)) > 0
        return [v if (same or v == 0) else -v for v in raw]
    return [float(v) + 0.0 for v in tilt.fixed]


_SECTION = re.compile(r"^\s*\[\s*joints\s*\.\s*(?P<name>[A-Za-z0-9_-]+|\"[^\"]*\")\s*\]\s*(#.*)?$")
_ANY_SECTION = re.compile(r"^\s*\[")
_AXIS = re.compile(r"^(?P<lead>\s*axis\s*=\s*)\[[^\]\n]*\](?P<tail>\s*(#.*)?)$")


def _edit_toml(text, new_axes):
    lines = text.splitlines(keepends=True)
    current, done = None, set()
    for i, line in enumerate(lines):
        body = line.rstrip("\r\n")
        m = _SECTION.match(body)
        if m:
            name = m.group("name")
            current = json.loads(name) if name.startswith('"') else name
            continue
        if _ANY_SECTION.match(body):
            current = None
            continue
        if current in new_axes and current not in done:
            a = _AXIS.match(body)
            if a:
                vec = "[" + ", ".join(_number(v) for v in new_axes[current]) + "]"
                lines[i] = a.group("lead") + vec + a.group("tail") + line[len(body):]
                done.add(current)
    return "".join(lines), set(new_axes) - done


def tidy_text(text, mech, tilts, *, fmt="toml", source="<text>"):
    """The file text with the tilted axes corrected, everything else kept as written.

    TOML: each ``axis = [...]`` line of the ``[joints.NAME]`` sections concerned is
    rewritten in place (comments and layout kept); the result is read back and must
    equal the original data with just those axes changed, or :class:`SpecError` says
    which joint could not be edited.  JSON: the data is written again (2-space indent)."""
    new_axes = {t.joint: new_axis(mech, t) for t in tilts}
    if fmt == "json":
        data = json.loads(text)
        for jn, ax in new_axes.items():
            data["joints"][jn]["axis"] = ax
        return json.dumps(data, indent=2) + "\n"
    out, missed = _edit_toml(text, new_axes)
    want = tomllib.loads(text)
    for jn, ax in new_axes.items():
        want["joints"][jn]["axis"] = ax
    if missed or tomllib.loads(out) != want:
        jn = sorted(missed)[0] if missed else sorted(new_axes)[0]
        raise SpecError("cannot edit this axis in place: write it as a line `axis = [x, y, z]` inside a "
                        f"[joints.{jn}] section, or set it by hand to {new_axes[jn]}",
                        source=source, key=f"joints.{jn}.axis")
    return out


def tidy_file(path, out, tolerance_deg=DEFAULT_TOLERANCE_DEG, mech=None):
    """Read ``path``, correct its tilted axes within ``tolerance_deg`` and write ``out``
    atomically.  Returns ``(tilts, mechanism as written)``.

    Raises :class:`SpecError` (bad file, cannot write) or :class:`TiltError` (beyond the
    tolerance); in both cases ``out`` is not touched."""
    from .mechanism import load, loads
    mech = load(path) if mech is None else mech
    name = os.path.basename(str(path))
    fmt = "json" if name.lower().endswith(".json") else "toml"
    out_fmt = "json" if str(out).lower().endswith(".json") else "toml"
    if out_fmt != fmt:
        raise SpecError(f"{name} is {fmt.upper()}; write the tidied file as {fmt.upper()} too "
                        f"(a name ending .{fmt})", key="--out")
    tilts = plan(mech, tolerance_deg)
    with open(path, "rb") as fh:
        text = fh.read().decode("utf-8")
    new = tidy_text(text, mech, tilts, fmt=fmt, source=name) if tilts else text
    fixed = loads(new, source=os.path.basename(str(out)), fmt=fmt)
    left = find_tilts(fixed, limit_deg=max(SPATIAL_DEG, tolerance_deg))
    if left:  # pragma: no cover - a guard: the written file must be tidy
        raise SpecError(f"tidying left {left[0].describe()}", source=name)
    write_text(out, new)
    return tilts, fixed
