"""Plate cam profiles for a translating roller follower, from a motion-law coupling.

Conventions
-----------
The cam turns about its own axis by the leader angle ``theta`` (positive: right-handed
about the leader's axis).  The follower slides along a line parallel to its direction of
lift, ``offset`` (``e``) to the side of the cam's centre, and carries a roller of radius
``Rr`` (``Rr = 0``: a knife edge).  The lift is ``s(theta) = follower(theta) - min
follower`` over one period, measured away from the cam's centre.  ``Rp = Rb + Rr`` is the
prime-circle radius (``Rb`` the base circle of the cam itself) and ``d = sqrt(Rp^2 - e^2)``.

Cam-fixed coordinates: ``x`` along the offset, ``y`` along the lift at ``theta = 0``.  The
roller centre is at ``(e, d + s)`` in the still frame; turned back by ``-theta`` into the cam
it traces the pitch curve ``P(theta) = R(-theta) (e, d + s)``.  Then (Norton, *Design of
Machinery*, ch. 8, pressure angle and radius of curvature; Lynch & Park 2017 for the
rotation derivative ``dR(-theta)/dtheta = -R(-theta) [k]``):

- ``P' = R(-theta) (d + s, s' - e)``; the pitch curve's normal makes the pressure angle
  ``phi`` with the line of lift: ``tan phi = (s' - e) / (s + d)``;
- ``P'' = R(-theta) (2 s' - e, s'' - s - d)``; radius of curvature
  ``rho = -|P'|^3 / (P' x P'')``, positive where the pitch curve is convex;
- the cam profile is the pitch curve moved ``Rr`` along its inward normal; its radius
  of curvature is ``rho - Rr``.  Where the pitch curve is convex with ``rho < Rr`` the
  profile folds over itself (undercutting): the roller cannot follow the law there.
"""
from __future__ import annotations

import math

import numpy as np

from .errors import JointwiseError, SpecError

__all__ = ["CamError", "cam_profile", "cam_warnings", "MAX_PRESSURE_ANGLE", "ROWS"]

#: Pressure angle above which a translating roller follower is flagged (common practice).
MAX_PRESSURE_ANGLE = math.radians(30.0)
#: Rows per period of the leader.
ROWS = 360


class CamError(JointwiseError):
    """The coupling is not a motion law a plate cam can produce (CLI exit 3)."""


def _law_of(mech, coupling):
    if coupling not in mech.couplings:
        names = ", ".join(mech.couplings) or "none"
        raise SpecError(f"no coupling named {coupling!r}; couplings: {names}", source=mech.source, key="--coupling")
    c = mech.couplings[coupling]
    if c.kind not in ("program", "table"):
        raise CamError(f"coupling {coupling!r} is {c.kind}, not a motion law a cam makes "
                       f"(law = \"program\" or \"table\")")
    if mech.coordinate_kind(c.leader) != "angle":
        raise CamError(f"coupling {coupling!r}: the leader {c.leader!r} slides; a plate cam turns")
    if mech.coordinate_kind(c.follower) != "length":
        raise CamError(f"coupling {coupling!r}: the follower {c.follower!r} turns; this cam drives a "
                       f"translating follower")
    law = c.law
    period = getattr(law, "period", None)
    if period is None or abs(period - 2 * math.pi) > 1e-9 or abs(getattr(law, "rise", 0.0)) > 1e-12:
        raise CamError(f"coupling {coupling!r}: a plate cam repeats every turn; the law must span one "
                       f"turn of the leader and end where it starts")
    return c, law


def cam_profile(mech, coupling, base_radius, roller_radius, offset=0.0, thetas=None):
    """Pitch curve, profile, pressure angle and radius of curvature of a plate cam.

    Parameters
    ----------
    mech : Mechanism
    coupling : str
        A ``program`` or ``table`` coupling from a turning leader to a sliding follower.
    base_radius, roller_radius, offset : float
        Rb > 0, Rr >= 0 and e (file length unit), |e| < Rb + Rr.
    thetas : array_like, optional
        Leader angles (radians); default ``ROWS`` angles over one turn from the law's start.

    Returns
    -------
    dict of arrays (internal units: radians, file length unit): ``theta``, ``lift``,
    ``velocity`` (ds/dtheta), ``acceleration``, ``pitch`` (N, 2), ``profile`` (N, 2),
    ``pressure_angle``, ``pitch_radius`` and ``profile_radius`` (radius of curvature,
    positive convex; ``inf`` where straight), plus ``law_start`` and ``lowest``.
    """
    c, law = _law_of(mech, coupling)
    rb, rr, e = float(base_radius), float(roller_radius), float(offset)
    if not (math.isfinite(rb) and rb > 0):
        raise SpecError(f"base radius must be positive, got {rb:g}", key="--base-radius")
    if not (math.isfinite(rr) and rr >= 0):
        raise SpecError(f"roller radius must be 0 (knife edge) or positive, got {rr:g}", key="--roller")
    rp = rb + rr
    if not (math.isfinite(e) and abs(e) < rp):
        raise SpecError(f"offset {e:g} must be smaller than the prime-circle radius {rp:g} "
                        f"(base radius + roller radius)", key="--offset")
    start = float(getattr(law, "start", law.x[0] if hasattr(law, "x") else 0.0))
    dense = start + np.linspace(0.0, 2 * math.pi, 36001)
    lowest = float(law.evaluate(dense)[0].min())
    if thetas is None:
        thetas = start + np.arange(ROWS) * (2 * math.pi / ROWS)
    th = np.asarray(thetas, dtype=float)
    y, s1, s2 = law.evaluate(th)
    s = y - lowest
    d = math.sqrt(rp * rp - e * e)
    ct, st = np.cos(th), np.sin(th)

    def back(vx, vy):  # R(-theta) applied to (vx, vy)
        return np.stack([ct * vx + st * vy, -st * vx + ct * vy], axis=-1)

    pitch = back(np.full(th.shape, e), d + s)
    t1x, t1y = d + s, s1 - e                         # P' before turning back
    t2x, t2y = 2 * s1 - e, s2 - s - d                # P''
    speed = np.hypot(t1x, t1y)
    cross = t1x * t2y - t1y * t2x
    with np.errstate(divide="ignore"):
        rho = np.where(np.abs(cross) > 1e-12 * speed ** 2, -speed ** 3 / np.where(cross == 0, 1.0, cross), np.inf)
    normal = back(-t1y / speed, t1x / speed)         # outward (towards the follower)
    profile = pitch - rr * normal
    phi = np.arctan2(s1 - e, s + d)
    return {"theta": th, "lift": s, "velocity": s1, "acceleration": s2, "pitch": pitch, "profile": profile,
            "pressure_angle": phi, "pitch_radius": rho,
            "profile_radius": np.where(np.isfinite(rho), rho - rr, np.inf),
            "law_start": start, "lowest": lowest, "roller": rr}


def _spans(theta, mask, unit):
    """Runs of consecutive flagged rows as text, e.g. '30-62, 200-215 deg'."""
    idx = np.flatnonzero(mask)
    if not idx.size:
        return ""
    runs, first, last = [], idx[0], idx[0]
    for i in idx[1:]:
        if i == last + 1:
            last = i
            continue
        runs.append((first, last))
        first = last = i
    runs.append((first, last))
    text = [f"{theta[a] / unit:g}" if a == b else f"{theta[a] / unit:g} to {theta[b] / unit:g}" for a, b in runs]
    return ", ".join(text)


def cam_warnings(result, angle_unit=math.pi / 180, angle_name="deg"):
    """Warnings (text) for pressure angles above 30 deg and for undercutting, naming the
    leader angles (of the result's rows, in the file's angle unit)."""
    out = []
    th = result["theta"]
    phi = result["pressure_angle"]
    steep = np.abs(phi) > MAX_PRESSURE_ANGLE
    if steep.any():
        out.append(f"pressure angle above 30 deg (common practice for translating roller followers; largest "
                   f"{math.degrees(float(np.abs(phi).max())):.3g} deg) at leader {_spans(th, steep, angle_unit)} "
                   f"{angle_name}: a larger base circle or an offset lowers it")
    rho, rr = result["pitch_radius"], result["roller"]
    if rr > 0:
        under = (rho > 0) & (rho < rr)
        if under.any():
            out.append(f"undercutting: the pitch curve's radius of curvature (smallest "
                       f"{float(rho[under].min()):.4g}) is below the roller radius {rr:g} at leader "
                       f"{_spans(th, under, angle_unit)} {angle_name}: the cam cannot give this motion; "
                       f"use a larger base circle or a smaller roller")
    return out
