"""Spatial maths: homogeneous transforms, screw axes, exponential map, logarithm, adjoint.

Conventions (hold in the whole core)
------------------------------------
* Column vectors. A rigid transform is a 4x4 matrix ``T`` with rotation ``T[:3, :3]``
  and translation ``T[:3, 3]``; it maps a point ``p`` to ``T @ [p, 1]``.
* ``A @ B`` applies ``B`` first, then ``A``.
* A screw axis or twist is a 6-vector ``S = (w, v)``: angular part first.  For a
  line through point ``q`` with unit direction ``w`` and pitch ``h`` (length per
  radian) ``v = -w x q + h w``.  A pure translation along unit ``u`` is ``(0, u)``.
* Angles are radians inside the core; lengths are in whatever unit the caller uses.
* Functions accept stacks: leading dimensions broadcast, e.g. ``exp6`` of shape
  ``(..., 6)`` screws with ``(...)`` values gives ``(..., 4, 4)``.

References
----------
1. R. M. Murray, Z. Li, S. S. Sastry, *A Mathematical Introduction to Robotic
   Manipulation*, CRC Press 1994, ch. 2 (twists, exponential coordinates, the
   adjoint, eqs. 2.14 and 2.36).
2. K. M. Lynch, F. C. Park, *Modern Robotics*, Cambridge 2017, sec. 3.2-3.3
   (Rodrigues' formula, eq. 3.51; the screw-motion formula, eq. 3.88; the matrix
   logarithm, algorithms in sec. 3.2.3.3 and 3.3.3.2).
"""
from __future__ import annotations

import numpy as np

from .errors import JointwiseError

__all__ = [
    "hat", "vee", "twist_matrix", "screw_axis", "exp3", "exp6", "log3", "log6",
    "screw_powers", "exp_unit", "adjoint", "inverse", "to_homogeneous", "from_homogeneous", "translation",
]



def hat(w):
    """Skew matrix ``[w]`` of shape (..., 3, 3) with ``[w] x = w x x``."""
    w = np.asarray(w, dtype=float)
    out = np.zeros(w.shape[:-1] + (3, 3))
    out[..., 0, 1] = -w[..., 2]
    out[..., 0, 2] = w[..., 1]
    out[..., 1, 0] = w[..., 2]
    out[..., 1, 2] = -w[..., 0]
    out[..., 2, 0] = -w[..., 1]
    out[..., 2, 1] = w[..., 0]
    return out


def vee(m):
    """Inverse of :func:`hat` (reads the skew part)."""
    m = np.asarray(m, dtype=float)
    return np.stack([m[..., 2, 1], m[..., 0, 2], m[..., 1, 0]], axis=-1)


def twist_matrix(s):
    """4x4 matrix ``[S]`` of a twist ``S = (w, v)``; ``exp([S] t)`` is the motion."""
    s = np.asarray(s, dtype=float)
    out = np.zeros(s.shape[:-1] + (4, 4))
    out[..., :3, :3] = hat(s[..., :3])
    out[..., :3, 3] = s[..., 3:]
    return out


def screw_axis(point, direction, pitch=0.0):
    """Unit screw axis of a line through ``point`` along ``direction`` with ``pitch``.

    ``pitch`` is the advance per radian (lead / 2 pi).  ``pitch = inf`` gives a pure
    translation along ``direction``.  The direction is normalised here; a zero
    direction raises ``ValueError``.
    """
    d = np.asarray(direction, dtype=float)
    n = np.linalg.norm(d)
    if not np.isfinite(n) or n < 1e-12:
        raise JointwiseError("axis has zero length")
    w = d / n
    if np.isinf(pitch):
        return np.concatenate([np.zeros(3), w])
    q = np.asarray(point, dtype=float)
    return np.concatenate([w, -np.cross(w, q) + pitch * w])


def _rot_coeffs(theta):
    """Return sin(t)/t, (1-cos t)/t^2, (t - sin t)/t^3, safe near zero."""
    theta = np.asarray(theta, dtype=float)
    small = np.abs(theta) < 1e-4
    t = np.where(small, 1.0, theta)
    t2 = t * t
    a = np.where(small, 1 - theta**2 / 6, np.sin(t) / t)
    b = np.where(small, 0.5 - theta**2 / 24, (1 - np.cos(t)) / t2)
    c = np.where(small, 1 / 6 - theta**2 / 120, (t - np.sin(t)) / (t2 * t))
    return a, b, c


def exp3(w):
    """Rotation matrix exp([w]) of a rotation vector (Rodrigues' formula, ref. 2 eq. 3.51)."""
    w = np.asarray(w, dtype=float)
    theta = np.linalg.norm(w, axis=-1)
    a, b, _ = _rot_coeffs(theta)
    k = hat(w)
    eye = np.broadcast_to(np.eye(3), k.shape)
    return eye + a[..., None, None] * k + b[..., None, None] * (k @ k)


def exp6(s, theta=1.0):
    """Rigid motion exp([S] theta) of screw ``S`` turned by ``theta`` (ref. 2 eq. 3.88).

    Parameters
    ----------
    s : array_like, shape (..., 6)
    theta : array_like, shape (...)
        Broadcasts against ``s[..., 0]``.
    """
    s = np.asarray(s, dtype=float)
    theta = np.asarray(theta, dtype=float)
    x = s * theta[..., None]
    w, v = x[..., :3], x[..., 3:]
    ang = np.linalg.norm(w, axis=-1)
    a, b, c = _rot_coeffs(ang)
    k = hat(w)
    k2 = k @ k
    shape = np.broadcast_shapes(k.shape)
    eye = np.broadcast_to(np.eye(3), shape)
    rot = eye + a[..., None, None] * k + b[..., None, None] * k2
    g = eye + b[..., None, None] * k + c[..., None, None] * k2
    out = np.zeros(shape[:-2] + (4, 4))
    out[..., :3, :3] = rot
    out[..., :3, 3] = np.einsum("...ij,...j->...i", g, v)
    out[..., 3, 3] = 1.0
    return out


def screw_powers(s):
    """Powers ``([S], [S]^2, [S]^3)`` of unit screws, shape (..., 3, 4, 4), for :func:`exp_unit`."""
    a1 = twist_matrix(s)
    a2 = a1 @ a1
    return np.stack([a1, a2, a2 @ a1], axis=-3)


def exp_unit(powers, theta):
    """exp([S] theta) of unit screws from their :func:`screw_powers`.

    For a unit screw (|w| = 1, or w = 0 and |v| = 1),
    ``exp([S] t) = I + t [S] + (1 - cos t) [S]^2 + (t - sin t) [S]^3``
    (ref. 2, proposition 3.25, written with powers of the 4x4 twist matrix).
    """
    t = np.asarray(theta, dtype=float)[..., None, None]
    return (_EYE4 + t * powers[..., 0, :, :] + (1 - np.cos(t)) * powers[..., 1, :, :]
            + (t - np.sin(t)) * powers[..., 2, :, :])


_EYE4 = np.eye(4)


def log3(r):
    """Rotation vector of a rotation matrix (inverse of :func:`exp3`), angle in [0, pi].

    The angle is ``atan2(|s|, (tr R - 1) / 2)`` with ``s`` the skew part, accurate over
    the whole range; near pi the axis is read from the symmetric part, where the skew
    part vanishes, and its sign from the skew part.
    """
    r = np.asarray(r, dtype=float)
    lead = r.shape[:-2]
    r = r.reshape((-1, 3, 3))
    skew = vee(r - np.swapaxes(r, 1, 2)) / 2  # sin(ang) * axis
    s = np.linalg.norm(skew, axis=-1)
    c = (np.trace(r, axis1=1, axis2=2) - 1) / 2
    ang = np.arctan2(s, c)
    out = np.empty((r.shape[0], 3))
    normal = ang < 2.5
    a_n, s_n = ang[normal], s[normal]
    safe = np.where(s_n > 0, s_n, 1.0)
    out[normal] = skew[normal] * np.where(s_n > 0, a_n / safe, 1.0)[:, None]
    for i in np.flatnonzero(~normal):
        # R = cos(a) I + sin(a) [n] + (1 - cos(a)) n n^T: the symmetric part gives n n^T
        sym = (r[i] + r[i].T) / 2
        m = (sym - c[i] * np.eye(3)) / (1 - c[i])
        j = int(np.argmax(np.diag(m)))
        n = m[:, j] / np.sqrt(max(m[j, j], 1e-300))
        n /= np.linalg.norm(n)
        if np.dot(n, skew[i]) < 0:
            n = -n
        out[i] = n * ang[i]
    return out.reshape(lead + (3,))


def log6(t):
    """Twist ``(w, v)`` with ``exp6(twist) == t`` (ref. 2, sec. 3.3.3.2); |w| <= pi."""
    t = np.asarray(t, dtype=float)
    lead = t.shape[:-2]
    t = t.reshape((-1, 4, 4))
    w = log3(t[:, :3, :3])
    ang = np.linalg.norm(w, axis=-1)
    k = hat(w)
    k2 = k @ k
    small = ang < 1e-4
    a_ = np.where(small, 1.0, ang)
    # G^-1 = I - K/2 + (1/ang^2)(1 - (ang/2) cot(ang/2)) K^2
    coef = np.where(small, 1 / 12 + ang**2 / 720,
                    (1 - (a_ / 2) / np.tan(a_ / 2)) / (a_ * a_))
    ginv = np.eye(3) - k / 2 + coef[:, None, None] * k2
    v = np.einsum("nij,nj->ni", ginv, t[:, :3, 3])
    out = np.concatenate([w, v], axis=-1)
    return out.reshape(lead + (6,))


def adjoint(t):
    """6x6 adjoint of a transform: maps twists ``(w, v)`` from one frame to another.

    ``Ad(T) = [[R, 0], [[p] R, R]]`` (ref. 1, eq. 2.58 with angular part first).
    """
    t = np.asarray(t, dtype=float)
    r = t[..., :3, :3]
    p = t[..., :3, 3]
    out = np.zeros(t.shape[:-2] + (6, 6))
    out[..., :3, :3] = r
    out[..., 3:, 3:] = r
    out[..., 3:, :3] = hat(p) @ r
    return out


def inverse(t):
    """Inverse of rigid transforms without a general matrix inverse."""
    t = np.asarray(t, dtype=float)
    out = np.zeros_like(t)
    rt = np.swapaxes(t[..., :3, :3], -1, -2)
    out[..., :3, :3] = rt
    out[..., :3, 3] = -np.einsum("...ij,...j->...i", rt, t[..., :3, 3])
    out[..., 3, 3] = 1.0
    return out


def translation(p):
    """Pure translation transform by vector ``p``."""
    p = np.asarray(p, dtype=float)
    out = np.zeros(p.shape[:-1] + (4, 4))
    out[..., :3, :3] = np.eye(3)
    out[..., :3, 3] = p
    out[..., 3, 3] = 1.0
    return out


def to_homogeneous(p):
    """Cartesian points (..., 3) to homogeneous (..., 4) with w = 1."""
    p = np.asarray(p, dtype=float)
    if p.shape[-1] != 3:
        raise JointwiseError(f"expected points of shape (..., 3), got {p.shape}")
    return np.concatenate([p, np.ones(p.shape[:-1] + (1,))], axis=-1)


def from_homogeneous(h):
    """Homogeneous points (..., 4) to Cartesian (..., 3).

    Raises ``JointwiseError`` where ``w`` is 0: such a vector is a direction, not a point.
    """
    h = np.asarray(h, dtype=float)
    if h.shape[-1] != 4:
        raise JointwiseError(f"expected homogeneous points of shape (..., 4), got {h.shape}")
    w = h[..., 3:]
    if np.any(np.abs(w) < 1e-300):
        raise JointwiseError("homogeneous w = 0: this is a direction, not a point")
    return h[..., :3] / w
