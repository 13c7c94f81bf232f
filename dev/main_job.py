"""The main job, headless: one sample through the real extension inside Blender (bpy).

    .venv-bpy50/bin/python dev/main_job.py --out out/demo [--frames N] [--sample NAME] [--docs]

(``sh dev/demo.sh`` sets up the venvs, builds the extension zip and runs this.)

Steps, for the sample (default ``wagtail_rocker``, one crank turn):

1. install and enable the extension zip (``$JOINTWISE_ZIP`` or the newest
   ``dist/jointwise-*.zip``) under a temporary HOME;
2. build the sample scene from its mechanism file (``blend_samples/build.py``): meshes,
   ``jointwise.mechanism_import``, the documented sweep baked over frames 1..N, the
   coupler-point trace; save ``<sample>.blend``;
3. the sweep table ``<sample>.csv`` (the core's sweep over the same N steps, the
   columns of ``jointwise sweep``) and its plot ``<sample>.png``;
4. ``contact_sheet.png``: six frames rendered with Workbench (320 x 240 each),
   tiled 3 x 2.

Everything is written into a temporary folder beside the output folder, which then
replaces the output folder whole (so a re-run leaves no stale files). The output
folder must be new, empty, or one this job wrote before (it holds ``.jointwise-demo``).
``--docs`` also copies the contact sheet and the plot to ``docs/contact_sheet.png`` and
``docs/sweep_plot.png``. The output folder is printed on the last line.
"""
from __future__ import annotations

import argparse
import os
import pathlib
import shutil
import subprocess
import sys
import tempfile
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]

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

STAMP = ".jointwise-demo"
SHEET_FRAMES = 6
TILE = (320, 240)
COLUMNS = 3


class JobError(RuntimeError):
    """The job cannot go on; the message says why."""


def log(msg):
    print(f"main job: {msg}", flush=True)


def check_out(out):
    if out.exists():
        if not out.is_dir():
            raise JobError(f"--out {out}: exists and is not a folder")
        if any(out.iterdir()) and not (out / STAMP).exists():
            raise JobError(f"--out {out}: folder is not empty and was not written by this job "
                           f"(no {STAMP}); choose a new or empty folder")


def sheet_frames(f0, f1, n=SHEET_FRAMES):
    """``n`` frames evenly over the range from its first frame (the last frame of a full
    turn repeats the first pose, so the range is split into ``n`` equal parts)."""
    span = f1 - f0 + 1
    return sorted({f0 + (k * span) // n for k in range(n)})


def write_table_and_plot(name, steps, folder):
    """Sweep CSV (the core's ``jointwise sweep`` columns) and its plot PNG."""
    import numpy as np
    import jointwise
    from jointwise import report
    mech = jointwise.load(build.toml_path(name))
    drive, a, b = build.documented_sweep(name)
    values = np.linspace(a, b, steps)
    sw = mech.sweep(drive, values)
    bad = np.flatnonzero(~np.asarray(sw.converged))
    if len(bad):
        i = int(bad[0])
        raise JobError(f"{name}: the sweep of {drive} did not converge at step {i} "
                       f"({drive} = {values[i]:g}): {sw.reasons.get(i, 'the loops do not close')}")
    csv = folder / f"{name}.csv"
    csv.write_text(report.sweep_table(mech, sw, drive), encoding="utf-8")
    png = folder / f"{name}.png"
    try:
        import matplotlib  # noqa: F401  (not in Blender's Python, usually)
        report.plot_sweep(mech, sw, drive, str(png))
    except ImportError:
        cli = ROOT / ".venv" / "bin" / "jointwise"
        if not cli.exists():
            raise JobError(f"the plot needs matplotlib: none in this Python and no {cli} "
                           f"(run sh dev/demo.sh, which installs .venv with the plot extra)") from None
        run = subprocess.run([str(cli), "sweep", str(build.toml_path(name)), "--drive", drive,
                              "--from", repr(a), "--to", repr(b), "--steps", str(steps),
                              "--out", os.devnull, "--plot", str(png)],
                             stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        if run.returncode != 0:
            raise JobError(f"jointwise sweep --plot failed (exit {run.returncode}): {run.stdout.strip()}")
    return csv, png


def render_sheet(scene, frames, folder, path):
    """Render ``frames`` with Workbench at TILE size and tile them into PNG ``path``."""
    import bpy
    import numpy as np
    r = scene.render
    r.engine = 'BLENDER_WORKBENCH'
    r.resolution_x, r.resolution_y = TILE
    r.resolution_percentage = 100
    r.image_settings.file_format = 'PNG'
    r.image_settings.color_mode = 'RGBA'
    r.use_stamp = True  # the frame number, burnt in by Blender's own stamp
    for flag in ("use_stamp_date", "use_stamp_time", "use_stamp_render_time", "use_stamp_filename",
                 "use_stamp_camera", "use_stamp_lens", "use_stamp_scene", "use_stamp_marker",
                 "use_stamp_memory", "use_stamp_hostname", "use_stamp_sequencer_strip",
                 "use_stamp_frame_range", "use_stamp_note"):
        if hasattr(r, flag):
            setattr(r, flag, False)
    r.use_stamp_frame = True
    r.stamp_font_size = 12
    w, h = TILE
    rows = -(-len(frames) // COLUMNS)
    sheet = np.ones((rows * h, COLUMNS * w, 4), dtype=np.float32)
    for k, f in enumerate(frames):
        scene.frame_set(f)
        r.filepath = str(folder / f"frame_{f:04d}.png")
        bpy.ops.render.render(write_still=True)
        img = bpy.data.images.load(r.filepath, check_existing=False)
        px = np.empty(img.size[0] * img.size[1] * 4, dtype=np.float32)
        img.pixels.foreach_get(px)
        px = px.reshape(img.size[1], img.size[0], 4)
        bpy.data.images.remove(img)
        os.unlink(r.filepath)
        if px.shape[:2] != (h, w):
            raise JobError(f"frame {f}: rendered {px.shape[1]}x{px.shape[0]}, expected {w}x{h}")
        row, col = divmod(k, COLUMNS)
        y0 = (rows - 1 - row) * h  # image rows run bottom-up
        sheet[y0:y0 + h, col * w:(col + 1) * w] = px
    if not np.all(np.isfinite(sheet)):
        raise JobError("the contact sheet has non-finite pixels")
    out = bpy.data.images.new("contact sheet", COLUMNS * w, rows * h, alpha=True)
    out.pixels.foreach_set(sheet.ravel())
    out.filepath_raw = str(path)
    out.file_format = 'PNG'
    out.save()
    bpy.data.images.remove(out)
    return path


def replace_folder(tmp, out):
    """Put ``tmp`` in the place of ``out`` (the old one removed)."""
    old = None
    if out.exists():
        old = out.with_name(f".{out.name}.old-{os.getpid()}")
        out.rename(old)
    tmp.rename(out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def run(args):
    out = pathlib.Path(args.out).resolve()
    check_out(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    name = args.sample
    if name not in build.SAMPLES:
        raise JobError(f"unknown sample {name!r}; samples: {', '.join(build.SAMPLES)}")
    t0 = time.perf_counter()
    zip_path = build.find_zip()
    import bpy
    log(f"Blender {bpy.app.version_string}; extension {zip_path.name}")
    build.install(zip_path)
    tmp = pathlib.Path(tempfile.mkdtemp(prefix=f".{out.name}.tmp-", dir=out.parent))
    tmp.chmod(0o755)
    try:
        scene = build.build_scene(name, frames=args.frames)
        f0, f1 = scene.frame_start, scene.frame_end
        drive, a, b = build.documented_sweep(name)
        log(f"{name}: imported, baked {drive} {a:g}..{b:g} deg over frames {f0}-{f1}, traced")
        blend = build.save(tmp / f"{name}.blend")
        log(f"saved {blend.name}")
        csv, png = write_table_and_plot(name, f1 - f0 + 1, tmp)
        log(f"wrote {csv.name} and {png.name}")
        sheet = render_sheet(scene, sheet_frames(f0, f1), tmp, tmp / "contact_sheet.png")
        log(f"rendered {sheet.name}")
        (tmp / STAMP).write_text(f"written by dev/main_job.py for {name}\n", encoding="utf-8")
        replace_folder(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if args.docs:
        docs = ROOT / "docs"
        docs.mkdir(exist_ok=True)
        for src, dst in (("contact_sheet.png", "contact_sheet.png"), (f"{name}.png", "sweep_plot.png")):
            part = docs / f".{dst}.part"
            shutil.copyfile(out / src, part)
            os.replace(part, docs / dst)
        log(f"copied the contact sheet and the plot to {docs}")
    log(f"done in {time.perf_counter() - t0:.1f} s")
    print(out)


def main(argv=None):
    ap = argparse.ArgumentParser(prog="main_job.py", description="Build, bake, trace, tabulate and "
                                 "render one sample with the jointwise extension inside Blender.")
    ap.add_argument("--out", required=True, help="output folder (replaced whole on each run)")
    ap.add_argument("--frames", type=int, default=120, help="frames of the bake and steps of the table (default 120)")
    ap.add_argument("--sample", default="wagtail_rocker", help="sample name (default wagtail_rocker)")
    ap.add_argument("--docs", action="store_true", help="also copy the contact sheet and plot to docs/")
    args = ap.parse_args(argv)
    if args.frames < SHEET_FRAMES:
        ap.error(f"--frames must be at least {SHEET_FRAMES}, got {args.frames}")
    home = build.isolate_home()
    try:
        run(args)
        return 0
    except (JobError, build.SampleError, OSError) as exc:
        print(f"main job: error: {exc}", file=sys.stderr)
        return 1
    except Exception as exc:  # e.g. the core's JointwiseError: a message, not a traceback
        print(f"main job: error: {type(exc).__name__}: {exc}", file=sys.stderr)
        return 1
    finally:
        shutil.rmtree(home, ignore_errors=True)


if __name__ == "__main__":
    code = main()
    sys.stdout.flush()
    sys.stderr.flush()
    # Everything is written and closed; leave without bpy's exit-time memory report, so
    # the output folder stays the last line printed.
    os._exit(code)
