"""Bake benchmark in the real host: 100 links x 1000 frames.

Run by hand with a bpy venv from the repository root (after dev/host_tests.sh or
``.venv/bin/python addon/package.py`` has built the zip)::

    .venv-bpy50/bin/python tests/benchmarks/bench_bake.py [--links 100] [--frames 1000] [--repeats 3]

Measures, in one run:
1. the whole bake (``jointwise.bake`` as the operator runs it), split into solving
   (reading the animated values + the core's continuation) and writing keys;
2. the key-writing stage alone (world matrices -> location/rotation channels ->
   slotted-action F-curves via ``keyframe_points.add`` + ``foreach_set``) against
   ``keyframe_insert`` of the same keys (object set to each frame's values, then one
   ``keyframe_insert`` per channel group and frame) - medians of ``--repeats``;
and prints the ratio (target >= 30x).

The mechanism: a serial arm of revolute joints (Pell & Marrow "Gantry" cable chain), axes
alternating Z and Y, every tenth joint animated, the rest held; links alternate
quaternion and XYZ Euler rotation modes.
"""
from __future__ import annotations

import argparse
import os
import pathlib
import statistics
import sys
import tempfile
import time

os.environ["HOME"] = tempfile.mkdtemp(prefix="jointwise-bench-home-")
import bpy  # noqa: E402
import numpy as np  # noqa: E402

ROOT = pathlib.Path(__file__).resolve().parents[2]
MODULE = "bl_ext.user_default.jointwise"


def install():
    z = os.environ.get("JOINTWISE_ZIP") or str(ROOT / "dist" / "jointwise-0.1.0.zip")
    if not pathlib.Path(z).exists():
        sys.exit(f"{z} not found: build it with .venv/bin/python addon/package.py")
    r = bpy.ops.extensions.package_install_files(filepath=z, repo="user_default", enable_on_install=True)
    assert r == {"FINISHED"}


def make_scene(n_links, folder):
    bpy.ops.wm.read_homefile(use_empty=True)
    scene = bpy.context.scene
    mesh = bpy.data.meshes.new("segment")
    mesh.from_pydata([(x, y, z) for x in (0, 8) for y in (-1, 1) for z in (-1, 1)], [],
                     [(0, 1, 3, 2), (4, 6, 7, 5), (0, 4, 5, 1), (2, 3, 7, 6), (0, 2, 6, 4), (1, 5, 7, 3)])
    lines = ['format = 1', '[mechanism]', 'name = "Gantry cable chain"', 'length_unit = "mm"',
             'angle_unit = "deg"', 'ground = "base"', '[links.base]']
    for i in range(1, n_links + 1):
        obj = bpy.data.objects.new(f"Segment{i:03d}", mesh)
        scene.collection.objects.link(obj)
        obj.location = ((i - 1) * 10.0 * 0.001, 0, 0)
        obj.scale = (0.001, 0.001, 0.001)
        obj.rotation_mode = "QUATERNION" if i % 2 else "XYZ"
        lines += [f"[links.s{i}]", f'object = "Segment{i:03d}"']
    for i in range(1, n_links + 1):
        parent = "base" if i == 1 else f"s{i - 1}"
        axis = "[0, 0, 1]" if i % 2 else "[0, 1, 0]"
        lines += [f"[joints.j{i}]", 'type = "revolute"', f'parent = "{parent}"', f'child = "s{i}"',
                  f"point = [{(i - 1) * 10.0}, 0, 0]", f"axis = {axis}"]
    path = pathlib.Path(folder) / "gantry.toml"
    path.write_text("\n".join(lines) + "\n")
    bpy.context.view_layer.update()
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    return scene


def animate(scene, frames):
    jw = scene.jointwise
    for k, item in enumerate(jw.joints):
        if k % 10:
            item.value = 0.05 * ((k % 7) - 3)  # held, radians
            continue
        for f, v in ((1, 0.0), (frames // 2, 1.2 + 0.01 * k), (frames, -0.8)):
            item.value = v
            scene.keyframe_insert(f'jointwise.joints["{item.name}"].angle', frame=f)  # the animatable field


def clear_animation(scene):
    for obj in scene.objects:
        if obj.animation_data is not None:
            obj.animation_data_clear()
    for a in list(bpy.data.actions):
        if a.users == 0 or a.get("jointwise_bake"):
            bpy.data.actions.remove(a)


def keyframe_insert_baseline(channels, frames):
    """The same keys with one ``keyframe_insert`` per channel group and frame."""
    for name, (obj, ch) in channels.items():
        loc = np.stack([ch[("location", i)] for i in range(3)], axis=1)
        if obj.rotation_mode == "QUATERNION":
            rpath, rot = "rotation_quaternion", np.stack([ch[("rotation_quaternion", i)] for i in range(4)], axis=1)
        else:
            rpath, rot = "rotation_euler", np.stack([ch[("rotation_euler", i)] for i in range(3)], axis=1)
        for k, f in enumerate(frames):
            obj.location = loc[k]
            setattr(obj, rpath, rot[k])
            obj.keyframe_insert("location", frame=float(f))
            obj.keyframe_insert(rpath, frame=float(f))
        for fc in obj.animation_data.action.layers[0].strips[0].channelbag(obj.animation_data.action_slot).fcurves:
            for kp in fc.keyframe_points:
                kp.interpolation = 'LINEAR'


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--links", type=int, default=100)
    ap.add_argument("--frames", type=int, default=1000)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    install()
    import importlib
    bk = importlib.import_module(MODULE + ".bake")
    an = importlib.import_module(MODULE + ".animation")
    sc = importlib.import_module(MODULE + ".scene")
    with tempfile.TemporaryDirectory() as tmp:
        scene = make_scene(args.links, tmp)
    frames = np.arange(1, args.frames + 1)
    animate(scene, args.frames)
    n_keys = None
    print(f"bpy {bpy.app.version_string}: {args.links} links x {args.frames} frames, "
          f"{args.repeats} repeats (medians)")

    # 1. whole bake, split
    solves, writes = [], []
    for _ in range(args.repeats):
        clear_animation(scene)
        count, t_solve, t_write = bk.bake(scene, int(frames[0]), int(frames[-1]))
        solves.append(t_solve)
        writes.append(t_write)
    n_keys = sum(len(fc.keyframe_points) for o in scene.objects if o.animation_data and o.animation_data.action
                 for layer in o.animation_data.action.layers for s in layer.strips
                 for fc in s.channelbag(o.animation_data.action_slot).fcurves)
    print(f"whole bake: solve {statistics.median(solves):.3f} s + write {statistics.median(writes):.3f} s "
          f"= {statistics.median(solves) + statistics.median(writes):.3f} s ({n_keys} keys on {count} objects)")

    # 2. the key-writing stage vs keyframe_insert, same keys
    solved = bk.solve_frames(scene, int(frames[0]), int(frames[-1]))
    worlds = sc.world_matrices(scene, solved.links)
    ours, theirs = [], []
    for _ in range(args.repeats):
        clear_animation(scene)
        t0 = time.perf_counter()
        channels = bk.prepare_channels(worlds)
        for name, (obj, ch) in channels.items():
            an.write_channels(obj, frames, ch)
        ours.append(time.perf_counter() - t0)
        sample = {o.name: [fc.evaluate(500.5) for fc in an.action_fcurves(o.animation_data.action)]
                  for o in list(scene.objects)[:5] if o.animation_data}
        clear_animation(scene)
        t0 = time.perf_counter()
        keyframe_insert_baseline(channels, frames)
        theirs.append(time.perf_counter() - t0)
        for oname, vals in sample.items():  # same keys, same curves
            o = scene.objects[oname]
            ref = [fc.evaluate(500.5) for fc in an.action_fcurves(o.animation_data.action)]
            assert np.allclose(sorted(vals), sorted(ref), atol=1e-5), oname
    a, b = statistics.median(ours), statistics.median(theirs)
    print(f"key writing: foreach_set {a:.3f} s, keyframe_insert {b:.3f} s -> {b / a:.1f}x faster "
          f"(target >= 30x)")


if __name__ == "__main__":
    main()
