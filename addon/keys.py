"""Key-continuity maths, pure numpy (no ``bpy``): rotation matrices to quaternion,
Euler and axis-angle channels that never jump between consecutive keys.

Quaternions are made continuous by sign (q and -q are the same turn), Euler angles are
unwrapped so consecutive keys never jump by a full turn (compatible Euler), axis-angle
comes from the continuous quaternions.
"""
from __future__ import annotations

import math

import numpy as np


def quaternions_from_rotations(r):
    """Unit quaternions (w, x, y, z), shape (N, 4), of rotation matrices (N, 3, 3)
    (Shepperd's method: pick the largest of w, x, y, z to divide by)."""
    r = np.asarray(r, dtype=float)
    n = r.shape[0]
    tr = r[:, 0, 0] + r[:, 1, 1] + r[:, 2, 2]
    cand = np.stack([tr, r[:, 0, 0], r[:, 1, 1], r[:, 2, 2]], axis=1)
    k = np.argmax(cand, axis=1)
    q = np.empty((n, 4))
    i = k == 0
    s = np.sqrt(np.maximum(1.0 + tr[i], 1e-300)) * 2
    q[i] = np.stack([0.25 * s, (r[i, 2, 1] - r[i, 1, 2]) / s, (r[i, 0, 2] - r[i, 2, 0]) / s,
                     (r[i, 1, 0] - r[i, 0, 1]) / s], axis=1)
    i = k == 1
    s = np.sqrt(np.maximum(1.0 + r[i, 0, 0] - r[i, 1, 1] - r[i, 2, 2], 1e-300)) * 2
    q[i] = np.stack([(r[i, 2, 1] - r[i, 1, 2]) / s, 0.25 * s, (r[i, 0, 1] + r[i, 1, 0]) / s,
                     (r[i, 0, 2] + r[i, 2, 0]) / s], axis=1)
    i = k == 2
    s = np.sqrt(np.maximum(1.0 + r[i, 1, 1] - r[i, 0, 0] - r[i, 2, 2], 1e-300)) * 2
    q[i] = np.stack([(r[i, 0, 2] - r[i, 2, 0]) / s, (r[i, 0, 1] + r[i, 1, 0]) / s, 0.25 * s,
                     (r[i, 1, 2] + r[i, 2, 1]) / s], axis=1)
    i = k == 3
    s = np.sqrt(np.maximum(1.0 + r[i, 2, 2] - r[i, 0, 0] - r[i, 1, 1], 1e-300)) * 2
    q[i] = np.stack([(r[i, 1, 0] - r[i, 0, 1]) / s, (r[i, 0, 2] + r[i, 2, 0]) / s,
                     (r[i, 1, 2] + r[i, 2, 1]) / s, 0.25 * s], axis=1)
    return q / np.linalg.norm(q, axis=1, keepdims=True)


def continuous_quaternions(q, previous=None):
    """Flip signs so that consecutive quaternions have a non-negative dot product."""
    q = np.array(q, dtype=float)
    if len(q) == 0:
        return q
    d = np.einsum("ij,ij->i", q[1:], q[:-1])
    flips = np.concatenate([[1.0], np.where(d < 0, -1.0, 1.0)])
    if previous is not None and float(np.dot(q[0], previous)) < 0:
        flips[0] = -1.0
    return q * np.cumprod(flips)[:, None]


_AXIS = {"X": 0, "Y": 1, "Z": 2}


def eulers_from_rotations(r, order):
    """Euler angles (N, 3), in the X, Y, Z slots of ``rotation_euler``, for Blender's
    ``order`` (e.g. 'XYZ': R = Rz @ Ry @ Rx, X applied first)."""
    i, j, k = (_AXIS[c] for c in order)
    s = 1.0 if (i, j, k) in ((0, 1, 2), (1, 2, 0), (2, 0, 1)) else -1.0
    r = np.asarray(r, dtype=float)
    sb = np.clip(-s * r[:, k, i], -1.0, 1.0)
    b = np.arcsin(sb)
    cb = np.sqrt(r[:, k, j] ** 2 + r[:, k, k] ** 2)
    ok = cb > 1e-9
    a = np.where(ok, np.arctan2(s * r[:, k, j], r[:, k, k]), np.arctan2(-s * r[:, j, k], r[:, j, j]))
    c = np.where(ok, np.arctan2(s * r[:, j, i], r[:, i, i]), 0.0)
    out = np.empty((len(r), 3))
    out[:, i], out[:, j], out[:, k] = a, b, c
    return out


def continuous_eulers(e, previous=None, order="XYZ"):
    """Compatible Euler angles: consecutive keys never jump by a full turn, nor flip to
    the other equivalent triple (a + pi, pi - b, c + pi) - the one that shows up when
    the middle angle passes +-90 degrees."""
    e = np.asarray(e, dtype=float)
    if len(e) == 0:
        return e
    e = e.copy()
    if previous is not None:
        prev = np.asarray(previous, dtype=float)
        e[0] += 2 * math.pi * np.round((prev - e[0]) / (2 * math.pi))
    out = np.unwrap(e, axis=0) if len(e) > 1 else e
    if len(e) < 2 or np.abs(np.diff(out, axis=0)).max() < math.pi / 2:
        return out  # the usual case: no flip, nothing more to do
    i, j, k = (_AXIS[c] for c in order)
    alt = e.copy()
    alt[:, i] += math.pi
    alt[:, j] = math.pi - alt[:, j]
    alt[:, k] += math.pi
    two_pi = 2 * math.pi
    prev = out[0]
    if previous is not None:
        p = np.asarray(previous, dtype=float)
        a0 = alt[0] + two_pi * np.round((p - alt[0]) / two_pi)
        prev = a0 if np.abs(a0 - p).sum() < np.abs(out[0] - p).sum() else out[0]
    res = np.empty_like(e)
    res[0] = prev
    for n in range(1, len(e)):  # sequential, but only for curves that need it
        c1 = e[n] + two_pi * np.round((prev - e[n]) / two_pi)
        c2 = alt[n] + two_pi * np.round((prev - alt[n]) / two_pi)
        prev = c1 if np.abs(c1 - prev).sum() <= np.abs(c2 - prev).sum() else c2
        res[n] = prev
    return res


def continuous_axis_angles(q, previous=None):
    """Angles (N,) and axes (N, 3) of unit quaternions, continuous from frame to frame.

    Through the identity the axis of ``2 atan2(|v|, w)`` flips; keeping each axis on the
    side of the one before (and negating the angle with it), holding the axis where the
    turn is zero, and unwrapping the angle by whole turns gives curves without jumps.
    ``previous`` is the object's current (angle, x, y, z), the side to start on."""
    v = np.linalg.norm(q[:, 1:], axis=1)
    ang = 2 * np.arctan2(v, q[:, 0])
    axis = q[:, 1:] / np.where(v > 1e-12, v, 1.0)[:, None]
    prev_axis = None
    prev_ang = None
    if previous is not None and np.linalg.norm(previous[1:]) > 1e-12:
        prev_axis = previous[1:] / np.linalg.norm(previous[1:])
        prev_ang = float(previous[0])
    for i in range(len(ang)):
        if v[i] <= 1e-12:
            axis[i] = prev_axis if prev_axis is not None else (0.0, 0.0, 1.0)
        elif prev_axis is not None and float(axis[i] @ prev_axis) < 0:
            axis[i] = -axis[i]
            ang[i] = -ang[i]
        if prev_ang is not None:
            ang[i] += 2 * np.pi * np.round((prev_ang - ang[i]) / (2 * np.pi))
        prev_axis, prev_ang = axis[i], ang[i]
    return ang, axis


def channels_from_basis(basis, mode, quaternion=None, axis_angle=None, euler=None):
    """{(data_path, index): values (N,)} of location and rotation keys for an object with
    ``rotation_mode`` ``mode`` whose local matrices are ``basis`` (N, 4, 4); ``quaternion``,
    ``axis_angle``, ``euler``: its current rotation, the side to start on."""
    loc = basis[:, :3, 3]
    m3 = basis[:, :3, :3]
    scale = np.linalg.norm(m3, axis=1)  # column norms
    rot = m3 / np.where(scale > 0, scale, 1.0)[:, None, :]
    det = np.linalg.det(rot)
    rot = rot * np.where(det < 0, -1.0, 1.0)[:, None, None]
    ch = {("location", i): loc[:, i] for i in range(3)}
    if mode in ("QUATERNION", "AXIS_ANGLE"):
        q = quaternions_from_rotations(rot)
        prev = np.asarray(quaternion, float) if mode == "QUATERNION" and quaternion is not None else None
        q = continuous_quaternions(q, prev)
        if mode == "QUATERNION":
            for i in range(4):
                ch[("rotation_quaternion", i)] = q[:, i]
        else:
            ang, axis = continuous_axis_angles(q, None if axis_angle is None else np.asarray(axis_angle, float))
            ch[("rotation_axis_angle", 0)] = ang
            for i in range(3):
                ch[("rotation_axis_angle", i + 1)] = axis[:, i]
    else:
        e = continuous_eulers(eulers_from_rotations(rot, mode), None if euler is None else np.asarray(euler, float), mode)
        for i in range(3):
            ch[("rotation_euler", i)] = e[:, i]
    return ch
