"""Clearance benchmark in the real host: 20 link objects of about 2 000 triangles each,
200 frames (target: at most 10 s on this machine).

Run by hand with a bpy venv from the repository root (after dev/host_tests.sh or
``.venv/bin/python addon/package.py`` has built the zip)::

    .venv-bpy50/bin/python tests/benchmarks/bench_clearance.py [--links 20] [--frames 200] [--repeats 3]

The scene (Fennwick Row "Hedgerow" display stand, invented): a row of arms on
upright pivots 3 units apart, each arm a stretched UV sphere of 32 x 32 (1 984
triangles) about 4 long, turning at its own steady rate. Arms at the same height
sweep into their neighbours and next-but-one neighbours (contacts), arms half a
thickness higher pass close over them, and arms farther apart never meet: every kind
of pair the check meets in practice.

Measures, medians of ``--repeats``:
1. the check (``Check.run``, as the operator runs it) in elapsed and CPU time, the CPU
   time split into solving, tree building (meshes evaluated, trees and groups made,
   trees built at frames where a pair may touch) and queries;
2. a baseline in the same run: the plain way of finding touching pairs only, one BVH
   tree per object and frame and ``overlap`` for every pair at every frame, with no
   distances at all; the ratio baseline / check is printed.
"""
from __future__ import annotations

import argparse
import importlib
import itertools
import math
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


def arm_mesh(name):
    import bmesh
    bm = bmesh.new()
    bmesh.ops.create_uvsphere(bm, u_segments=32, v_segments=32, radius=1.0)
    for v in bm.verts:  # about 4 long, 1.2 wide, 0.8 thick, pivot at one end
        v.co.x = (v.co.x + 1.0) * 2.0 - 0.3
        v.co.y *= 0.6
        v.co.z *= 0.4
    mesh = bpy.data.meshes.new(name)
    bm.to_mesh(mesh)
    bm.free()
    return mesh


def make_scene(n_links, n_frames, folder):
    bpy.ops.wm.read_homefile(use_empty=True)
    scene = bpy.context.scene
    scene.unit_settings.scale_length = 1.0
    mesh = arm_mesh("arm")
    lines = ['format = 1', '[mechanism]', 'name = "Hedgerow display stand"', 'length_unit = "m"',
             'angle_unit = "deg"', 'ground = "stand"', '[links.stand]']
    for i in range(n_links):
        obj = bpy.data.objects.new(f"Arm{i:02d}", mesh)
        scene.collection.objects.link(obj)
        z = 0.5 * (i % 3 == 2)  # every third arm half a thickness higher
        obj.location = (3.0 * i, 0, z)
        obj.rotation_euler = (0, 0, math.radians(37.0 * i))
        lines += [f'[links.arm{i:02d}]', f'object = "Arm{i:02d}"']
    for i in range(n_links):
        z = 0.5 * (i % 3 == 2)
        lines += [f'[joints.pivot{i:02d}]', 'type = "revolute"', 'parent = "stand"',
                  f'child = "arm{i:02d}"', f'point = [{3.0 * i}, 0, {z}]', 'axis = [0, 0, 1]',
                  'drive = true']
    path = pathlib.Path(folder) / "hedgerow.toml"
    path.write_text("\n".join(lines) + "\n")
    assert bpy.ops.jointwise.mechanism_import(filepath=str(path)) == {"FINISHED"}
    jw = scene.jointwise
    for i in range(n_links):
        name = f"pivot{i:02d}"
        turns = 0.5 + 0.25 * (i % 4)  # half a turn to 1.25 turns over the frames, alternating sense
        for f, v in ((1, 0.0), (n_frames, (-1) ** i * 2 * math.pi * turns)):
            jw.joints[name].value = v
            scene.keyframe_insert(f'jointwise.joints["{name}"].angle', frame=f)  # the animatable field (radians)
    animation = importlib.import_module(f"{MODULE}.animation")
    for fc in animation.scene_fcurves(scene):
        for k in fc.keyframe_points:
            k.interpolation = 'LINEAR'
        fc.update()
    scene.frame_start, scene.frame_end = 1, n_frames
    return scene


def baseline(scene, frames, check):
    """Touching pairs only, the plain way: a tree per object and frame, every pair."""
    from mathutils.bvhtree import BVHTree
    bodies = check.bodies
    touching = set()
    t0 = time.perf_counter()
    for i in range(len(frames)):
        trees = []
        for b in bodies:
            m = b.rel[i]
            v = b.verts @ m[:3, :3].T + m[:3, 3]
            trees.append(BVHTree.FromPolygons(v.tolist(), b.tris.tolist()))
        for (ia, a), (ib, b) in itertools.combinations(enumerate(bodies), 2):
            if (a, b) in check.pairs and trees[ia].overlap(trees[ib]):
                touching.add((a.name, b.name, int(frames[i])))
    return time.perf_counter() - t0, touching


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--links", type=int, default=20)
    ap.add_argument("--frames", type=int, default=200)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    install()
    cl = importlib.import_module(f"{MODULE}.clearance")
    with tempfile.TemporaryDirectory() as folder:
        scene = make_scene(args.links, args.frames, folder)
        frames = np.arange(1, args.frames + 1)
        runs = []
        for _ in range(args.repeats):
            check = cl.Check(scene, frames)
            check.timer = cl.Timer(time.process_time)  # phases in CPU time (a shared machine)
            t0, c0 = time.perf_counter(), time.process_time()
            check.run()
            total, cpu = time.perf_counter() - t0, time.process_time() - c0
            runs.append((total, check.timer.solve, check.timer.trees, check.timer.queries, cpu, check))
        med = {k: statistics.median(r[i] for r in runs)
               for i, k in enumerate(("total", "solve", "trees", "queries", "cpu"))}
        check = runs[-1][5]
        rows = check.rows()
        tris = [len(b.tris) for b in check.bodies]
        touching = [r for r in rows if r["contact"]]
        visited = sum(r.visited for r in check.results)
        print(f"{len(check.bodies)} link objects, {min(tris)}-{max(tris)} triangles each, "
              f"{len(frames)} frames, {len(check.pairs)} pairs, {len(touching)} touching, "
              f"{visited} pair-frames visited of {len(check.pairs) * len(frames)}")
        print(f"check (median of {args.repeats}): {med['total']:.2f} s wall, {med['cpu']:.2f} s CPU"
              f"  (target <= 10 s); CPU = solve {med['solve']:.2f} s + trees {med['trees']:.2f} s"
              f" + queries {med['queries']:.2f} s")
        print(f"machine load while measuring (1-minute average, {os.cpu_count()} CPUs): "
              f"{os.getloadavg()[0]:.1f}")
        c0 = time.process_time()
        tb, touch_b = baseline(scene, frames, check)
        cb = time.process_time() - c0
        touch_c = {(r["object_a"], r["object_b"], f) for r in rows
                   for f in importlib.import_module(f"{MODULE}.proximity").frames_from_text(r["contact_frames"])}
        same = "same" if touch_b == touch_c else f"DIFFERENT ({len(touch_b ^ touch_c)} pair-frames)"
        print(f"baseline, touching only (a tree per object and frame, overlap for every pair): "
              f"{tb:.2f} s wall, {cb:.2f} s CPU; ratio baseline / check = {tb / med['total']:.2f} wall, "
              f"{cb / med['cpu']:.2f} CPU; touching frames {same}")
        for r in rows[:5]:
            print(f"  {r['object_a']} / {r['object_b']}: gap {r['min_gap']:.4f} at {r['min_frame']}"
                  f"  contact {r['contact_frames'] or '-'}")


if __name__ == "__main__":
    main()
