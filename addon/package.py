"""Build the installable extension zip: ``dist/jointwise-<version>.zip``.

Run from anywhere with a Python that has ``build`` installed::

    .venv/bin/python addon/package.py

Steps: build the core wheel from the repository root with ``python -m build
--wheel`` into a temporary folder, then write a zip holding the add-on modules,
``blender_manifest.toml`` (its ``wheels`` line generated from the wheel's file
name) and ``wheels/<core wheel>``. This file itself is not shipped. Prints the
zip's path on the last line.
"""
from __future__ import annotations

import pathlib
import re
import subprocess
import sys
import tempfile
import tomllib
import zipfile

ADDON = pathlib.Path(__file__).resolve().parent
ROOT = ADDON.parent
# every module of the extension (all of addon/*.py but this script)
MODULES = tuple(sorted(p.name for p in ADDON.glob("*.py") if p.name != "package.py"))


def project_version():
    with open(ROOT / "pyproject.toml", "rb") as f:
        return tomllib.load(f)["project"]["version"]


def manifest_text(wheel_name):
    """The manifest with its ``wheels`` line pointing at ``wheel_name``."""
    text = (ADDON / "blender_manifest.toml").read_text(encoding="utf-8")
    line = f'wheels = ["./wheels/{wheel_name}"]'
    text, count = re.subn(r"(?m)^wheels\s*=.*$", line, text)
    if count != 1:
        raise SystemExit("blender_manifest.toml: expected exactly one 'wheels = [...]' line")
    return text


def build_wheel(outdir):
    run = subprocess.run([sys.executable, "-m", "build", "--wheel", "--outdir", str(outdir), str(ROOT)],
                         stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    if run.returncode != 0:
        sys.stderr.write(run.stdout)
        raise SystemExit(f"building the core wheel failed (exit {run.returncode})")
    wheels = sorted(pathlib.Path(outdir).glob("jointwise-*-py3-none-any.whl"))
    if len(wheels) != 1:
        raise SystemExit(f"expected one jointwise wheel in {outdir}, found {[w.name for w in wheels]}")
    return wheels[0]


def main():
    version = project_version()
    manifest = tomllib.loads(manifest_text("x.whl"))
    if manifest["version"] != version:
        raise SystemExit(f"blender_manifest.toml: version {manifest['version']!r} "
                         f"does not match pyproject.toml version {version!r}")
    dist = ROOT / "dist"
    dist.mkdir(exist_ok=True)
    out = dist / f"jointwise-{version}.zip"
    with tempfile.TemporaryDirectory() as tmp:
        wheel = build_wheel(tmp)
        part = out.with_suffix(".zip.part")
        with zipfile.ZipFile(part, "w", zipfile.ZIP_DEFLATED) as z:
            z.writestr("blender_manifest.toml", manifest_text(wheel.name))
            for name in MODULES:
                z.write(ADDON / name, name)
            z.write(wheel, f"wheels/{wheel.name}")
        part.replace(out)
    print(out)


if __name__ == "__main__":
    main()
