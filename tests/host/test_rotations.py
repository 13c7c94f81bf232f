"""Rotation channels of the bake against mathutils (the host's own conversions)."""
from __future__ import annotations

import importlib
import math

import numpy as np
import pytest
from mathutils import Euler, Matrix, Quaternion


@pytest.fixture
def bake_module(installed):
    import importlib
    return importlib.import_module(installed + ".keys")


def random_rotations(n, seed=7):
    rng = np.random.default_rng(seed)
    q = rng.normal(size=(n, 4))
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    return [np.array(Quaternion(v).to_matrix()) for v in q]


@pytest.mark.parametrize("order", ["XYZ", "XZY", "YXZ", "YZX", "ZXY", "ZYX"])
def test_euler_from_matrix_rebuilds_the_matrix(bake_module, order):
    rs = random_rotations(50)
    e = bake_module.eulers_from_rotations(np.array(rs), order)
    for r, angles in zip(rs, e):
        back = np.array(Euler(angles, order).to_matrix())
        assert np.allclose(back, r, atol=2e-6)  # mathutils is float32


def test_quaternion_from_matrix_matches_mathutils(bake_module):
    rs = random_rotations(50, seed=3)
    q = bake_module.quaternions_from_rotations(np.array(rs))
    for r, v in zip(rs, q):
        ref = np.array(Matrix(r.tolist()).to_quaternion())
        assert np.allclose(v, ref, atol=2e-6) or np.allclose(v, -ref, atol=2e-6)


def test_continuity_helpers(bake_module):
    turns = np.linspace(0, 6 * math.pi, 200)
    rs = np.array([np.array(Euler((0, 0, t)).to_matrix()) for t in turns])
    q = bake_module.continuous_quaternions(bake_module.quaternions_from_rotations(rs))
    assert (np.einsum("ij,ij->i", q[1:], q[:-1]) > 0).all()
    e = bake_module.continuous_eulers(bake_module.eulers_from_rotations(rs, "XYZ"))
    assert np.allclose(e[:, 2], turns, atol=1e-9)


@pytest.mark.parametrize("mode", ["QUATERNION", "AXIS_ANGLE", "XYZ", "ZXY", "YZX"])
def test_channels_rebuild_the_basis_in_every_rotation_mode(bake_module, fresh, mode):
    import bpy
    obj = bpy.data.objects.new("probe", None)
    fresh.collection.objects.link(obj)
    obj.rotation_mode = mode
    rs = random_rotations(20, seed=11)
    basis = np.tile(np.eye(4), (len(rs), 1, 1))
    basis[:, :3, :3] = np.array(rs) * 1.5  # uniform scale 1.5 stays in the basis
    basis[:, :3, 3] = np.arange(60).reshape(20, 3) * 0.1
    ch = importlib.import_module(bake_module.__name__.rsplit(".", 1)[0] + ".bake").channels_for(obj, basis)
    path = {"QUATERNION": "rotation_quaternion", "AXIS_ANGLE": "rotation_axis_angle"}.get(mode, "rotation_euler")
    obj.scale = (1.5, 1.5, 1.5)
    for i in range(len(rs)):
        obj.location = [ch[("location", k)][i] for k in range(3)]
        n = 4 if mode in ("QUATERNION", "AXIS_ANGLE") else 3
        setattr(obj, path, [ch[(path, k)][i] for k in range(n)])
        assert np.allclose(np.array(obj.matrix_basis), basis[i], atol=1e-5), i


@pytest.mark.parametrize("order", ["XYZ", "ZXY", "YXZ"])
def test_euler_through_gimbal_stays_compatible(bake_module, order):
    """A turn about the middle axis through +-90 degrees: the raw decomposition flips to
    the other triple there; the keys must not (compared with mathutils' compatible Euler)."""
    mid = order[1]
    axis = {"X": (1, 0, 0), "Y": (0, 1, 0), "Z": (0, 0, 1)}[mid]
    first = {"X": (1, 0, 0), "Y": (0, 1, 0), "Z": (0, 0, 1)}[order[0]]
    ts = np.linspace(0, 2.5 * math.pi, 120)
    rs = np.array([np.array((Matrix.Rotation(t, 3, axis) @ Matrix.Rotation(0.3, 3, first))) for t in ts])
    e = bake_module.continuous_eulers(bake_module.eulers_from_rotations(rs, order), None, order)
    assert np.abs(np.diff(e, axis=0)).max() < 0.2
    for r, angles in zip(rs, e):
        assert np.allclose(np.array(Euler(angles, order).to_matrix()), r, atol=2e-6)


def test_axis_angle_keys_stay_continuous_through_the_identity(bake_module, fresh):
    # a rocker swinging -40 deg .. +40 deg about z passes through no turn at all; the
    # axis must not flip there (Blender's own AxisAngle convention: axis (x, y, z), angle)
    import bpy
    obj = bpy.data.objects.new("swing", None)
    fresh.collection.objects.link(obj)
    obj.rotation_mode = "AXIS_ANGLE"
    turns = np.radians(np.concatenate([np.linspace(-40, 40, 41), np.linspace(40, -40, 41)]))
    basis = np.tile(np.eye(4), (len(turns), 1, 1))
    basis[:, :3, :3] = [np.array(Euler((0, 0, t)).to_matrix()) for t in turns]
    ch = importlib.import_module(bake_module.__name__.rsplit(".", 1)[0] + ".bake").channels_for(obj, basis)
    ang = ch[("rotation_axis_angle", 0)]
    axis = np.stack([ch[("rotation_axis_angle", i)] for i in (1, 2, 3)], axis=1)
    assert (np.einsum("ij,ij->i", axis[1:], axis[:-1]) > 0.999).all()
    assert np.abs(np.diff(ang)).max() < math.radians(2.5)
    for k in (0, 20, 40, 60):  # the keys still rebuild the rotation (mathutils as reference)
        back = np.array(Quaternion(axis[k], ang[k]).to_matrix())
        assert np.allclose(back, basis[k, :3, :3], atol=2e-6)
