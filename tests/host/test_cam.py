"""jointwise.cam_profile in real Blender on the Kittiwake index table sample.

The curve must hold the core's cam profile (jointwise.cam, itself checked against Norton's
pressure-angle formula and numerical curvature in tests/test_cam.py) placed on the cam
shaft: at any frame its world points are the profile turned by the leader's angle about
the shaft, in the plane of the follower, and the roller (on the follower's line of lift,
at the lift the law gives) touches it.
"""
from __future__ import annotations

import math

import bpy
import numpy as np
import pytest

from test_samples import build, open_sample


@pytest.fixture
def scene(installed):
    return open_sample("kittiwake_index")


def _world_points(obj):
    pts = np.array([p.co[:3] for p in obj.data.splines[0].points], dtype=float)
    mw = np.array(obj.matrix_world, dtype=float)
    return (mw @ np.c_[pts, np.ones(len(pts))].T).T[:, :3]


def test_cam_profile_curve_turns_with_the_shaft(scene):
    import jointwise
    from jointwise.cam import cam_profile
    r = bpy.ops.jointwise.cam_profile(coupling="marking_cam", base_radius=22.0, roller_radius=5.0, offset=0.0)
    assert r == {"FINISHED"}
    obj = bpy.data.objects["cam marking_cam"]
    assert obj.parent is not None and obj.parent.name == "index_driver"
    assert obj.data.splines[0].use_cyclic_u and len(obj.data.splines[0].points) == 360
    mech = jointwise.load(build.toml_path("kittiwake_index"))
    ref = cam_profile(mech, "marking_cam", 22.0, 5.0, 0.0, np.radians(np.arange(0.0, 360.0)))["profile"]
    jw = scene.jointwise
    for frame in (1, 17, 40, 77):
        scene.frame_set(frame)
        bpy.context.view_layer.update()
        theta = float(jw.joints["drive_shaft"].value)         # radians in the scene
        got = _world_points(obj)
        c, s = math.cos(theta), math.sin(theta)
        want = np.c_[c * ref[:, 0] - s * ref[:, 1], s * ref[:, 0] + c * ref[:, 1], np.full(len(ref), 20.0)]
        assert np.allclose(got, want, atol=2e-3), frame
        # the roller (radius 5, on x = 0 at y = 27 + lift) touches the outline
        lift = float(mech.couplings["marking_cam"].law.evaluate(theta)[0])  # the slide is baked, not live
        centre = np.array([0.0, 27.0 + lift, 20.0])
        assert np.linalg.norm(got - centre, axis=1).min() == pytest.approx(5.0, abs=0.05), frame
    # again: replaced, not doubled
    assert bpy.ops.jointwise.cam_profile(coupling="marking_cam", base_radius=22.0, roller_radius=5.0) == {"FINISHED"}
    assert sum(1 for o in bpy.data.objects if o.get("jointwise_cam") == "marking_cam") == 1


@pytest.mark.parametrize("coupling, words", [("index", "geneva"), ("nope", "no coupling named")])
def test_cam_profile_refuses_and_writes_nothing(scene, coupling, words):
    before = set(bpy.data.objects.keys())
    with pytest.raises(RuntimeError, match=words):
        bpy.ops.jointwise.cam_profile(coupling=coupling, base_radius=22.0, roller_radius=5.0)
    assert set(bpy.data.objects.keys()) == before


def test_cam_profile_warns_of_a_steep_cam(scene):
    # the operator reports warnings but still draws; the pressure angle check is the core's
    assert bpy.ops.jointwise.cam_profile(coupling="marking_cam", base_radius=3.0, roller_radius=2.0) == {"FINISHED"}
    assert "cam marking_cam" in bpy.data.objects


def test_couplings_list_names_the_motion_laws(scene):
    """The couplings list shows a motion law by name, not the unused ratio (recorded draw
    calls, as in test_panels)."""
    import types
    from test_panels import Recorder
    log = []
    bpy.types.JOINTWISE_PT_couplings.draw(types.SimpleNamespace(layout=Recorder(log)), bpy.context)
    labels = [t for kind, t in log if kind == "label"]
    assert "table_spindle = geneva(drive_shaft)" in labels
    assert "marking_slide = program(drive_shaft)" in labels


def test_export_keeps_the_motion_laws(scene, tmp_path):
    """Import -> export: the Geneva and program couplings come back with their keys in the
    file's units (degrees, millimetres), and the exported file poses like the original."""
    import jointwise
    out = tmp_path / "kittiwake_out.toml"
    assert bpy.ops.jointwise.mechanism_export(filepath=str(out)) == {"FINISHED"}
    orig = jointwise.load(build.toml_path("kittiwake_index"))
    back = jointwise.load(out)
    assert back.couplings["index"].kind == "geneva" and back.couplings["index"].spec["slots"] == 6
    segs = back.couplings["marking_cam"].spec["segments"]
    want = orig.couplings["marking_cam"].spec["segments"]
    assert [s[4] for s in segs] == [s[4] for s in want]
    assert np.allclose([s[:4] for s in segs], [s[:4] for s in want], atol=1e-4)
    for v in (200.0, 30.0, 95.0):
        a, b = orig.pose({"drive_shaft": v}), back.pose({"drive_shaft": v})
        for c in ("table_spindle", "marking_slide"):
            assert b.joints[c] == pytest.approx(a.joints[c], abs=1e-4), (v, c)
