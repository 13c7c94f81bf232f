"""Drag update time in Blender: a link object given a new placement -> every link placed.

Run by hand with Blender as a module (5.0 by default):

    .venv-bpy50/bin/python tests/benchmarks/bench_drag.py [ZIP] [--wall]

For every sample, one link object is moved along the mechanism's own path (with a small
offset off it on some samples, so the target is not reachable exactly) STEPS times; each
update is ``obj.matrix_world = M`` then ``view_layer.update()`` (the drag handler runs
inside it), timed from the write to the updated placements. Baselines measured in the same
run: the same write and update without the drag handler (the host's own cost), and a joint
value changed (the existing value path). Prints medians over all updates of
ROUNDS rounds, the largest update, and the ratios. Target (issue 11): every drag update
<= 10 ms, so the largest (max) as well as the median.
"""
from __future__ import annotations

import math
import os
import statistics
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
SAMPLES = os.path.join(ROOT, "blend_samples")
os.environ["HOME"] = tempfile.mkdtemp(prefix="jointwise-bench-home-")

import bpy  # noqa: E402
import numpy as np  # noqa: E402
from mathutils import Matrix  # noqa: E402

STEPS = 40
ROUNDS = 3
#: (sample, dragged link, drive step per update (file units), offset off the path (mm))
CASES = [
    ("wagtail_rocker", "coupler", 3.0, (0.2, -0.1, 0.3)),
    ("dipper_pump", "plunger", 4.0, (0.0, 0.0, 0.0)),
    ("linnet_vise", "jaw", 45.0, (0.0, 0.1, 0.0)),
    ("heron_shaft", "output", 4.0, (0.0, 0.0, 0.0)),
    ("heron_twin_shaft", "middle", 4.0, (0.0, 0.0, 0.0)),
    ("plover_lift", "platform", 90.0, (0.2, 0.0, 0.0)),
]


def _install(zip_path):
    import addon_utils
    r = bpy.ops.extensions.package_install_files(filepath=zip_path, repo="user_default",
                                                 enable_on_install=True)
    assert r == {"FINISHED"}
    assert addon_utils.check("bl_ext.user_default.jointwise")[1]


def _open(name):
    """A sample with its baked link keys cleared (they would place the links)."""
    bpy.ops.wm.open_mainfile(filepath=os.path.join(SAMPLES, name + ".blend"))
    assert bpy.ops.jointwise.bake_clear() == {"FINISHED"}


def _drag_handler():
    return next(h for h in bpy.app.handlers.depsgraph_update_post if h.__name__ == "jointwise_drag")


def _targets(name, link, step, off):
    """World matrices of ``link`` along the path, from the sample's own file (outside timing)."""
    import jointwise
    scene = bpy.context.scene
    jw = scene.jointwise
    mech = jointwise.load(os.path.join(SAMPLES, name + ".toml"))
    start = {c: (math.degrees(jw.joints[c].last) if mech.coordinate_kind(c) == "angle" else jw.joints[c].last)
             for c in mech.coordinates}
    drive = mech.driven[0]
    home = np.array(jw.links[link].home, dtype=float).reshape(4, 4)
    out, prev = [], start
    for k in range(1, STEPS + 1):
        p = mech.pose({drive: start[drive] + k * step}, start=prev)
        prev = p
        d = np.array(p.links[link])
        d[:3, 3] += off
        out.append(Matrix((d @ home).tolist()))
    return out


#: Clock of the timings: this process's CPU time (the machine is shared: wall time counts
#: other processes' turns too); ``--wall`` switches to wall-clock time.
CLOCK = time.perf_counter if "--wall" in sys.argv else time.process_time


def _time_moves(obj, mats):
    vl = bpy.context.view_layer
    out = []
    for m in mats:
        t = CLOCK()
        obj.matrix_world = m
        vl.update()
        out.append(CLOCK() - t)
    return out


def _time_values(scene, drive, step):
    item = scene.jointwise.joints[drive]
    unit = math.radians(1.0) if item.kind == "angle" else 1.0
    out = []
    v0 = float(item.value)
    for k in range(1, STEPS + 1):
        t = CLOCK()
        item.value = v0 + k * step * unit
        out.append(CLOCK() - t)
    return out


def main():
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    zip_path = args[0] if args else subprocess.run(
        [os.path.join(ROOT, ".venv", "bin", "python"), os.path.join(ROOT, "addon", "package.py")],
        check=True, stdout=subprocess.PIPE, text=True).stdout.strip().splitlines()[-1]
    _install(zip_path)
    clock = "wall-clock" if CLOCK is time.perf_counter else "CPU (process)"
    print(f"bpy {bpy.app.version_string}; {STEPS} updates x {ROUNDS} rounds per sample; {clock} time, medians in ms")
    print(f"{'sample':<18}{'drag':>8}{'max':>8}{'host only':>11}{'value pose':>12}{'drag/value':>12}{'drag/host':>11}")
    worst = worst_max = 0.0
    only = [a[len("--only="):] for a in sys.argv[1:] if a.startswith("--only=")]
    for name, link, step, off in CASES:
        if only and name not in only:
            continue
        drags, hosts, values = [], [], []
        for _ in range(ROUNDS):
            _open(name)
            scene = bpy.context.scene
            jw = scene.jointwise
            obj = jw.links[link].object
            mats = _targets(name, link, step, off)
            handler = _drag_handler()
            bpy.app.handlers.depsgraph_update_post.remove(handler)
            try:
                hosts += _time_moves(obj, mats)
            finally:
                bpy.app.handlers.depsgraph_update_post.append(handler)
            _open(name)
            scene = bpy.context.scene
            jw = scene.jointwise
            obj = jw.links[link].object
            drags += _time_moves(obj, mats)
            assert jw.message.startswith(f"dragged {link}"), jw.message
            _open(name)
            scene = bpy.context.scene
            drive = next(it.name for it in scene.jointwise.joints if it.drive)
            values += _time_values(scene, drive, step)
        md, mh, mv = (statistics.median(x) * 1e3 for x in (drags, hosts, values))
        worst = max(worst, md)
        worst_max = max(worst_max, max(drags) * 1e3)
        print(f"{name:<18}{md:8.2f}{max(drags) * 1e3:8.2f}{mh:11.2f}{mv:12.2f}{md / mv:12.2f}{md / mh:11.1f}")
    print(f"largest median drag update: {worst:.2f} ms; largest single update: {worst_max:.2f} ms "
          f"(target: every update <= 10 ms)")


if __name__ == "__main__":
    main()
