"""Joint axes from a model's own geometry: least-squares fits, numpy only (no bpy).

Conventions: points and vectors are rows, shape (n, 3), in any one length unit; the
results are in the same unit.  Directions are unit vectors.

Two selections define an axis:

*a ring* (the rim of a hole or a shaft: vertices on one circle)
    the plane by the singular value decomposition of the centred points (its normal is
    the right singular vector of the smallest singular value: total least squares),
    then the circle in that plane: an algebraic fit (Kåsa 1976) as the start, refined by
    Gauss-Newton on the geometric distance ``|p - c| - r`` (Ahn, Rauh & Warnecke 2001;
    Chernov 2010, ch. 4).

*the faces of a cylinder*
    the axis is the direction most nearly normal to every face normal: the right
    singular vector of the smallest singular value of the stacked normals; the point
    is the centre of a circle fitted, as above, to the face centres projected on the
    plane normal to the axis.

References
----------
.. [1] I. Kåsa, "A circle fitting procedure and its error analysis", IEEE Trans.
       Instrum. Meas. 25 (1976) 8-14.
.. [2] S. J. Ahn, W. Rauh, H.-J. Warnecke, "Least-squares orthogonal distances fitting
       of circle, sphere, ellipse, hyperbola, and parabola", Pattern Recognition 34
       (2001) 2283-2303.
.. [3] N. Chernov, Circular and Linear Regression: Fitting Circles and Lines by Least
       Squares, CRC Press 2010.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["FitError", "AxisFit", "fit_plane", "fit_circle_algebraic", "fit_circle",
           "axis_from_ring", "axis_from_faces", "NORMAL_TOLERANCE_DEG"]

#: Face normals may stray this far (degrees, root mean square) from the plane normal to
#: the fitted axis; beyond it they do not share an axis (our choice: modelled cylinders
#: are exact, scanned ones stay well inside a few degrees).
NORMAL_TOLERANCE_DEG = 5.0
#: Points whose second singular value is below this fraction of the first lie on a line.
COLLINEAR_RATIO = 1e-6


class FitError(ValueError):
    """The selection cannot define an axis; the message says why."""


@dataclass
class AxisFit:
    """A fitted axis: ``point`` (the circle's centre), unit ``axis``, ``radius``,
    ``residual`` (root-mean-square distance of the points from the fitted circle, same
    length unit), ``count`` (points or faces used) and, for faces, ``normal_spread``
    (root-mean-square angle, degrees, of the normals out of the plane normal to the axis)."""
    point: np.ndarray
    axis: np.ndarray
    radius: float
    residual: float
    count: int
    normal_spread: float = 0.0


def _points(points, what="points"):
    p = np.asarray(points, dtype=float)
    if p.ndim != 2 or p.shape[1] != 3:
        raise FitError(f"expected {what} of shape (n, 3), got {p.shape}")
    if not np.isfinite(p).all():
        raise FitError(f"{what} contain a non-finite coordinate")
    return p


def fit_plane(points):
    """Total least-squares plane: ``(centroid, unit normal, singular values)``.

    The normal is the right singular vector of the smallest singular value of the
    centred points."""
    p = _points(points)
    c = p.mean(axis=0)
    _, s, vt = np.linalg.svd(p - c, full_matrices=False)
    return c, vt[-1] / np.linalg.norm(vt[-1]), s


def fit_circle_algebraic(xy):
    """Kåsa's fit [1]: least squares of ``x² + y² + D x + E y + F`` -> ``(centre, radius)``.

    Solved on centred and scaled data for conditioning."""
    xy = np.asarray(xy, dtype=float)
    m = xy.mean(axis=0)
    scale = float(np.sqrt(((xy - m) ** 2).sum(axis=1).mean())) or 1.0
    u = (xy - m) / scale
    A = np.column_stack([u, np.ones(len(u))])
    b = -(u * u).sum(axis=1)
    (D, E, F), *_ = np.linalg.lstsq(A, b, rcond=None)
    cu = np.array([-D / 2, -E / 2])
    r2 = float(cu @ cu - F)
    r = np.sqrt(max(r2, 0.0))
    return m + scale * cu, scale * r


def fit_circle(xy, *, iterations=50):
    """Geometric circle fit: ``(centre, radius, rms)`` minimising Σ(|p - c| - r)².

    Starts from :func:`fit_circle_algebraic` and takes Gauss-Newton steps on the
    orthogonal distances [2] (halving a step that does not lower the sum)."""
    xy = np.asarray(xy, dtype=float)
    c, r = fit_circle_algebraic(xy)

    def residuals(c, r):
        return np.linalg.norm(xy - c, axis=1) - r

    f = residuals(c, r)
    cost = float(f @ f)
    for _ in range(iterations):
        d = xy - c
        rho = np.linalg.norm(d, axis=1)
        rho = np.where(rho > 0, rho, 1.0)
        J = np.column_stack([-d / rho[:, None], -np.ones(len(xy))])
        step, *_ = np.linalg.lstsq(J, -f, rcond=None)
        t = 1.0
        while t > 1e-6:
            c2, r2 = c + t * step[:2], r + t * step[2]
            f2 = residuals(c2, r2)
            cost2 = float(f2 @ f2)
            if cost2 <= cost:
                break
            t /= 2
        else:
            break
        done = np.linalg.norm(t * step) <= 1e-14 * max(1.0, abs(r)) or cost - cost2 <= 1e-30
        c, r, f, cost = c2, r2, f2, cost2
        if done:
            break
    return c, float(r), float(np.sqrt(cost / len(xy)))


def _basis(n):
    """Two unit vectors completing ``n`` to a right-handed orthonormal frame."""
    a = np.array([1.0, 0.0, 0.0]) if abs(n[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    u = np.cross(n, a)
    u /= np.linalg.norm(u)
    return u, np.cross(n, u)


def _orient(axis, hint):
    if hint is not None and float(np.dot(axis, np.asarray(hint, dtype=float))) < 0:
        return -axis
    return axis


def _distinct(p, what):
    if len(p) < 3:
        raise FitError(f"need at least three {what} to define an axis, got {len(p)}")
    size = float(np.ptp(p, axis=0).max()) if len(p) else 0.0
    if size == 0.0:
        raise FitError(f"the {what} all lie at one place")
    return size


def axis_from_ring(points, *, hint=None):
    """Axis of a ring of points (the rim of a hole or shaft): :class:`AxisFit`.

    ``hint``: a direction the axis should point along (its sign only).  Raises
    :class:`FitError` with fewer than three points or collinear points."""
    p = _points(points)
    _distinct(p, "points")
    c0, n, s = fit_plane(p)
    if s[1] <= COLLINEAR_RATIO * s[0]:
        raise FitError(f"the {len(p)} points lie on a line; select a ring around the hole or shaft")
    u, v = _basis(n)
    d = p - c0
    xy = np.column_stack([d @ u, d @ v])
    centre, radius, _ = fit_circle(xy)
    point = c0 + centre[0] * u + centre[1] * v
    height = d @ n
    radial = np.linalg.norm(xy - centre, axis=1) - radius
    residual = float(np.sqrt(np.mean(height ** 2 + radial ** 2)))
    return AxisFit(point, _orient(n, hint), radius, residual, len(p))


def axis_from_faces(centres, normals, *, weights=None, hint=None,
                    tolerance_deg=NORMAL_TOLERANCE_DEG):
    """Axis of the faces of a cylinder from their ``centres`` and ``normals``: :class:`AxisFit`.

    ``weights`` (e.g. face areas) weight each face's normal.  Raises :class:`FitError`
    with fewer than three faces, normals that all point one way (a flat patch), or
    normals that do not share an axis (their spread out of the plane normal to the
    best axis exceeds ``tolerance_deg``)."""
    c = _points(centres, "face centres")
    nrm = _points(normals, "face normals")
    if len(c) != len(nrm):
        raise FitError(f"got {len(c)} face centres but {len(nrm)} normals")
    if len(c) < 3:
        raise FitError(f"need at least three faces to define an axis, got {len(c)}")
    lens = np.linalg.norm(nrm, axis=1)
    if (lens == 0).any():
        raise FitError("a face has no normal (zero area)")
    nrm = nrm / lens[:, None]
    w = np.ones(len(c)) if weights is None else np.asarray(weights, dtype=float)
    if w.shape != (len(c),) or not np.isfinite(w).all() or (w < 0).any() or w.sum() <= 0:
        raise FitError("face weights must be one non-negative number a face, not all zero")
    sw = np.sqrt(w / w.sum())
    _, s, vt = np.linalg.svd(nrm * sw[:, None], full_matrices=False)
    if s[1] <= 1e-3 * s[0]:
        raise FitError("the face normals all point one way (a flat patch); "
                       "select faces around the cylinder")
    axis = vt[-1] / np.linalg.norm(vt[-1])
    # s[2] is the weighted root mean square of the normals' components along the axis
    spread = float(np.degrees(np.arcsin(min(1.0, s[2]))))
    if spread > tolerance_deg:
        raise FitError(f"the face normals do not share an axis: they stray {spread:.3g}° "
                       f"(root mean square) from the best one, more than {tolerance_deg:g}°; "
                       "select only the cylinder's side faces")
    u, v = _basis(axis)
    m = c.mean(axis=0)
    d = c - m
    xy = np.column_stack([d @ u, d @ v])
    sxy = np.linalg.svd(xy - xy.mean(axis=0), compute_uv=False)
    if sxy[1] <= COLLINEAR_RATIO * sxy[0]:
        raise FitError("the face centres lie on a line seen along the axis; select faces around the cylinder")
    centre, radius, rms = fit_circle(xy)
    point = m + centre[0] * u + centre[1] * v
    return AxisFit(point, _orient(axis, hint), radius, rms, len(c), spread)
