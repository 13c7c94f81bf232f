"""The Fennwick Row samples (blend_samples/): every .blend opens with its mechanism ready and
matching its mechanism file; its baked keys match the core's pose of the documented sweep;
the documented sweep converges and shows what the sample is for; rebuilding a sample from
its file reproduces the stored home placements; the coupler trace follows the core's
point measure.

References: Hooke's joint speed ratio w_out / w_in = cos(b) / (1 - sin^2(b) cos^2(t)),
between cos(b) and 1 / cos(b) (Shigley & Uicker, *Theory of Machines and Mechanisms*,
sec. on universal joints); a double Hooke's joint with equal angles and yokes in one
plane has ratio 1 (same source). Lead screw: advance = lead x turns (ISO 2904 Tr16x4:
4 mm; ISO 261 M16 coarse: 2 mm).
"""
from __future__ import annotations

import math
import pathlib
import sys

import bpy
import numpy as np
import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]


def _load_build():
    """blend_samples/build.py under a name of its own (``build`` is also a PyPI package)."""
    import importlib.util
    name = "jointwise_samples_build"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, ROOT / "blend_samples" / "build.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    spec.loader.exec_module(mod)
    return mod


build = _load_build()

LOC_TOL = 5e-3  # mm (= BU here); keys are float32, values up to ~900 mm
ROT_TOL = 1e-4


def open_sample(name):
    r = bpy.ops.wm.open_mainfile(filepath=str(build.blend_path(name)))
    assert r == {"FINISHED"}
    build.ensure_enabled()
    scene = bpy.context.scene
    assert scene.get("jointwise_sample") == name
    return scene


def scene_module():
    from bl_ext.user_default.jointwise import scene as sc
    return sc


@pytest.fixture(scope="module")
def core(installed):
    import jointwise
    return jointwise


@pytest.mark.parametrize("name", build.SAMPLES)
def test_sample_mechanism_matches_file(core, name):
    mech = core.load(build.toml_path(name))
    scene = open_sample(name)
    sc = scene_module()
    us = scene.unit_settings
    assert us.length_unit == 'MILLIMETERS' and us.scale_length == pytest.approx(0.001)
    jw = scene.jointwise
    assert jw.ground == mech.ground and jw.file_length_unit == mech.length_unit
    assert {l.name for l in jw.links} == set(mech.links)
    for link in jw.links:
        want = mech.links[link.name].object
        assert link.object is not None and link.object.name == want, link.name
        assert sc.object_alive(scene, link.object)
    firsts = sc.first_items(jw)
    assert set(firsts) == set(mech.joints)
    data = sc.mechanism_dict_from_scene(scene)["joints"]
    k = sc.length_file_to_host(scene, mech.length_unit)
    assert k == pytest.approx(1.0)  # mm file into a mm scene: 1:1
    for jname, j in mech.joints.items():
        d = data[jname]
        assert d["type"] == j.type and (d["parent"], d["child"]) == (j.parent, j.child), jname
        assert np.allclose(np.array(d["point"]) / k, j.point, atol=1e-4), jname
        assert np.allclose(d["axis"], j.axis, atol=1e-6), jname
        if j.axis2 is not None:
            assert np.allclose(d["axis2"], j.axis2, atol=1e-6), jname
        if j.type == "helical":
            assert firsts[jname].lead == pytest.approx(abs(float(j.lead)) * k, rel=1e-6)
    assert [it.name for it in jw.joints if it.drive] == mech.driven
    for it in jw.joints:  # limits too: a .blend older than its file shows here
        j = mech.joints[it.joint]
        lim = j.limits[it.slot - 1] if it.slot - 1 < len(j.limits) else None
        assert it.use_limits == (lim is not None), it.name
        if lim is not None:
            f = k if it.kind == "length" else 1.0
            assert (it.limit_min, it.limit_max) == pytest.approx((lim[0] * f, lim[1] * f), rel=1e-6), it.name
    text = bpy.data.texts["README"].as_string()
    assert "Fennwick Row" in text and f"{name}.toml" in text
    if name in build.CAUTIONED:
        assert "kinematics only" in text and "qualified engineer" in text
    assert scene.camera is not None and scene.render.engine == 'BLENDER_WORKBENCH'
    assert build.blend_path(name).stat().st_size < 400 * 1024


def documented(core, name, n):
    mech = core.load(build.toml_path(name))
    drive, a, b = build.documented_sweep(name)
    sw = mech.sweep(drive, np.linspace(a, b, n))
    return mech, drive, a, b, sw


@pytest.mark.parametrize("name", build.SAMPLES)
def test_sample_baked_keys_match_core(core, name):
    scene = open_sample(name)
    f0, f1 = scene.frame_start, scene.frame_end
    assert (f0, f1) == build.frame_range(name)
    mech, drive, a, b, sw = documented(core, name, f1 - f0 + 1)
    assert sw.converged.all()
    jw = scene.jointwise
    assert jw.live  # following the animation; the baked keys play (no live pose overrides them)
    homes = {l.name: np.array(l.home).reshape(4, 4) for l in jw.links}
    for f in sorted({f0, f0 + 1, (f0 + f1) // 2, f1 - 7, f1}):
        scene.frame_set(f)
        i = f - f0
        assert jw.joints[drive].value == pytest.approx(math.radians(sw.values[i]), abs=1e-4)
        for link in jw.links:
            if link.name == mech.ground:
                continue
            want = np.asarray(sw.links[link.name][i]) @ homes[link.name]  # mm = BU
            got = np.array(link.object.matrix_world)
            assert np.allclose(got[:3, :3], want[:3, :3], atol=ROT_TOL), (name, f, link.name)
            assert np.allclose(got[:3, 3], want[:3, 3], atol=LOC_TOL), (name, f, link.name)


def _jaw_travel(mech, sw):
    assert abs(sw.joints["jaw_slide"][-1] - sw.joints["jaw_slide"][0]) == pytest.approx(40.0, abs=1e-6)


def _foot_travel(mech, sw):
    assert abs(sw.joints["foot_slide"][-1] - sw.joints["foot_slide"][0]) == pytest.approx(100.0, abs=1e-6)
    h = sw.measures["deck_height"]
    assert np.all(np.diff(h) > 0)  # the deck rises all the way


def _crank_rocker(mech, sw):
    t = sw.measures["transmission"]
    assert 20 < t.min() < t.max() < 160  # never near a toggle
    r = sw.joints["rocker_pivot"]
    assert r[-1] == pytest.approx(r[0], abs=1e-6)  # one crank turn: the rocker is back


def _slider_crank(mech, sw):
    x = sw.joints["plunger_slide"]
    # offset slider-crank stroke: sqrt((l + r)^2 - e^2) - sqrt((l - r)^2 - e^2)
    r, l, e = 15.0, 60.0, 8.0
    assert np.ptp(x) == pytest.approx(math.sqrt((l + r) ** 2 - e ** 2) - math.sqrt((l - r) ** 2 - e ** 2), abs=1e-3)


def _hooke(mech, sw):
    w = sw.measures["speed_ratio"]
    c = math.cos(math.radians(30))
    assert w.min() == pytest.approx(c, abs=2e-3) and w.max() == pytest.approx(1 / c, abs=2e-3)


def _twin(mech, sw):
    assert np.allclose(sw.measures["speed_ratio"], 1.0, atol=1e-6)
    assert np.allclose(sw.joints["output_bearing"], sw.joints["input_bearing"], atol=1e-6)


def _index_table(mech, sw):
    # six-slot Geneva: 60 deg per crank turn; the wheel dwells over 1/2 + 1/6 of the turn and
    # peaks at lam / (1 - lam) = 1 times crank speed (lam = sin 30 deg), derived in test_couplings
    t = sw.joints["table_spindle"]
    assert t[-1] - t[0] == pytest.approx(120.0, abs=1e-9)
    r = sw.measures["index_ratio"]
    assert (np.abs(r) < 1e-12).mean() == pytest.approx(2 / 3, abs=0.02) and r.max() == pytest.approx(1.0, abs=1e-3)
    assert sw.joints["marking_slide"].min() == pytest.approx(0.0, abs=1e-12)
    assert sw.joints["marking_slide"].max() == pytest.approx(8.0, abs=1e-12)


SHOWS = {"linnet_vise": _jaw_travel, "plover_lift": _foot_travel, "wagtail_rocker": _crank_rocker,
         "dipper_pump": _slider_crank, "heron_shaft": _hooke, "heron_twin_shaft": _twin,
         "kittiwake_index": _index_table}


@pytest.mark.parametrize("name", build.SAMPLES)
def test_sample_documented_sweep_converges(core, name):
    mech, drive, a, b, sw = documented(core, name, 361)
    assert sw.converged.all(), (name, sw.reasons)
    for v in list(sw.joints.values()) + list(sw.measures.values()):
        assert np.all(np.isfinite(v))
    # sequential poses from home agree with the sweep (continuation on the same branch)
    prev = None
    for i in (0, 60, 120, 240, 360):
        pose = mech.pose({drive: float(sw.values[i])}, start=prev)
        assert pose.converged
        for link, d in pose.links.items():
            assert np.allclose(d, sw.links[link][i], atol=1e-6), (name, i, link)
        prev = pose
    SHOWS[name](mech, sw)


def test_rebuild_reproduces_home_placements(installed):
    name = "wagtail_rocker"
    scene = build.build_scene(name, frames=12, trace=False)
    fresh = build.home_placements(scene)
    stored = build.home_placements(open_sample(name))
    assert build.compare_homes(stored, fresh) == []


def test_wagtail_trace_follows_the_coupler_point(core):
    scene = open_sample("wagtail_rocker")
    f0, f1 = scene.frame_start, scene.frame_end
    obj = bpy.data.objects["trace sign_hook"]
    assert obj.type == 'CURVE' and obj.data.bevel_depth > 0 and obj.get("jointwise_trace") == "sign_hook"
    pts = obj.data.splines[0].points
    co = np.empty(len(pts) * 4, dtype=np.float32)
    pts.foreach_get("co", co)
    co = co.reshape(-1, 4)[:, :3]
    mech, drive, a, b, sw = documented(core, "wagtail_rocker", f1 - f0 + 1)
    world = (np.array(obj.matrix_world) @ np.c_[co, np.ones(len(co))].T).T[:, :3]
    assert np.all(np.isfinite(world))
    assert np.allclose(world, sw.measures["sign_hook"], atol=1e-3)


def test_trace_unknown_measure_is_refused(installed):
    scene = open_sample("wagtail_rocker")
    before = {o.name for o in scene.objects}
    with pytest.raises(RuntimeError, match=r"no point measure named 'nope'.*sign_hook"):
        bpy.ops.jointwise.trace_add(measure="nope", frame_start=1, frame_end=10)
    assert {o.name for o in scene.objects} == before


def test_trace_replaces_and_ramps(installed):
    scene = open_sample("wagtail_rocker")
    r = bpy.ops.jointwise.trace_add(measure="sign_hook", frame_start=1, frame_end=5, drive="crank_pin",
                                    value_from=math.radians(60), value_to=math.radians(100))
    assert r == {"FINISHED"}
    traces = [o for o in scene.objects if o.get("jointwise_trace") == "sign_hook"]
    assert len(traces) == 1 and len(traces[0].data.splines[0].points) == 5


def test_traces_panel_draws(installed):
    import types
    from test_panels import Recorder  # the recording layout of the panel tests
    open_sample("plover_lift")
    log = []
    bpy.types.JOINTWISE_PT_traces.draw(types.SimpleNamespace(layout=Recorder(log)), bpy.context)
    assert ("operator", "jointwise.trace_add") in log and ("label", "deck_point  (traced)") in log
    bpy.ops.wm.read_homefile(use_empty=True)
    log = []
    bpy.types.JOINTWISE_PT_traces.draw(types.SimpleNamespace(layout=Recorder(log)), bpy.context)
    assert log == [("label", "No point measures in the mechanism file")]


@pytest.mark.parametrize("name", build.SAMPLES)
def test_sample_opens_ready_to_drag(core, name):
    """README quickstart step 3 as written: open the sample, set the drive's value (from
    Python, as a slider does), and every link sits where the core puts it: the sweep of the
    documented drive from its start to the new value (the scene starts on that branch)."""
    scene = open_sample(name)
    jw = scene.jointwise
    assert jw.live  # ready: following the animation, values pose at once
    mech, drive, a, b, _ = documented(core, name, 2)
    step = 5.0 if abs(b - a) < 1000 else 75.0  # a lead screw turns far per frame
    target = a + step * (1 if b > a else -1)
    scene.frame_set(scene.frame_start)
    jw.joints[drive].value = math.radians(target)
    assert jw.converged, jw.message
    assert math.degrees(jw.joints[drive].value) == pytest.approx(target, abs=1e-4)
    sw = mech.sweep(drive, np.linspace(a, target, 6))
    assert sw.converged.all()
    homes = {l.name: np.array(l.home).reshape(4, 4) for l in jw.links}
    for link in jw.links:
        if link.name == mech.ground:
            continue
        want = np.asarray(sw.links[link.name][-1]) @ homes[link.name]  # mm = BU
        got = np.array(link.object.matrix_world)
        assert np.allclose(got[:3, :3], want[:3, :3], atol=ROT_TOL), (name, link.name)
        assert np.allclose(got[:3, 3], want[:3, 3], atol=LOC_TOL), (name, link.name)
