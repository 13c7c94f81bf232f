"""Where the user waits (issue 10 item 12), in the real host, run by hand::

    .venv-bpy50/bin/python tests/benchmarks/bench_live.py [--repeats 40]

Measures, medians of ``--repeats``:
1. a value change, from ``joints[NAME].value = v`` to the updated ``matrix_world`` of the
   links, on every sample (.blend as shipped) and on a generated assembly of 100 links
   (33 four-bars side by side on one ground, the Fennwick Row "Tally rack");
   target <= 5 ms on every sample, <= 15 ms on the 100-link assembly;
2. ``bpy.ops.jointwise.bake()`` of plover_lift's 240 frames (the sample's own ramp);
   target <= 0.3 s.
Each figure is printed beside the same path with the scene-mapping cache cleared before
every change (the mechanism read back from the scene each time: how a change cost before
the cache), and the ratio of the two.
"""
from __future__ import annotations

import argparse
import math
import os
import pathlib
import statistics
import sys
import tempfile
import time

os.environ["HOME"] = tempfile.mkdtemp(prefix="jointwise-bench-home-")
import bpy  # noqa: E402

ROOT = pathlib.Path(__file__).resolve().parents[2]
MODULE = "bl_ext.user_default.jointwise"
SAMPLES = ("wagtail_rocker", "linnet_vise", "dipper_pump", "heron_shaft", "heron_twin_shaft",
           "plover_lift")


def install():
    z = os.environ.get("JOINTWISE_ZIP") or str(ROOT / "dist" / "jointwise-0.1.0.zip")
    if not pathlib.Path(z).exists():
        sys.exit(f"{z} not found: build it with .venv/bin/python addon/package.py")
    r = bpy.ops.extensions.package_install_files(filepath=z, repo="user_default", enable_on_install=True)
    assert r == {"FINISHED"}


def ensure_enabled():
    import addon_utils
    if not addon_utils.check(MODULE)[1]:
        bpy.ops.preferences.addon_enable(module=MODULE)


def value_change_ms(scene, name, values, cold=False, clock=time.perf_counter):
    """Median milliseconds from setting the value to the links' matrix_world being updated
    (``clock``: wall time, or ``time.process_time`` for the CPU the process spent, which a
    shared, loaded machine inflates less)."""
    import importlib
    sc = importlib.import_module(MODULE + ".scene")
    jw = scene.jointwise
    item = jw.joints[name]
    times = []
    for v in values:
        if cold:
            sc.clear_cache()
        t0 = clock()
        item.value = v
        times.append(clock() - t0)
        assert jw.converged, jw.message
    return 1e3 * statistics.median(times)


def drag_values(scene, name, n):
    """Small steps about the value on screen (a drag)."""
    v0 = scene.jointwise.joints[name].value
    return [v0 + 0.01 * math.sin(2 * math.pi * i / 12) for i in range(1, n + 1)]


def tally_rack(folder, n_loops=33):
    """33 four-bars side by side on one ground: 3 moving links each (99) + the ground = 100."""
    bpy.ops.wm.read_homefile(use_empty=True)
    scene = bpy.context.scene
    scene.unit_settings.scale_length = 0.001
    scene.unit_settings.length_unit = 'MILLIMETERS'
    mesh = bpy.data.meshes.new("bar")
    mesh.from_pydata([(0, 0, 0), (1, 0, 0), (0, 1, 0)], [], [(0, 1, 2)])
    lines = ['format = 1', '[mechanism]', 'name = "Tally rack"', 'length_unit = "mm"',
             'angle_unit = "deg"', 'ground = "base"', '[links.base]']
    # Grashof crank-rocker (Norton, Design of Machinery, ch. 2): ground 100, crank 40,
    # coupler 90, rocker 80; pivots A (0,0), D (100,0); crank at 90 deg: B (0,40)
    ax, bx = (0.0, 40.0), None
    # C: the circle meet of |C - B| = 90, |C - D| = 80 (upper branch), worked out here
    bxy = (0.0, 40.0)
    dxy = (100.0, 0.0)
    dx, dy = dxy[0] - bxy[0], dxy[1] - bxy[1]
    d = math.hypot(dx, dy)
    a = (90.0 ** 2 - 80.0 ** 2 + d * d) / (2 * d)
    h = math.sqrt(90.0 ** 2 - a * a)
    cxy = (bxy[0] + a * dx / d - h * dy / d, bxy[1] + a * dy / d + h * dx / d)
    for k in range(n_loops):
        z = 30.0 * k
        for part in ("crank", "coupler", "rocker"):
            name = f"{part}{k:02d}"
            obj = bpy.data.objects.new(name, mesh)
            scene.collection.objects.link(obj)
            obj.location = (0, 0, z)
            lines += [f'[links.{name}]', f'object = "{name}"']
        pts = {"a": (0.0, 0.0), "b": bxy, "c": cxy, "d": dxy}
        pairs = {"a": ("base", f"crank{k:02d}"), "b": (f"crank{k:02d}", f"coupler{k:02d}"),
                 "c": (f"coupler{k:02d}", f"rocker{k:02d}"), "d": ("base", f"rocker{k:02d}")}
        for j, (p, c) in pairs.items():
            x, y = pts[j]
            lines += [f'[joints.{j}{k:02d}]', 'type = "revolute"', f'parent = "{p}"', f'child = "{c}"',
                      f'point = [{x!r}, {y!r}, {z!r}]', 'axis = [0, 0, 1]']
            if j == "a":
                lines += ['home = 90', 'drive = true']
    path = pathlib.Path(folder) / "tally_rack.toml"
    path.write_text("\n".join(lines) + "\n")
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return scene


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=40)
    args = ap.parse_args()
    install()
    rows = []
    for name in SAMPLES:
        bpy.ops.wm.open_mainfile(filepath=str(ROOT / "blend_samples" / f"{name}.blend"))
        ensure_enabled()
        scene = bpy.context.scene
        jw = scene.jointwise
        bpy.ops.jointwise.bake_clear()  # pose by hand, not the keys
        drive = next(it.name for it in jw.joints if it.drive or it.type != "fixed")
        vals = drag_values(scene, drive, args.repeats)
        value_change_ms(scene, drive, vals[:3])  # warm
        warm = value_change_ms(scene, drive, vals)
        cold = value_change_ms(scene, drive, vals, cold=True)
        cpu = value_change_ms(scene, drive, vals, clock=time.process_time)
        rows.append((name, f"{len(jw.links)} links", warm, cold, cpu, 5.0))
    with tempfile.TemporaryDirectory() as tmp:
        scene = tally_rack(tmp)
        vals = drag_values(scene, "a00", args.repeats)
        value_change_ms(scene, "a00", vals[:3])
        warm = value_change_ms(scene, "a00", vals)
        cold = value_change_ms(scene, "a00", vals, cold=True)
        cpu = value_change_ms(scene, "a00", vals, clock=time.process_time)
        rows.append(("tally_rack (generated)", f"{len(scene.jointwise.links)} links", warm, cold, cpu, 15.0))
    print(f"bpy {bpy.app.version_string}; value change, property -> matrix_world, median of {args.repeats}")
    print(f"{'scene':26s} {'size':>10s} {'ms':>8s} {'cold ms':>8s} {'cold/ms':>8s} {'cpu ms':>8s} {'target':>7s}")
    for name, size, warm, cold, cpu, target in rows:
        flag = "ok" if warm <= target else "OVER"
        print(f"{name:26s} {size:>10s} {warm:8.2f} {cold:8.2f} {cold / warm:8.1f} {cpu:8.2f} {target:6.0f}  {flag}")
    # bake of plover_lift's 240 frames with the sample's own ramp
    bpy.ops.wm.open_mainfile(filepath=str(ROOT / "blend_samples" / "plover_lift.blend"))
    ensure_enabled()
    scene = bpy.context.scene
    times, cpu = [], []
    for _ in range(max(3, args.repeats // 8)):
        t0, c0 = time.perf_counter(), time.process_time()
        assert bpy.ops.jointwise.bake() == {"FINISHED"}, scene.jointwise.message
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    med = statistics.median(times)
    print(f"bake plover_lift frames {scene.frame_start}-{scene.frame_end}: median {med:.3f} s wall, "
          f"{statistics.median(cpu):.3f} s CPU (target 0.3 s, ratio {med / 0.3:.2f} of the target)")


if __name__ == "__main__":
    main()
