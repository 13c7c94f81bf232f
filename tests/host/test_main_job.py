"""The main job end to end (dev/main_job.py with this test's bpy), on a small frame range:
the baked .blend, the sweep CSV (``jointwise sweep`` columns), the plot and the contact
sheet; a re-run replaces the output folder whole; a foreign folder is refused."""
from __future__ import annotations

import os
import pathlib
import subprocess
import sys

import bpy
import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]
PNG = b"\x89PNG\r\n\x1a\n"


def run_job(extension_zip, out, *extra):
    env = dict(os.environ, JOINTWISE_ZIP=str(extension_zip))
    return subprocess.run([sys.executable, str(ROOT / "dev" / "main_job.py"), "--out", str(out), *extra],
                          cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                          text=True, timeout=300)


def is_png(path):
    return path.stat().st_size > 1000 and path.read_bytes()[:8] == PNG


def test_main_job_end_to_end(extension_zip, tmp_path):
    out = tmp_path / "demo"
    run = run_job(extension_zip, out, "--frames", "12")
    assert run.returncode == 0, run.stdout
    assert run.stdout.strip().splitlines()[-1] == str(out.resolve())
    name = "wagtail_rocker"
    blend = out / f"{name}.blend"
    assert blend.stat().st_size > 10_000
    csv = (out / f"{name}.csv").read_text().splitlines()
    assert csv[0].startswith("step,crank_pin,") and "transmission" in csv[0] and "sign_hook.x" in csv[0]
    assert len(csv) == 1 + 12
    assert all(row.endswith(",1,0") for row in csv[1:])  # converged, not singular
    assert "nan" not in "\n".join(csv).lower()
    assert is_png(out / f"{name}.png")
    assert is_png(out / "contact_sheet.png")
    leftovers = [p for p in out.parent.iterdir() if p.name != "demo"]
    assert leftovers == []
    # a re-run replaces the folder whole: a stale file goes
    (out / "stale.txt").write_text("old")
    run = run_job(extension_zip, out, "--frames", "6")
    assert run.returncode == 0, run.stdout
    assert not (out / "stale.txt").exists()
    assert len((out / f"{name}.csv").read_text().splitlines()) == 1 + 6


def test_main_job_refuses_a_foreign_folder(extension_zip, tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "thesis.txt").write_text("keep me")
    run = run_job(extension_zip, out, "--frames", "6")
    assert run.returncode == 1
    assert "not empty" in run.stdout and (out / "thesis.txt").read_text() == "keep me"


@pytest.mark.skipif(bpy.app.version[0] < 5, reason="dev/demo.sh runs the job in .venv-bpy50")
def test_demo_script(tmp_path):
    """The README's first command (with a small frame range and a temp output folder)."""
    out = tmp_path / "demo"
    run = subprocess.run(["sh", str(ROOT / "dev" / "demo.sh"), "--frames", "6", "--out", str(out)],
                         cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                         timeout=900)
    assert run.returncode == 0, run.stdout
    assert run.stdout.strip().splitlines()[-1] == str(out.resolve())
    assert is_png(out / "contact_sheet.png") and (out / "wagtail_rocker.blend").exists()
