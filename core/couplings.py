"""Coupling laws: the follower's value as a function of the leader's, with two derivatives.

Every law works in internal units (radians and file length units) and is vectorised over
numpy arrays: ``law.evaluate(x)`` returns ``(y, dy/dx, d2y/dx2)`` of the leader values
``x``, each of ``x``'s shape.  The file's units are converted by :mod:`jointwise.spec`.

Laws
----
``Linear(ratio, offset)``
    ``y = ratio * x + offset`` (gear pairs, rack and pinion).
``Program(segments, period)``
    Segments ``(x0, x1, y0, y1, kind)`` tiling one period of the leader, repeated; the
    follower rises by ``y_last - y_first`` per period (0 for a cam, one index for an
    indexing drive).  Kinds, with ``u = (x - x0) / beta``, ``beta = x1 - x0`` and
    ``h = y1 - y0`` (Norton, *Design of Machinery*, ch. 8; Rothbart, *Cam Design Handbook*,
    ch. 2):

    - ``dwell``: ``y = y0`` (needs ``h = 0``);
    - ``constant-velocity``: ``y = y0 + h u``;
    - ``harmonic``: ``y = y0 + h/2 (1 - cos pi u)``;
    - ``cycloidal``: ``y = y0 + h (u - sin(2 pi u) / (2 pi))``;
    - ``polynomial-345``: ``y = y0 + h (10 u^3 - 15 u^4 + 6 u^5)``;
    - ``polynomial-4567``: ``y = y0 + h (35 u^4 - 84 u^5 + 70 u^6 - 20 u^7)``.
``Geneva(slots, offset)``
    The external Geneva wheel of ``N`` slots driven by a pin crank in the standard
    proportions (the pin enters and leaves the slots radially): crank radius
    ``a = C sin(pi / N)`` for the centre distance ``C``.  With ``lam = sin(pi / N)`` and the
    crank angle ``x`` measured from the line of centres, while the pin is in a slot
    (``|x| <= pi/2 - pi/N``) the wheel's angle from the line of centres is
    ``phi = atan2(lam sin x, 1 - lam cos x)``; outside it dwells.  The follower advances
    by ``2 pi / N`` per crank turn, in the positive sense (a real external wheel turns
    against its crank: point the wheel joint's axis the other way); ``y(0) = offset``, the
    middle of an index.  (Norton, *Design of Machinery*, intermittent-motion mechanisms;
    the formula follows from the triangle crank centre - pin - wheel centre.)
``Table(points, period)``
    A cubic spline through ``(x_i, y_i)`` with continuous acceleration: periodic when the
    table spans exactly ``period`` (the follower may rise by a net amount per period),
    else natural (zero second derivative at the ends) and continued by straight lines
    outside the table (continuous velocity and acceleration there too).
"""
from __future__ import annotations

import math

import numpy as np

__all__ = ["Linear", "Program", "Geneva", "Table", "KINDS", "spline_second_derivatives", "scale_spec"]

#: Segment kinds of a program law.
KINDS = ("dwell", "constant-velocity", "harmonic", "cycloidal", "polynomial-345", "polynomial-4567")

_TWO_PI = 2.0 * math.pi


class Linear:
    """``y = ratio * x + offset`` (internal units)."""
    name = "linear"
    linear = True

    def __init__(self, ratio, offset=0.0):
        self.ratio = float(ratio)
        self.offset = float(offset)

    def evaluate(self, x):
        x = np.asarray(x, dtype=float)
        return self.ratio * x + self.offset, np.full(x.shape, self.ratio), np.zeros(x.shape)


def _unit_profile(kind, u):
    """(s, s', s'') of a unit rise over u in [0, 1] (derivatives per unit u)."""
    if kind == "dwell":
        z = np.zeros_like(u)
        return z, z, z.copy()
    if kind == "constant-velocity":
        return u.copy(), np.ones_like(u), np.zeros_like(u)
    if kind == "harmonic":
        p = math.pi
        return 0.5 * (1 - np.cos(p * u)), 0.5 * p * np.sin(p * u), 0.5 * p * p * np.cos(p * u)
    if kind == "cycloidal":
        w = _TWO_PI * u
        return u - np.sin(w) / _TWO_PI, 1 - np.cos(w), _TWO_PI * np.sin(w)
    if kind == "polynomial-345":
        c = (0, 0, 0, 10, -15, 6)
    elif kind == "polynomial-4567":
        c = (0, 0, 0, 0, 35, -84, 70, -20)
    else:
        raise ValueError(f"unknown segment kind {kind!r}; one of {', '.join(KINDS)}")
    poly = np.polynomial.Polynomial(c)
    d1, d2 = poly.deriv(1), poly.deriv(2)
    return poly(u), d1(u), d2(u)


class Program:
    """Segments tiling one period of the leader, repeated (see the module docstring).

    Parameters
    ----------
    segments : sequence of (x0, x1, y0, y1, kind)
        Internal units, contiguous (``x1`` of one is ``x0`` of the next) and continuous
        (``y1`` of one is ``y0`` of the next); checked by :mod:`jointwise.spec`.
    period : float
        ``x1`` of the last minus ``x0`` of the first.
    """
    name = "program"
    linear = False

    def __init__(self, segments, period):
        self.segments = [(float(a), float(b), float(c), float(d), str(k)) for a, b, c, d, k in segments]
        self.period = float(period)
        self.start = self.segments[0][0]
        self.rise = self.segments[-1][3] - self.segments[0][2]
        self.breaks = np.array([s[0] for s in self.segments[1:]])

    def evaluate(self, x):
        x = np.asarray(x, dtype=float)
        turns = np.floor((x - self.start) / self.period)
        xr = x - turns * self.period
        seg = np.searchsorted(self.breaks, xr, side="right")
        y = np.zeros(x.shape)
        dy = np.zeros(x.shape)
        ddy = np.zeros(x.shape)
        for k, (x0, x1, y0, y1, kind) in enumerate(self.segments):
            sel = seg == k
            if not np.any(sel):
                continue
            beta, h = x1 - x0, y1 - y0
            u = np.clip((xr[sel] - x0) / beta, 0.0, 1.0)
            s, s1, s2 = _unit_profile(kind, u)
            y[sel] = y0 + h * s
            dy[sel] = h * s1 / beta
            ddy[sel] = h * s2 / (beta * beta)
        return y + turns * self.rise, dy, ddy


class Geneva:
    """External Geneva wheel of ``slots`` slots, standard proportions (module docstring)."""
    name = "geneva"
    linear = False

    def __init__(self, slots, offset=0.0):
        self.slots = int(slots)
        self.offset = float(offset)
        self.lam = math.sin(math.pi / self.slots)
        #: half the crank angle over which the pin drives the wheel
        self.half_motion = math.pi / 2 - math.pi / self.slots
        self.index = _TWO_PI / self.slots
        self.period = _TWO_PI

    def evaluate(self, x):
        x = np.asarray(x, dtype=float)
        turns = np.floor((x + math.pi) / _TWO_PI)
        xr = x - turns * _TWO_PI          # in [-pi, pi)
        lam = self.lam
        c, s = np.cos(xr), np.sin(xr)
        d = 1.0 - 2.0 * lam * c + lam * lam
        inside = np.abs(xr) <= self.half_motion
        phi = np.where(inside, np.arctan2(lam * s, 1.0 - lam * c), np.sign(xr) * self.index / 2)
        dphi = np.where(inside, lam * (c - lam) / d, 0.0)
        ddphi = np.where(inside, -lam * (1.0 - lam * lam) * s / (d * d), 0.0)
        return self.offset + phi + turns * self.index, dphi, ddphi


def spline_second_derivatives(x, y, periodic=False):
    """Second derivatives at the knots of the natural or periodic cubic spline through (x, y).

    The continuity of the first derivative at each inner knot gives
    ``h_{i-1} M_{i-1} + 2 (h_{i-1} + h_i) M_i + h_i M_{i+1} = 6 (d_i - d_{i-1})``
    with ``d_i = (y_{i+1} - y_i) / h_i`` (de Boor, *A Practical Guide to Splines*, ch. IV;
    Burden & Faires, *Numerical Analysis*, sec. 3.5).  Natural: ``M_0 = M_n = 0``;
    periodic (``y_n = y_0``): the same equation at knot 0 wrapping round, ``M_n = M_0``.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = len(x) - 1
    h = np.diff(x)
    d = np.diff(y) / h
    if periodic:
        A = np.zeros((n, n))
        rhs = np.zeros(n)
        for i in range(n):
            hp, hn = h[i - 1], h[i]          # h[-1] wraps to the last interval
            A[i, (i - 1) % n] += hp
            A[i, i] += 2 * (hp + hn)
            A[i, (i + 1) % n] += hn
            rhs[i] = 6 * (d[i] - d[i - 1])
        m = np.linalg.solve(A, rhs)
        return np.append(m, m[0])
    m = np.zeros(n + 1)
    if n >= 2:
        A = np.zeros((n - 1, n - 1))
        for i in range(1, n):
            A[i - 1, i - 1] = 2 * (h[i - 1] + h[i])
            if i > 1:
                A[i - 1, i - 2] = h[i - 1]
            if i < n - 1:
                A[i - 1, i] = h[i]
        m[1:n] = np.linalg.solve(A, 6 * (d[1:] - d[:-1]))
    return m


class Table:
    """Cubic spline through points (internal units); see the module docstring.

    ``periodic``: the table spans one period; the follower's rise over it, ``y_n - y_0``,
    repeats each period (the spline is fitted to ``y - rise * (x - x0) / period``).
    """
    name = "table"
    linear = False

    def __init__(self, points, period=None):
        pts = np.asarray(points, float)
        self.x = pts[:, 0].copy()
        self.y = pts[:, 1].copy()
        span = self.x[-1] - self.x[0]
        self.periodic = period is not None and abs(span - period) <= 1e-9 * max(1.0, abs(period))
        self.period = float(period) if self.periodic else None
        self.rise = (self.y[-1] - self.y[0]) if self.periodic else 0.0
        self.slope = self.rise / span if self.periodic else 0.0
        yy = self.y - self.slope * (self.x - self.x[0])
        if self.periodic:
            yy[-1] = yy[0]
        self.yy = yy
        self.m = spline_second_derivatives(self.x, yy, self.periodic)

    def _spline(self, x):
        xs, ys, m = self.x, self.yy, self.m
        i = np.clip(np.searchsorted(xs, x, side="right") - 1, 0, len(xs) - 2)
        x0, x1 = xs[i], xs[i + 1]
        h = x1 - x0
        a, b = x1 - x, x - x0
        y = (m[i] * a ** 3 + m[i + 1] * b ** 3) / (6 * h) + (ys[i] / h - m[i] * h / 6) * a \
            + (ys[i + 1] / h - m[i + 1] * h / 6) * b
        dy = (-m[i] * a ** 2 + m[i + 1] * b ** 2) / (2 * h) - (ys[i] / h - m[i] * h / 6) \
            + (ys[i + 1] / h - m[i + 1] * h / 6)
        ddy = (m[i] * a + m[i + 1] * b) / h
        return y, dy, ddy

    def evaluate(self, x):
        x = np.asarray(x, dtype=float)
        x0, xn = self.x[0], self.x[-1]
        if self.periodic:
            turns = np.floor((x - x0) / self.period)
            xr = x - turns * self.period
            y, dy, ddy = self._spline(xr)
            return y + self.slope * (x - x0), dy + self.slope, ddy
        xc = np.clip(x, x0, xn)
        y, dy, ddy = self._spline(xc)
        out = xc != x                     # beyond the ends: straight on with the end slope
        y = y + np.where(out, dy * (x - xc), 0.0)
        ddy = np.where(out, 0.0, ddy)
        return y, dy, ddy


def scale_spec(spec, leader, follower):
    """A law's file keys (``law``, ``segments``, ``period``, ``slots``, ``points``, ``offset``)
    with leader values multiplied by ``leader`` and follower values by ``follower``: the
    same law in other units (e.g. a host's).  The linear law's ``ratio`` scales by
    ``follower / leader``."""
    out = dict(spec)
    if "segments" in out:
        out["segments"] = [[s[0] * leader, s[1] * leader, s[2] * follower, s[3] * follower, s[4]]
                           for s in out["segments"]]
    if "points" in out:
        out["points"] = [[p[0] * leader, p[1] * follower] for p in out["points"]]
    if "period" in out:
        out["period"] = out["period"] * leader
    if "offset" in out:
        out["offset"] = out["offset"] * follower
    if "ratio" in out:
        out["ratio"] = out["ratio"] * follower / leader
    return out
