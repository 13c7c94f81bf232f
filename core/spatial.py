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

import math

import numpy as np

from .errors import JointwiseError

__all__ = [
    "hat", "vee", "twist_matrix", "screw_axis", "exp3", "exp6", "log3", "log6",
    "screw_powers", "exp_unit", "adjoint", "inverse", "to_homogeneous", "from_homogeneous", "translation",
    "cross", "compose_rp", "inverse_rp", "log_rp", "adjoint_apply", "ad", "UnitScrew",
    "log3_derivative_inverse",
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
_EYE3 = np.eye(3)


def log3(r):
    """Rotation vector of a rotation matrix (inverse of :func:`exp3`), angle in [0, pi].

    The angle is ``atan2(|s|, (tr R - 1) / 2)`` with ``s`` the skew part, accurate over
    the whole range; near pi the axis is read from the symmetric part, where the skew
    part vanishes, and its sign from the skew part.
    """
    r = np.asarray(r, dtype=float)
    if r.shape == (3, 3):  # one rotation up to about 8 deg: the scalar series
        w = _log3_rows(r.tolist())
        if w is not None:
            return np.array(w[:3])
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


def log3_derivative_inverse(phi):
    """Inverse right Jacobian of SO(3) at rotation vector ``phi`` (3,):
    ``d log(E exp(-[w] t)) / dt = -J_r^-1(log E) w``.

    ``J_r^-1(p) = I + [p]/2 + (1/|p|^2 - (1 + cos|p|) / (2 |p| sin|p|)) [p]^2`` (G. S.
    Chirikjian, *Stochastic Models, Information Theory, and Lie Groups*, vol. 2, 2011,
    sec. 10.2), so a rotation error far from zero still gets its exact derivative."""
    phi = np.asarray(phi, dtype=float)
    a = float(math.sqrt(phi @ phi))
    k = hat(phi)
    if a < 1e-6:
        coef = 1.0 / 12.0 + a * a / 720.0
    elif a > math.pi - 1e-6:
        coef = 1.0 / (a * a)
    else:
        coef = 1.0 / (a * a) - (1.0 + math.cos(a)) / (2.0 * a * math.sin(a))
    return _EYE3 + 0.5 * k + coef * (k @ k)


def log6(t):
    """Twist ``(w, v)`` with ``exp6(twist) == t`` (ref. 2, sec. 3.3.3.2); |w| <= pi.

    One transform (4, 4) takes a scalar fast path; stacks go through :func:`log_rp`."""
    t = np.asarray(t, dtype=float)
    if t.shape == (4, 4):
        return np.concatenate(_log_one(t))
    lead = t.shape[:-2]
    t = t.reshape((-1, 4, 4))
    w, v = log_rp(t[:, :3, :3], t[:, :3, 3])
    return np.concatenate([w, v], axis=-1).reshape(lead + (6,))


def _log_one(t):
    """(w, v) of one rigid transform: the scalar fast path of :func:`log6`."""
    out = log_rows(np.asarray(t, dtype=float).tolist())
    if out is None:
        w, v = log_rp(t[None, :3, :3], t[None, :3, 3])
        return w[0], v[0]
    return np.array(out[:3]), np.array(out[3:])


def log_rows(t):
    """``(w0, w1, w2, v0, v1, v2)`` of one rigid transform given as nested lists (rows of
    a 4x4), in plain floats; None where the rotation is larger than about 8 deg (use
    :func:`log_rp` there).  The series of the general formula is accurate to machine
    precision in that range (the scalar fast path of :func:`log6`)."""
    rot = _log3_rows(t)
    if rot is None:
        return None
    w0, w1, w2, ang = rot
    r0, r1, r2 = t[0], t[1], t[2]
    if ang < 1e-4:
        coef = 1 / 12 + ang * ang / 720
    else:
        coef = (1 - (ang / 2) / math.tan(ang / 2)) / (ang * ang)
    p0, p1, p2 = r0[3], r1[3], r2[3]
    a0, a1, a2 = w1 * p2 - w2 * p1, w2 * p0 - w0 * p2, w0 * p1 - w1 * p0
    b0, b1, b2 = w1 * a2 - w2 * a1, w2 * a0 - w0 * a2, w0 * a1 - w1 * a0
    return (w0, w1, w2, p0 - 0.5 * a0 + coef * b0, p1 - 0.5 * a1 + coef * b1, p2 - 0.5 * a2 + coef * b2)


def _log3_rows(r):
    """``(w0, w1, w2, angle)`` of one rotation given as nested lists (rows; a 4x4's upper
    left block is read), in plain floats; None where the rotation is larger than about
    8 deg.  ``w = asin(|s|) s / |s|`` from the skew part ``s``, exact in that range."""
    r0, r1, r2 = r[0], r[1], r[2]
    c = (r0[0] + r1[1] + r2[2] - 1.0) / 2.0
    if c <= 0.99:
        return None
    k0, k1, k2 = (r2[1] - r1[2]) / 2.0, (r0[2] - r2[0]) / 2.0, (r1[0] - r0[1]) / 2.0
    s = math.sqrt(k0 * k0 + k1 * k1 + k2 * k2)
    ang = math.asin(min(1.0, s))
    f = ang / s if s > 1e-300 else 1.0
    return k0 * f, k1 * f, k2 * f, ang


def cross(a, b):
    """Cross products of stacked 3-vectors (broadcasting), cheaper than ``np.cross``."""
    return np.stack([a[..., 1] * b[..., 2] - a[..., 2] * b[..., 1],
                     a[..., 2] * b[..., 0] - a[..., 0] * b[..., 2],
                     a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]], axis=-1)


def compose_rp(a, b):
    """``A @ B`` of rigid motions held as (R (B, 3, 3), p (B, 3)) pairs."""
    ra, pa = a
    rb, pb = b
    return ra @ rb, (ra @ pb[:, :, None])[:, :, 0] + pa


def inverse_rp(a):
    """Inverse of rigid motions held as (R, p) pairs."""
    r, p = a
    rt = np.swapaxes(r, 1, 2)
    return rt, -(rt @ p[:, :, None])[:, :, 0]


def log_rp(R, p):
    """Twists (w (B, 3), v (B, 3)) of rigid motions (R (B, 3, 3), p (B, 3)), inverse of the
    screw-motion formula (ref. 2, sec. 3.3.3.2): ``w`` from :func:`log3`'s rules (angle by
    atan2 over the whole range, the symmetric part near pi), ``v = G^-1 p`` with
    ``G^-1 = I - [w]/2 + (1 - (a/2) cot(a/2)) [w]^2 / a^2``."""
    sk = 0.5 * np.stack([R[:, 2, 1] - R[:, 1, 2], R[:, 0, 2] - R[:, 2, 0], R[:, 1, 0] - R[:, 0, 1]], axis=-1)
    s = np.sqrt((sk * sk).sum(axis=-1))
    c = (R[:, 0, 0] + R[:, 1, 1] + R[:, 2, 2] - 1.0) / 2.0
    ang = np.arctan2(s, c)
    small = ang < 1e-4
    f = np.where(small, 1.0 + ang * ang / 6.0, ang / np.where(s > 0, s, 1.0))
    w = sk * f[:, None]
    far = ang > 2.5
    if far.any():  # near pi: the skew part vanishes; the axis comes from the symmetric part
        w[far] = log3(R[far])
        ang = np.sqrt((w * w).sum(axis=-1))
        small = ang < 1e-4
    a_ = np.where(small, 1.0, ang)
    coef = np.where(small, 1 / 12 + ang ** 2 / 720, (1 - (a_ / 2) / np.tan(a_ / 2)) / (a_ * a_))
    wp = cross(w, p)
    return w, p - 0.5 * wp + coef[:, None] * cross(w, wp)


def compose_soa(a, b):
    """Rigid products ``a b`` of stacks held component-first: (3, 4, ...) the top rows of
    4x4 transforms, each entry an array over the stack (elementwise, no tiny matrix products)."""
    out = a[:, 0, None] * b[0]
    out += a[:, 1, None] * b[1]
    out += a[:, 2, None] * b[2]
    out[:, 3] += a[:, 3]
    return out


def inverse_soa(t):
    """Inverses of rigid motions held component-first (3, 4, ...): ``(R^T, -R^T p)``."""
    out = np.empty_like(t)
    out[:, :3] = np.swapaxes(t[:, :3], 0, 1)
    out[:, 3] = -(out[:, 0] * t[0, 3] + out[:, 1] * t[1, 3] + out[:, 2] * t[2, 3])
    return out


def log_soa(T):
    """:func:`log_rp` of rigid motions held component-first: ``T`` (3, 4, ...) the top rows
    of 4x4 transforms, each entry an array over the stack.  Returns ``(w, v)``, each
    (3, ...), by the same rules (elementwise; the few rotations near pi through
    :func:`log3`)."""
    r = T
    k0 = 0.5 * (r[2, 1] - r[1, 2])
    k1 = 0.5 * (r[0, 2] - r[2, 0])
    k2 = 0.5 * (r[1, 0] - r[0, 1])
    s = np.sqrt(k0 * k0 + k1 * k1 + k2 * k2)
    c = (r[0, 0] + r[1, 1] + r[2, 2] - 1.0) / 2.0
    ang = np.arctan2(s, c)
    small = ang < 1e-4
    if small.all():  # every loop near closure (the usual case): the series terms alone
        f = 1.0 + ang * ang / 6.0
        w = np.stack([k0 * f, k1 * f, k2 * f])
        coef = 1 / 12 + ang ** 2 / 720
    else:
        f = np.where(small, 1.0 + ang * ang / 6.0, ang / np.where(s > 0, s, 1.0))
        w = np.stack([k0 * f, k1 * f, k2 * f])
        far = ang > 2.5
        if far.any():  # near pi: the skew part vanishes; the axis comes from the symmetric part
            w[:, far] = log3(np.moveaxis(r[:, :3][:, :, far], -1, 0)).T
            ang = np.sqrt((w * w).sum(axis=0))
            small = ang < 1e-4
        a_ = np.where(small, 1.0, ang)
        coef = np.where(small, 1 / 12 + ang ** 2 / 720, (1 - (a_ / 2) / np.tan(a_ / 2)) / (a_ * a_))
    p = r[:, 3]
    wp0 = w[1] * p[2] - w[2] * p[1]
    wp1 = w[2] * p[0] - w[0] * p[2]
    wp2 = w[0] * p[1] - w[1] * p[0]
    v = np.stack([p[0] - 0.5 * wp0 + coef * (w[1] * wp2 - w[2] * wp1),
                  p[1] - 0.5 * wp1 + coef * (w[2] * wp0 - w[0] * wp2),
                  p[2] - 0.5 * wp2 + coef * (w[0] * wp1 - w[1] * wp0)])
    return w, v


def adjoint_apply(R, p, X):
    """``Ad(R, p)`` applied to twists X: (k, 6) or (B, k, 6) -> (B, k, 6), without building
    the 6x6 matrices: ``(R w, R v + p x R w)`` (ref. 1, eq. 2.58)."""
    if X.ndim == 2:
        w = (R @ X[:, :3].T).transpose(0, 2, 1)
        v = (R @ X[:, 3:].T).transpose(0, 2, 1)
    else:
        w = R[:, None] @ X[:, :, :3, None]
        v = R[:, None] @ X[:, :, 3:, None]
        w, v = w[..., 0], v[..., 0]
    v = v + cross(np.broadcast_to(p[:, None, :], w.shape), w)
    return np.concatenate([w, v], axis=-1)


def ad(x, y):
    """Lie bracket of twists, ``[x, y] = ad_x y`` (stacks broadcast).

    With ``x = (w1, v1)``, ``y = (w2, v2)``: ``ad_x y = (w1 x w2, w1 x v2 + v1 x w2)``
    (ref. 2, definition 8.1; ref. 1, sec. 2.4); ``d/dt (Ad(T) y) = Ad(T) ad(V_body) y``."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    w1, v1, w2, v2 = x[..., :3], x[..., 3:], y[..., :3], y[..., 3:]
    return np.concatenate([cross(w1, w2), cross(w1, v2) + cross(v1, w2)], axis=-1)


class UnitScrew:
    """A unit screw at home turned by ``q - home``: the (R, p) form of :func:`exp_unit`.

    ``exp(q)`` gives stacks (R (B, 3, 3), p (B, 3)) for values q (B,):
    ``R = I + sin t [w] + (1 - cos t) [w]^2``, ``p = t v + (1 - cos t) [w] v + (t - sin t) [w]^2 v``
    (ref. 2, proposition 3.25); a slide (w = 0) gives ``(I, t v)``."""
    __slots__ = ("w", "v", "K", "K2", "Kv", "K2v", "rot", "h")

    def __init__(self, screw, home=0.0):
        self.w = np.array(screw[:3], dtype=float)
        self.v = np.array(screw[3:], dtype=float)
        self.rot = bool(np.linalg.norm(self.w) > 0.5)
        self.K = hat(self.w)
        self.K2 = self.K @ self.K
        self.Kv = self.K @ self.v
        self.K2v = self.K2 @ self.v
        self.h = float(home)

    def exp(self, q):
        t = q - self.h
        if not self.rot:
            return np.broadcast_to(_EYE3, (t.shape[0], 3, 3)), t[:, None] * self.v
        s, c = np.sin(t), 1.0 - np.cos(t)
        R = _EYE3 + s[:, None, None] * self.K + c[:, None, None] * self.K2
        p = t[:, None] * self.v + c[:, None] * self.Kv + (t - s)[:, None] * self.K2v
        return R, p


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
