"""Host tests: real Blender (bpy from PyPI), headless.

``HOME`` is pointed at a fresh temporary folder *before* bpy is imported, so
Blender's user config, extensions and caches never touch the real user's. The
extension zip comes from ``$JOINTWISE_ZIP`` (dev/host_tests.sh builds it) or is
built here with ``.venv/bin/python addon/package.py``.
"""
from __future__ import annotations

import atexit
import os
import pathlib
import shutil
import subprocess
import sys
import tempfile

ROOT = pathlib.Path(__file__).resolve().parents[2]
_HOME = tempfile.mkdtemp(prefix="jointwise-host-home-")
atexit.register(shutil.rmtree, _HOME, True)
os.environ["HOME"] = _HOME
os.environ.pop("BLENDER_USER_CONFIG", None)
os.environ.pop("BLENDER_USER_SCRIPTS", None)
os.environ.pop("BLENDER_USER_EXTENSIONS", None)

import pytest  # noqa: E402

try:
    import bpy  # noqa: E402,F401
except ImportError:  # run with a venv that has no bpy: nothing to test here
    collect_ignore_glob = ["test_*.py"]
    bpy = None

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))

MODULE = "bl_ext.user_default.jointwise"


def pytest_collection_modifyitems(items):
    for item in items:
        item.add_marker(pytest.mark.host)


def _zip_path():
    z = os.environ.get("JOINTWISE_ZIP")
    if z and pathlib.Path(z).exists():
        return pathlib.Path(z)
    py = ROOT / ".venv" / "bin" / "python"
    out = subprocess.run([str(py), str(ROOT / "addon" / "package.py")], check=True,
                         stdout=subprocess.PIPE, text=True).stdout.strip().splitlines()[-1]
    return pathlib.Path(out)


@pytest.fixture(scope="session")
def extension_zip():
    return _zip_path()


@pytest.fixture(scope="session")
def installed(extension_zip):
    """Install and enable the extension once per session; returns the module name."""
    import addon_utils
    r = bpy.ops.extensions.package_install_files(filepath=str(extension_zip), repo="user_default",
                                                 enable_on_install=True)
    assert r == {"FINISHED"}
    assert addon_utils.check(MODULE)[1], "extension not enabled after install"
    return MODULE


@pytest.fixture
def fresh(installed, tmp_path):
    """An empty scene with the extension enabled."""
    import addon_utils
    bpy.ops.wm.read_homefile(use_empty=True)
    if not addon_utils.check(MODULE)[1]:
        bpy.ops.preferences.addon_enable(module=MODULE)
    scene = bpy.context.scene
    scene.unit_settings.scale_length = 1.0
    return scene
