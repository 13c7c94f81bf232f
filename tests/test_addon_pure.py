"""The extension's pure modules (addon/convert.py, addon/keys.py) tested without Blender.

They import no bpy, so they load straight from their files here. Rotations are checked
against scipy.spatial.transform.Rotation (an independent implementation)."""
from __future__ import annotations

import ast
import importlib.util
import math
import pathlib

import numpy as np
import pytest

ADDON = pathlib.Path(__file__).resolve().parents[1] / "addon"


def _load(name):
    spec = importlib.util.spec_from_file_location(f"jointwise_addon_{name}", ADDON / f"{name}.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


convert = _load("convert")
keys = _load("keys")
Rotation = pytest.importorskip("scipy.spatial.transform").Rotation


@pytest.mark.parametrize("name", ["convert", "keys"])
def test_pure_modules_import_no_host(name):
    tree = ast.parse((ADDON / f"{name}.py").read_text())
    mods = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            mods |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            assert node.level == 0, f"{name}.py: relative import (pure modules stand alone)"
            mods.add(node.module.split(".")[0])
    assert not mods & {"bpy", "mathutils", "bmesh", "bpy_extras"}, mods


def random_rotations(n, seed):
    return Rotation.random(n, random_state=seed).as_matrix()


def test_quaternions_match_scipy_up_to_sign():
    r = random_rotations(200, 3)
    q = keys.quaternions_from_rotations(r)
    ref = Rotation.from_matrix(r).as_quat()[:, [3, 0, 1, 2]]  # scipy: x, y, z, w
    d = np.abs(np.einsum("ij,ij->i", q, ref))
    assert np.allclose(d, 1.0, atol=1e-12)


@pytest.mark.parametrize("order", ["XYZ", "XZY", "YXZ", "YZX", "ZXY", "ZYX"])
def test_eulers_match_scipy_extrinsic(order):
    # the host's Euler order 'XYZ' applies X first about fixed axes: R = Rz Ry Rx, which
    # is scipy's extrinsic lower-case sequence 'xyz' with the angles in the same order
    r = random_rotations(100, 5)
    e = keys.eulers_from_rotations(r, order)
    idx = ["XYZ".index(c) for c in order]
    rebuilt = Rotation.from_euler(order.lower(), e[:, idx]).as_matrix()
    assert np.abs(rebuilt - r).max() < 1e-10


def test_continuous_quaternions_and_eulers_never_jump():
    t = np.linspace(0, 6 * math.pi, 400)
    r = Rotation.from_rotvec(np.outer(t, [0.3, 0.5, 0.81])).as_matrix()
    q = keys.continuous_quaternions(keys.quaternions_from_rotations(r))
    assert np.einsum("ij,ij->i", q[1:], q[:-1]).min() > 0.99
    e = keys.continuous_eulers(keys.eulers_from_rotations(r, "XYZ"), order="XYZ")
    assert np.abs(np.diff(e, axis=0)).max() < 0.2
    rebuilt = Rotation.from_euler("xyz", e).as_matrix()
    assert np.abs(rebuilt - r).max() < 1e-9


def test_axis_angle_through_the_identity_stays_continuous():
    t = np.radians(np.linspace(-40, 40, 81))
    r = Rotation.from_rotvec(np.outer(t, [0, 0, 1])).as_matrix()
    ang, axis = keys.continuous_axis_angles(keys.quaternions_from_rotations(r))
    assert np.abs(np.diff(ang)).max() < math.radians(1.01)
    assert np.allclose(Rotation.from_rotvec(axis * ang[:, None]).as_matrix(), r, atol=1e-12)


def test_channels_rebuild_the_basis():
    r = random_rotations(30, 9)
    basis = np.tile(np.eye(4), (30, 1, 1))
    basis[:, :3, :3] = r
    basis[:, :3, 3] = np.arange(90).reshape(30, 3)
    ch = keys.channels_from_basis(basis, "QUATERNION")
    q = np.stack([ch[("rotation_quaternion", i)] for i in range(4)], axis=1)
    assert np.allclose(Rotation.from_quat(q[:, [1, 2, 3, 0]]).as_matrix(), r, atol=1e-12)
    assert np.allclose(np.stack([ch[("location", i)] for i in range(3)], axis=1), basis[:, :3, 3])


def test_inverse_matches_numpy_and_refuses_zero_scale():
    rng = np.random.default_rng(1)
    for rigid in (True, False):
        m = np.eye(4)
        m[:3, :3] = random_rotations(1, 2)[0] @ (np.eye(3) if rigid else np.diag(rng.uniform(0.5, 3, 3)))
        m[:3, 3] = rng.normal(size=3)
        assert np.allclose(convert.inverse(m), np.linalg.inv(m), atol=1e-12)
    m = np.diag([1.0, 0.0, 1.0, 1.0])
    assert convert.is_singular(m)
    with pytest.raises(convert.SceneError, match="scaled to zero"):
        convert.inverse(m)


def test_shear_is_found_only_where_keys_cannot_follow():
    rot = Rotation.from_euler("z", 30, degrees=True).as_matrix()
    good = np.eye(4)
    good[:3, :3] = rot @ np.diag([1, 2, 3])  # rotation then scale: keys express it
    assert not convert.shears(good)
    bad = np.eye(4)
    bad[:3, :3] = np.diag([1, 2, 1]) @ rot  # a non-uniform parent scale under a rotated child
    assert convert.shears(bad)


def test_units_and_messages():
    # 1 mm file unit into a scene whose unit is 1 mm (scale_length 0.001): factor 1
    assert convert.length_file_to_host("mm", 0.001) == pytest.approx(1.0)
    assert convert.length_file_to_host("in", 1.0) == pytest.approx(0.0254)  # 1 in = 25.4 mm (exact, 1959)
    assert convert.display_length("METRIC", "MILLIMETERS", 1.0) == ("mm", 1000.0)
    assert convert.display_length("NONE", "MILLIMETERS", 1.0) == ("BU", 1.0)
    assert convert.format_value(math.radians(51.6), "angle") == "51.6°"
    assert convert.format_value(0.0125, "length", ("mm", 1000.0)) == "12.5 mm"
    # many turns in full, as typed (not 4.5e+04°)
    assert convert.format_value(math.radians(45000.0), "angle") == "45000°"
    assert convert.format_value(8.5265e-15, "length", ("mm", 1000.0)) == "0 mm"   # rounding noise
    assert convert.format_value(-1e-13, "angle") == "0°"                          # no "-0°"
    assert convert.format_value(2e-8, "length", ("mm", 1.0)) == "2e-08 mm"        # small, not noise
    assert convert.format_value(-2.5, "length", ("mm", 1e5)) == "-250000 mm"


# The extension's layers, bottom to top: a module imports only from earlier layers
# (measures, fit and clearance are placed for the modules other work adds).
from test_layers import ADDON_LAYERS  # noqa: E402  (the one list of the extension's layers)


def test_addon_imports_point_down_the_layers():
    layer = {m: i for i, ms in enumerate(ADDON_LAYERS) for m in ms}
    for path in sorted(ADDON.glob("*.py")):
        name = path.stem
        if name == "package":
            continue  # a build script, not part of the extension
        assert name in layer, f"addon/{path.name}: give it a place in ADDON_LAYERS"
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and node.level == 1:
                targets = [node.module] if node.module else [a.name for a in node.names]
                for t in targets:
                    t = t.split(".")[0]
                    assert layer[t] < layer[name] or (t == name), \
                        f"addon/{path.name}:{node.lineno} imports {t} (layer {layer[t]} >= {layer[name]})"


def test_failure_words_from_the_structured_reason():
    """The extension words a core failure from its Reason's fields in display units (no
    rewriting of the core's text); values given in the scene mechanism's radians."""
    from jointwise.errors import LimitError, Reason
    deg = lambda name, v: convert.format_value(v, "angle")
    lim = Reason("limit", joint="crank", value=math.radians(70.0),
                 bounds=(math.radians(-60.0), math.radians(60.0)), unit="rad")
    assert convert.reason_text(lim, deg) == "crank = 70° lies outside its limits [-60°, 60°]"
    solved = Reason("limit", joint="rocker", value=math.radians(61.0),
                    bounds=(math.radians(-60.0), math.radians(60.0)), unit="rad", held=False)
    assert convert.reason_text(solved, deg) == (
        "the closed placement puts rocker at 61°, outside its limits [-60°, 60°]")
    far = Reason("unreachable", joint="crank", loop="pin_c", bounds=(0.0, math.radians(46.812)),
                 unit="rad", error=1e-3)
    assert convert.reason_text(far, deg) == (
        "the loop closed by joint 'pin_c' cannot close; crank keeps it closed only up to about 46.81°")
    # the error object carries the same reason; a reason without its fields gives None
    assert convert.reason_text(LimitError(reason=lim).reason, deg).startswith("crank = 70°")
    assert convert.reason_text(Reason("unreachable", joint="crank", loop="pin_c"), deg) == (
        "the loop closed by joint 'pin_c' cannot close with crank there")
    assert convert.reason_text(Reason("unreachable"), deg) is None
    assert convert.reason_text(None, deg) is None


def test_failure_words_in_display_units_from_the_fields():
    """Angles in degrees and lengths in the display unit, from the reason's fields (the
    scene mechanism's radians and scene units), never from the core's text; hand-worked:
    1.5707963 rad = 90°, 1 rad = 57.2958°, 0.25 BU at 1000 mm per BU = 250 mm."""
    from jointwise.errors import LimitError, Reason
    kinds = {"c": "angle", "slide": "length"}
    text = lambda name, v: convert.format_value(v, kinds[name], ("mm", 1000.0))  # noqa: E731
    assert convert.reason_text(Reason("limit", joint="c", value=1.5707963, bounds=(-1.0, 1.0), unit="rad"),
                               text) == "c = 90° lies outside its limits [-57.3°, 57.3°]"
    assert convert.reason_text(Reason("limit", joint="slide", value=0.25, bounds=(-0.048, 0.008), unit="m"),
                               text) == "slide = 250 mm lies outside its limits [-48 mm, 8 mm]"
    far = Reason("unreachable", joint="slide", loop="nut", bounds=(0.0, 0.0125), unit="m", error=1e-3)
    assert convert.reason_text(far, text) == (
        "the loop closed by joint 'nut' cannot close; slide keeps it closed only up to about 12.5 mm")
    # a solved coordinate stopped at its limit on the way (the core's value is the limit)
    stop = Reason("limit", joint="slide", value=0.06, bounds=(-0.01, 0.06), unit="m", held=False,
                  on_path=True)
    assert convert.reason_text(stop, text) == (
        "on the way there slide reaches its limit 60 mm (limits [-10 mm, 60 mm])")
    # a limit failure naming the coordinate but not its numbers: bounds from the scene's limits
    bare = LimitError("the core's text in radians", joint="c").reason
    assert convert.reason_text(bare, text) is None
    assert convert.reason_text(bare, text, lambda name: (-1.0, 1.0)) == (
        "the closed placement puts c outside its limits [-57.3°, 57.3°]")
    assert convert.reason_text(bare, text, lambda name: None) is None
    # a failure whose reason names only a coordinate (no loop, no numbers): the core's text
    assert convert.reason_text(Reason("unreachable", joint="c"), text) is None
    assert convert.reason_text(Reason("span", joint="c"), text) is None


def test_every_kind_of_failure_worded_from_its_fields():
    """Home, coupling, span and dead-point failures in display units from the fields (values
    in the scene mechanism's radians and scene units; the home angle in degrees, as the core
    gives it); hand-worked: 0.0021 BU at 1000 mm per BU = 2.1 mm."""
    from jointwise.errors import Reason
    kinds = {"c": "angle", "slide": "length"}
    text = lambda name, v: convert.format_value(v, kinds[name], ("mm", 1000.0))  # noqa: E731
    length = lambda v: convert.format_value(v, "length", ("mm", 1000.0))  # noqa: E731
    home = Reason("home", loop="d", value=0.0021, bounds=(0.0, 1e-3), unit="m", angle=(0.5, 0.0573))
    assert convert.reason_text(home, text, length_text=length) == (
        "the loop closed by joint 'd' does not close at home: gap 2.1 mm and 0.5° "
        "(assembly tolerance 1 mm, 0.0573°)")
    assert convert.reason_text(home, text) is None  # no length words given: the core's text
    assert convert.reason_text(Reason("home", loop="d", error=0.1), text) == (
        "the loop closed by joint 'd' could not be settled at home")
    off = Reason("coupling", coupling="gear", joint="c", value=math.radians(2.0),
                 bounds=(0.0, math.radians(0.01)), unit="rad", loop="d")
    assert convert.reason_text(off, text) == ("coupling 'gear' does not hold at home: c is off by 2° "
                                              "(assembly tolerance 0.01°); it feeds the loop closed by joint 'd'")
    assert convert.reason_text(Reason("coupling", joint="c", other="slide"), text) == (
        "c follows a motion law and cannot be held; hold its leader slide instead")
    both = Reason("coupling", joint="c", other="slide", value=math.radians(30.0),
                  bounds=(math.radians(20.0), math.radians(20.0)), unit="rad")
    assert convert.reason_text(both, text) == (
        "the held values of c and slide contradict their coupling: c = 30° asked, the coupling gives 20°")
    far = Reason("span", joint="c", value=math.radians(7200.0),
                 bounds=(math.radians(-100.0), math.radians(500.0)), unit="rad")
    assert convert.reason_text(far, text) == (
        "c = 7200° is too far from the placement shown to follow in one move (from there: -100° to "
        "500°); set it in steps")
    dead = Reason("singular", joint="slide", value=0.04578, bounds=(-0.01526, 0.04578), unit="m")
    assert convert.reason_text(dead, text) == (
        "slide reaches a dead point at 45.78 mm (reachable from -15.26 mm to 45.78 mm)")
    assert convert.reason_text(Reason("singular", joint="c"), text) is None
    assert convert.reason_text(Reason("coupling"), text) is None


def test_point_text_drops_noise_below_the_digits_shown():
    # 80 mm in float32 carries about 5e-6 mm of rounding: a 2.9e-7 mm coordinate beside it is 0
    assert convert.point_text((0.08, 2.914e-10, 0.008), ("mm", 1000.0)) == "(80, 0, 8) mm"
    assert convert.point_text((0.001, -0.0025, 0.0), ("mm", 1000.0)) == "(1, -2.5, 0) mm"
    assert convert.point_text((12.0, 0.0011, 0.0)) == "(12, 0.0011, 0) BU"  # 1e-4 of 12: kept
    assert convert.point_text((12.0, 0.0005, 0.0)) == "(12, 0, 0) BU"      # below half a digit


def test_file_problems_are_shown_as_written_with_their_units_named():
    from jointwise.errors import SpecError
    plain = SpecError("axis has zero length", source="vise2.toml", key="joints.screw.axis")
    assert convert.spec_text(plain) == "vise2.toml: joints.screw.axis: axis has zero length"
    numbers = SpecError("lower limit 30 is above upper 10", source="vise.toml", key="joints.a.limits")
    assert convert.spec_text(numbers) == ("vise.toml: joints.a.limits: lower limit 30 is above upper 10 "
                                          "(numbers as in the file, in its own units)")
    assert convert.spec_text(numbers, "numbers in radians and scene units").endswith(
        "upper 10 (numbers in radians and scene units)")
    assert not hasattr(convert, "message_core_to_host")  # no rewriting of the core's text
