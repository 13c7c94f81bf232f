"""Small test mechanisms for the sweep, measure and range tests (invented products of the
invented Harrowgate Lane workshop).  Each builder returns mechanism-file text (TOML) whose
home placement is computed here in closed form so that every loop closes at home.
"""
from __future__ import annotations

import math

import numpy as np

import jointwise


def _v(p):
    return "[" + ", ".join(f"{float(c):.15g}" for c in p) + "]"


def circle_meet(p, r1, q, r2, upper=True):
    """Intersection of circle (centre p, radius r1) with circle (q, r2) in the xy plane;
    ``upper`` picks the point to the left of p -> q."""
    p, q = np.asarray(p, float), np.asarray(q, float)
    d = np.linalg.norm(q - p)
    a = (r1 * r1 - r2 * r2 + d * d) / (2 * d)
    h = math.sqrt(max(r1 * r1 - a * a, 0.0))
    u = (q - p) / d
    n = np.array([-u[1], u[0]])
    return p + a * u + (h if upper else -h) * n


def _pick(A, b, O4, c, upper):
    """The coupler-rocker pin B: of the two circle meets, the higher (``upper``) or lower."""
    p1 = circle_meet(A, b, O4, c, True)
    p2 = circle_meet(A, b, O4, c, False)
    hi, lo = (p1, p2) if p1[1] >= p2[1] else (p2, p1)
    return hi if upper else lo


def fourbar_toml(a=30.0, b=90.0, c=70.0, d=100.0, theta2=60.0, upper=True, measures="",
                 crank_drive=True, limits=None, name="Harrowgate treadle linkage"):
    """Planar four-bar: ground pivots O2 = (0, 0, 0), O4 = (d, 0, 0); crank a (joint ``crank``,
    value = absolute crank angle, deg), coupler b, rocker c (joint ``rocker``, value = absolute
    rocker angle).  ``elbow`` joins crank and coupler at A, ``wrist`` coupler and rocker at B."""
    t2 = math.radians(theta2)
    A = np.array([a * math.cos(t2), a * math.sin(t2)])
    B = _pick(A, b, (d, 0.0), c, upper)
    t3 = math.degrees(math.atan2(B[1] - A[1], B[0] - A[0]))
    t4 = math.degrees(math.atan2(B[1], B[0] - d))
    lim = f"limits = {_v(limits)}\n" if limits else ""
    return f"""
[mechanism]
name = "{name}"
length_unit = "mm"
angle_unit = "deg"
ground = "frame"

[links.frame]
[links.crank]
[links.coupler]
[links.rocker]

[joints.crank]
type = "revolute"
parent = "frame"
child = "crank"
point = [0, 0, 0]
axis = [0, 0, 1]
home = {theta2!r}
drive = {'true' if crank_drive else 'false'}

[joints.elbow]
type = "revolute"
parent = "crank"
child = "coupler"
point = {_v([A[0], A[1], 0])}
axis = [0, 0, 1]
home = {float(t3 - theta2)!r}

[joints.rocker]
type = "revolute"
parent = "frame"
child = "rocker"
point = [{d!r}, 0, 0]
axis = [0, 0, 1]
home = {float(t4)!r}
{lim}
[joints.wrist]
type = "revolute"
parent = "coupler"
child = "rocker"
point = {_v([B[0], B[1], 0])}
axis = [0, 0, 1]
home = {float(t4 - t3)!r}
{measures}
"""


def fourbar_points(a, b, c, d, theta2):
    """Home points A, B (xy) of :func:`fourbar_toml`."""
    t2 = math.radians(theta2)
    A = np.array([a * math.cos(t2), a * math.sin(t2)])
    return A, _pick(A, b, (d, 0.0), c, True)


def slider_crank_toml(r=25.0, l=80.0, e=0.0, theta=30.0, measures=""):
    """Offset slider-crank: crank r about the z axis at the origin (joint ``crank``, absolute
    angle), rod l, slider on the line y = e along x (joint ``slide``, value = slider x)."""
    t = math.radians(theta)
    A = np.array([r * math.cos(t), r * math.sin(t)])
    x = A[0] + math.sqrt(l * l - (A[1] - e) ** 2)
    return f"""
[mechanism]
name = "Harrowgate bench press"
length_unit = "mm"
angle_unit = "deg"
ground = "bed"

[links.bed]
[links.crank]
[links.rod]
[links.ram]

[joints.crank]
type = "revolute"
parent = "bed"
child = "crank"
point = [0, 0, 0]
axis = [0, 0, 1]
home = {theta!r}
drive = true

[joints.pin]
type = "revolute"
parent = "crank"
child = "rod"
point = {_v([A[0], A[1], 0])}
axis = [0, 0, 1]

[joints.slide]
type = "prismatic"
parent = "bed"
child = "ram"
point = {_v([x, e, 0])}
axis = [1, 0, 0]
home = {float(x)!r}

[joints.gudgeon]
type = "revolute"
parent = "rod"
child = "ram"
point = {_v([x, e, 0])}
axis = [0, 0, 1]
{measures}
"""


def hooke_toml(beta=30.0, measures=""):
    """Hooke's joint: input shaft along x (joint ``input``), output shaft along
    u = (cos beta, sin beta, 0) (joint ``output``), cross at the origin.  At home the cross arm
    fixed in the input yoke lies along z, perpendicular to the plane of both shafts."""
    bt = math.radians(beta)
    u = [math.cos(bt), math.sin(bt), 0.0]
    v = [-math.sin(bt), math.cos(bt), 0.0]
    return f"""
[mechanism]
name = "Harrowgate drill-press shaft"
length_unit = "mm"
angle_unit = "deg"
ground = "housing"

[links.housing]
[links.inshaft]
[links.outshaft]

[joints.input]
type = "revolute"
parent = "housing"
child = "inshaft"
point = [0, 0, 0]
axis = [1, 0, 0]
drive = true

[joints.cross]
type = "universal"
parent = "inshaft"
child = "outshaft"
point = [0, 0, 0]
axis = [0, 0, 1]
axis2 = {_v(v)}

[joints.output]
type = "revolute"
parent = "housing"
child = "outshaft"
point = [0, 0, 0]
axis = {_v(u)}
{measures}
"""


RSSR = dict(r=20.0, C=(10.0, 60.0, 40.0), s=45.0, phi=-60.0)


def rssr_geometry(r=RSSR["r"], C=RSSR["C"], s=RSSR["s"], phi=RSSR["phi"]):
    """RSSR: crank r about z at the origin, A = r (cos t, sin t, 0); rocker s about the x axis
    through C, B = C + s (0, cos p, sin p); coupler length L = |A(0) - B(phi)|."""
    C = np.asarray(C, float)
    A = np.array([r, 0.0, 0.0])
    p = math.radians(phi)
    B = C + s * np.array([0.0, math.cos(p), math.sin(p)])
    return A, B, float(np.linalg.norm(A - B))


def rssr_rocker(theta, r=RSSR["r"], C=RSSR["C"], s=RSSR["s"], phi=RSSR["phi"]):
    """Closed form rocker angle (rad) of the RSSR for crank angles ``theta`` (rad).

    |A - B|^2 = L^2 with A = r(cos t, sin t, 0), B = C + s(0, cos p, sin p) gives
    P cos p + Q sin p = K, P = 2 s (C_y - A_y), Q = 2 s C_z,
    K = L^2 - |A - C|^2 - s^2; p = atan2(Q, P) -/+ acos(K / hypot(P, Q)), branch of home."""
    A0, B0, L = rssr_geometry(r, C, s, phi)
    C = np.asarray(C, float)
    th = np.asarray(theta, float)
    ax, ay = r * np.cos(th), r * np.sin(th)
    P = -2 * s * (ay - C[1])
    Q = 2 * s * C[2]
    K = L * L - ((ax - C[0]) ** 2 + (ay - C[1]) ** 2 + C[2] ** 2) - s * s
    base = np.arctan2(Q, P)
    off = np.arccos(np.clip(K / np.hypot(P, Q), -1, 1))
    home = math.radians(phi)
    # the branch that reproduces the home angle at t = 0

    P0, Q0 = 2 * s * C[1], Q
    K0 = L * L - ((r - C[0]) ** 2 + C[1] ** 2 + C[2] ** 2) - s * s
    b0, o0 = math.atan2(Q0, P0), math.acos(max(-1.0, min(1.0, K0 / math.hypot(P0, Q0))))
    cand = [b0 + o0, b0 - o0]
    wrap = [abs((c_ - home + math.pi) % (2 * math.pi) - math.pi) for c_ in cand]
    sign = 1.0 if wrap[0] < wrap[1] else -1.0
    out = base + sign * off
    return home + ((out - home + math.pi) % (2 * math.pi) - math.pi)


def rssr_toml(r=RSSR["r"], C=RSSR["C"], s=RSSR["s"], phi=RSSR["phi"], measures=""):
    A, B, L = rssr_geometry(r, C, s, phi)
    return f"""
[mechanism]
name = "Harrowgate spatial wiper"
length_unit = "mm"
angle_unit = "deg"
ground = "frame"

[links.frame]
[links.crank]
[links.rod]
[links.arm]

[joints.crank]
type = "revolute"
parent = "frame"
child = "crank"
point = [0, 0, 0]
axis = [0, 0, 1]
drive = true

[joints.ballA]
type = "spherical"
parent = "crank"
child = "rod"
point = {_v(A)}
axis = [0, 0, 1]

[joints.arm]
type = "revolute"
parent = "frame"
child = "arm"
point = {_v(C)}
axis = [1, 0, 0]
home = {phi!r}

[joints.ballB]
type = "spherical"
parent = "rod"
child = "arm"
point = {_v(B)}
axis = [0, 0, 1]
{measures}
"""


def load(text, name="test.toml"):
    return jointwise.loads(text, source=name)
