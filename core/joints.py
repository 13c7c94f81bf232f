"""Joint types as ordered chains of one-degree-of-freedom screw primitives, and thread presets.

A joint joins a parent link to a child link.  At home every coordinate equals its
``home`` value and the joint's point and axis are given in world coordinates.  The
child's displacement relative to the parent is the product of exponentials of the
joint's primitives, in the order listed (space form):

    E(q) = exp([S_1](q_1 - h_1)) exp([S_2](q_2 - h_2)) ...

Each primitive is a unit screw at home: a revolute turn (pitch 0), a slide (pure
translation) or a helical motion (pitch = lead / 2 pi per radian).  Inside the
core, angles are radians and lengths are in the mechanism's length unit.

Compound joints and the order of their coordinates (``NAME.1``, ``NAME.2``, ...):

========== ===================================================================
cylindrical turn about the axis, slide along it
universal   turn about ``axis`` (fixed in the parent), turn about ``axis2``
            (fixed in the child); the axes meet at ``point``, perpendicular
spherical   three turns about ``axis``, ``b``, ``c`` (an orthonormal frame built
            from ``axis``) through ``point``; the solver moves a free spherical
            joint by rotation increments, so it keeps all three freedoms at any
            orientation, and reads the three turns back out (intrinsic a-b-c)
planar      slide along ``u``, slide along ``w`` (two in-plane directions), turn
            about the normal ``axis`` through ``point``
fixed       no coordinate
========== ===================================================================

References: Lynch & Park, *Modern Robotics* (2017) sec. 4.1 (product of
exponentials, space form); thread data from memory of ISO 261 (coarse pitches)
and ISO 2904 / ISO 2902 (trapezoidal screw threads).
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from . import spatial
from .errors import JointwiseError

__all__ = ["Primitive", "Joint", "JOINT_TYPES", "ISO261_COARSE", "ISO2902_TRAPEZOIDAL",
           "thread_lead", "lead_from_angle", "lead_angle_of"]

#: Joint types and the kinds of their coordinates, in order.
JOINT_TYPES = {
    "revolute": ("angle",),
    "prismatic": ("length",),
    "helical": ("angle",),
    "cylindrical": ("angle", "length"),
    "universal": ("angle", "angle"),
    "spherical": ("angle", "angle", "angle"),
    "planar": ("length", "length", "angle"),
    "fixed": (),
}

#: ISO 261 coarse pitch (mm) by nominal diameter (mm), M3-M24 (from memory of the standard).
ISO261_COARSE = {
    3: 0.5, 3.5: 0.6, 4: 0.7, 5: 0.8, 6: 1.0, 7: 1.0, 8: 1.25, 10: 1.5, 12: 1.75,
    14: 2.0, 16: 2.0, 18: 2.5, 20: 2.5, 22: 2.5, 24: 3.0,
}

#: ISO 2902 pitches (mm) of ISO 2904 trapezoidal threads by nominal diameter (mm);
#: the first is the preferred one (from memory of the standards).
ISO2902_TRAPEZOIDAL = {
    8: (1.5,), 9: (2, 1.5), 10: (2, 1.5), 11: (2, 3), 12: (3, 2), 14: (3, 2),
    16: (4, 2), 18: (4, 2), 20: (4, 2), 22: (5, 3, 8), 24: (5, 3, 8),
    26: (5, 3, 8), 28: (5, 3, 8), 30: (6, 3, 10), 32: (6, 3, 10), 36: (6, 3, 10),
    40: (7, 3, 10), 44: (7, 3, 12), 48: (8, 3, 12), 50: (8, 3, 12),
}

_METRIC = re.compile(r"^M(\d+(?:\.\d+)?)(?:x(\d+(?:\.\d+)?))?$")
_TRAP = re.compile(r"^Tr(\d+)x(\d+(?:\.\d+)?)(?:\(P(\d+(?:\.\d+)?)\))?$")


def _num(text):
    v = float(text)
    return int(v) if v.is_integer() else v


def thread_lead(name):
    """Lead, pitch, starts and nominal diameter (all mm) of a thread designation.

    ``"M10"`` (ISO 261 coarse), ``"M10x1.25"`` (explicit pitch), ``"Tr16x4"``
    (ISO 2904 single start), ``"Tr16x8(P4)"`` (two starts: lead 8, pitch 4).

    Returns
    -------
    dict with keys ``lead``, ``pitch``, ``starts``, ``diameter``.
    """
    text = str(name).strip()
    m = _METRIC.match(text)
    if m:
        d = _num(m.group(1))
        if m.group(2):
            pitch = float(m.group(2))
        elif d in ISO261_COARSE:
            pitch = ISO261_COARSE[d]
        else:
            sizes = ", ".join(f"M{k}" for k in ISO261_COARSE)
            raise JointwiseError(f"unknown metric thread {text!r}; coarse sizes known: {sizes}")
        return {"lead": pitch, "pitch": pitch, "starts": 1, "diameter": float(d)}
    m = _TRAP.match(text)
    if m:
        d = int(m.group(1))
        lead = float(m.group(2))
        pitch = float(m.group(3)) if m.group(3) else lead
        if d not in ISO2902_TRAPEZOIDAL:
            sizes = ", ".join(f"Tr{k}" for k in ISO2902_TRAPEZOIDAL)
            raise JointwiseError(f"unknown trapezoidal thread {text!r}; diameters known: {sizes}")
        allowed = ISO2902_TRAPEZOIDAL[d]
        if pitch not in allowed:
            opts = ", ".join(f"Tr{d}x{_num(p)}" for p in allowed)
            raise JointwiseError(f"{text!r}: pitch {_num(pitch)} is not an ISO 2902 pitch for Tr{d}; use {opts}")
        starts = lead / pitch
        if abs(starts - round(starts)) > 1e-9 or round(starts) < 1:
            raise JointwiseError(f"{text!r}: lead {_num(lead)} is not a whole number of pitches {_num(pitch)}")
        return {"lead": lead, "pitch": pitch, "starts": int(round(starts)), "diameter": float(d)}
    raise JointwiseError(f"unknown thread designation {text!r}; expected e.g. 'M10', 'M10x1.25', 'Tr16x4' or 'Tr16x8(P4)'")


def lead_from_angle(lead_angle, diameter):
    """Lead L of a thread with lead angle (radians) at diameter d: tan(lambda) = L / (pi d)."""
    return math.pi * diameter * math.tan(lead_angle)


def lead_angle_of(lead, diameter):
    """Lead angle (radians) of lead L at diameter d: atan(L / (pi d))."""
    return math.atan2(lead, math.pi * diameter)


def _perpendicular(a):
    """A unit vector perpendicular to unit ``a``, chosen deterministically."""
    helper = np.eye(3)[int(np.argmin(np.abs(a)))]
    b = np.cross(a, helper)
    return b / np.linalg.norm(b)


@dataclass
class Primitive:
    """One-degree-of-freedom screw at home: ``screw`` (unit, world), coordinate ``kind``."""
    screw: np.ndarray
    kind: str  # "angle" or "length"


@dataclass
class Joint:
    """A joint between ``parent`` and ``child`` as a chain of screw primitives.

    ``home``, ``limits`` are in internal units (radians, length unit), one entry per
    coordinate.  ``lead`` (length per turn, signed by hand) only for helical joints.
    """
    name: str
    type: str
    parent: str
    child: str
    point: np.ndarray
    axis: np.ndarray
    axis2: np.ndarray | None = None
    home: np.ndarray = field(default_factory=lambda: np.zeros(0))
    limits: list = field(default_factory=list)  # per coordinate: (lo, hi) or None
    drive: bool = False
    lead: float = 0.0
    source: dict = field(default_factory=dict)  # the file's own keys, for export
    primitives: list = field(default_factory=list)
    frame: np.ndarray | None = None  # spherical: columns a, b, c

    def __post_init__(self):
        self.point = np.asarray(self.point, dtype=float)
        a = np.asarray(self.axis, dtype=float)
        n = np.linalg.norm(a)
        if not n > 1e-12:
            raise JointwiseError("axis has zero length")
        self.axis = a / n
        if self.axis2 is not None:
            b = np.asarray(self.axis2, dtype=float)
            nb = np.linalg.norm(b)
            if not nb > 1e-12:
                raise JointwiseError("axis2 has zero length")
            self.axis2 = b / nb
        self.primitives = self._build()
        nc = len(self.primitives)
        self.home = np.zeros(nc) if len(self.home) == 0 else np.asarray(self.home, dtype=float)
        if not self.limits:
            self.limits = [None] * nc

    # -- structure -------------------------------------------------------------
    @property
    def kinds(self):
        """Kinds of the coordinates: a helical joint with a 90 deg lead angle is a slide."""
        if self.type == "helical" and abs(self.lead) == math.inf:
            return ("length",)
        return JOINT_TYPES[self.type]

    @property
    def coordinates(self):
        """Coordinate names: the joint's name for one coordinate, NAME.1, NAME.2, ... else."""
        n = len(self.kinds)
        if n == 1:
            return [self.name]
        return [f"{self.name}.{i + 1}" for i in range(n)]

    def _build(self):
        a, q = self.axis, self.point
        t = self.type
        if t == "revolute":
            return [Primitive(spatial.screw_axis(q, a), "angle")]
        if t == "prismatic":
            return [Primitive(spatial.screw_axis(q, a, math.inf), "length")]
        if t == "helical":
            if abs(self.lead) == math.inf:
                return [Primitive(spatial.screw_axis(q, a, math.inf), "length")]
            return [Primitive(spatial.screw_axis(q, a, self.lead / (2 * math.pi)), "angle")]
        if t == "cylindrical":
            return [Primitive(spatial.screw_axis(q, a), "angle"),
                    Primitive(spatial.screw_axis(q, a, math.inf), "length")]
        if t == "universal":
            if self.axis2 is None:
                raise JointwiseError("universal joint needs axis2 (the cross arm fixed in the child)")
            if abs(np.dot(a, self.axis2)) > 1e-6:
                ang = math.degrees(math.acos(min(1.0, abs(float(np.dot(a, self.axis2))))))
                raise JointwiseError(f"axis and axis2 must be perpendicular at home; they are {ang:.4g} deg apart")
            return [Primitive(spatial.screw_axis(q, a), "angle"),
                    Primitive(spatial.screw_axis(q, self.axis2), "angle")]
        if t == "spherical":
            b = self._inplane_first(a)
            c = np.cross(a, b)
            self.frame = np.stack([a, b, c], axis=1)
            return [Primitive(spatial.screw_axis(q, d), "angle") for d in (a, b, c)]
        if t == "planar":
            u = self._inplane_first(a)
            w = np.cross(a, u)
            return [Primitive(spatial.screw_axis(q, u, math.inf), "length"),
                    Primitive(spatial.screw_axis(q, w, math.inf), "length"),
                    Primitive(spatial.screw_axis(q, a), "angle")]
        if t == "fixed":
            return []
        raise JointwiseError(f"unknown joint type {t!r}")

    def _inplane_first(self, a):
        """First in-plane direction: axis2 projected off ``a`` if given, else a fixed choice."""
        if self.axis2 is not None:
            b = self.axis2 - np.dot(self.axis2, a) * a
            nb = np.linalg.norm(b)
            if nb < 1e-9:
                raise JointwiseError("axis2 must not be parallel to axis")
            return b / nb
        return _perpendicular(a)

    # -- motion ------------------------------------------------------------------
    @property
    def screws(self):
        """Home screws of the primitives, shape (n, 6)."""
        if not self.primitives:
            return np.zeros((0, 6))
        return np.stack([p.screw for p in self.primitives])

    def transform(self, q):
        """Displacement of the child relative to the parent, 4x4, for coordinates ``q``."""
        out = np.eye(4)
        for prim, qi, hi in zip(self.primitives, q, self.home):
            out = out @ spatial.exp6(prim.screw, qi - hi)
        return out

    def partials(self, q):
        """Transform and the primitive twists in the frame before the joint.

        Returns ``(E, X)`` where ``X[k] = Ad(prefix_k) S_k`` (shape (n, 6)): the twist
        of the child relative to the parent per unit of coordinate ``k``, expressed
        in the parent's home-aligned world frame.
        """
        n = len(self.primitives)
        cols = np.zeros((n, 6))
        acc = np.eye(4)
        for k, (prim, qi, hi) in enumerate(zip(self.primitives, q, self.home)):
            cols[k] = prim.screw if k == 0 else spatial.adjoint(acc) @ prim.screw
            acc = acc @ spatial.exp6(prim.screw, qi - hi)
        return acc, cols

    # -- spherical joints by rotation increments -----------------------------------
    def rotation_twists(self):
        """Three unit rotation twists about world x, y, z through the joint point (home)."""
        q = self.point
        return np.stack([spatial.screw_axis(q, e) for e in np.eye(3)])

    def coordinates_from_transform(self, e, near=None):
        """Spherical coordinates (a-b-c turns, radians) reproducing displacement ``e``.

        ``e``: a 4x4 displacement or 3x3 rotation, or stacks of them (..., 4, 4).  With
        ``near`` (the previous coordinates), each turn is taken within half a turn of it,
        so that coordinates run on continuously instead of wrapping at 180 deg."""
        f = self.frame
        r = f.T @ np.asarray(e, dtype=float)[..., :3, :3] @ f  # = Rx(d1) Ry(d2) Rz(d3)
        lock = np.hypot(r[..., 1, 2], r[..., 2, 2]) <= 1e-15  # exact gimbal lock: all on d1
        d1 = np.where(lock, np.arctan2(r[..., 2, 1], r[..., 1, 1]), np.arctan2(-r[..., 1, 2], r[..., 2, 2]))
        # remove the first turn, then read the other two from what is left, so that the
        # three always reproduce the rotation (also next to the lock):
        # Rx(d1)^T r = Ry(d2) Rz(d3); its rows 0 and 2 give d2, row 1 gives d3
        c1, s1 = np.cos(d1)[..., None], np.sin(d1)[..., None]
        rest1 = c1 * r[..., 1, :] + s1 * r[..., 2, :]
        rest2 = -s1 * r[..., 1, :] + c1 * r[..., 2, :]
        d2 = np.arctan2(r[..., 0, 2], rest2[..., 2])
        d3 = np.arctan2(rest1[..., 0], rest1[..., 1])
        out = self.home + np.stack([d1, d2, d3], axis=-1)
        if near is not None:
            out = out + 2 * math.pi * np.round((np.asarray(near, float) - out) / (2 * math.pi))
        return out
