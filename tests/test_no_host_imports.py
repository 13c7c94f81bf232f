"""The core stays host-independent and data-only: scan every module in core/.

It must never import Blender's modules (bpy, mathutils, bmesh, ...) and never run
code from data (eval, exec, compile, pickle/marshal/shelve loading, __import__).
The scan uses Python's own ``ast`` parser, so comments and strings do not count.
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

CORE = Path(__file__).resolve().parent.parent / "core"
FILES = sorted(CORE.rglob("*.py"))
HOST = {"bpy", "mathutils", "bmesh", "bpy_extras", "gpu", "bgl", "blf", "aud", "freestyle", "idprop"}
UNSAFE_MODULES = {"pickle", "cPickle", "marshal", "shelve", "dill", "cloudpickle"}
UNSAFE_CALLS = {"eval", "exec", "compile", "__import__"}
RUNTIME_DEPS = {"numpy"}


def test_core_has_modules():
    assert len(FILES) >= 6


def _imports(tree):
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                yield node.lineno, a.name.split(".")[0]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            yield node.lineno, node.module.split(".")[0]


@pytest.mark.parametrize("path", FILES, ids=lambda p: p.name)
def test_no_host_or_unsafe_imports(path):
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for line, mod in _imports(tree):
        assert mod not in HOST, f"{path.name}:{line} imports host module {mod}"
        assert mod not in UNSAFE_MODULES, f"{path.name}:{line} imports {mod}"


@pytest.mark.parametrize("path", FILES, ids=lambda p: p.name)
def test_no_eval_exec(path):
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            f = node.func
            name = f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else None
            if isinstance(f, ast.Attribute) and name in ("load", "loads") and isinstance(f.value, ast.Name):
                assert f.value.id not in UNSAFE_MODULES, f"{path.name}:{node.lineno} {f.value.id}.{name}"
            if isinstance(f, ast.Name):
                assert name not in UNSAFE_CALLS, f"{path.name}:{node.lineno} calls {name}()"
            if isinstance(f, ast.Attribute) and isinstance(f.value, ast.Name) and f.value.id == "builtins":
                assert name not in UNSAFE_CALLS, f"{path.name}:{node.lineno} calls builtins.{name}()"
        if isinstance(node, ast.Name) and node.id in UNSAFE_CALLS and isinstance(node.ctx, ast.Load):
            assert False, f"{path.name}:{node.lineno} refers to {node.id}"


def test_third_party_imports_are_numpy_only():
    import sys
    std = set(sys.stdlib_module_names)
    for path in FILES:
        tree = ast.parse(path.read_text(encoding="utf-8"))
        # imports inside functions may be optional extras (e.g. plotting), named in pyproject
        top = [n for n in tree.body if isinstance(n, (ast.Import, ast.ImportFrom))]
        for line, mod in _imports(ast.Module(body=top, type_ignores=[])):
            assert mod in std or mod in RUNTIME_DEPS, f"{path.name}:{line} imports {mod} at module level"


def test_scanner_catches_offenders():
    # the scan must be able to fail: feed it a bad module
    bad = "import bpy\nfrom mathutils import Vector\nimport pickle\nx = eval('1')\n"
    tree = ast.parse(bad)
    mods = {m for _, m in _imports(tree)}
    assert {"bpy", "mathutils", "pickle"} <= mods
    assert any(isinstance(n, ast.Call) and getattr(n.func, "id", None) == "eval" for n in ast.walk(tree))
