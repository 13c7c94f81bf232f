"""The layer order of core/ and addon/, written once, and the test that keeps it.

Every module of ``core/`` (import name ``jointwise``) and of ``addon/`` is parsed (nothing
is imported or run); every import inside it, at the top or inside a function, must point
to a module of a lower layer.  Modules of one layer do not import each other.  An import
circle is reported on its own, with the modules on it.  DEVELOPERS.md shows the same
order as a picture.
"""
from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CORE = ROOT / "core"
ADDON = ROOT / "addon"

#: The core, bottom to top.  A module imports only from layers before its own.
CORE_LAYERS = [
    {"units", "errors"},                   # constants; the exception family and Reason
    {"spatial", "outputs"},                # rigid-motion maths; whole-or-nothing file writes
    {"joints", "couplings", "results"},    # joint types, coupling laws; Pose, Sweep
    {"coupling_table"},                    # the model's coupling groups (master, ratio, law)
    {"model"},                             # links, joints, tree, loops, units: no solving
    {"spec"},                              # files -> the model's parts (reading, checking)
    {"linalg"},                            # stacked least-norm steps, rank and branch tests
    {"kinematics"},                        # the batched evaluator, J-dot q-dot, point Jacobians
    {"solver", "rates", "measures", "cam"},  # solving one pose; analysis of solved states
    {"sweep", "targets"},                  # sweeps and ranges; posing by target
    {"mechanism"},                         # the public front: Mechanism, load
    {"__init__", "tidy"},                  # the package; axis tidying of files
    {"report"},                            # CLI output (tables, JSON, plots)
    {"cli"},                               # the command line
]

#: The extension, bottom to top (pure modules first).
ADDON_LAYERS = [
    {"convert", "keys", "tomlwrite", "fit", "proximity"},
    {"properties"},
    {"scene"},
    {"animation"},
    {"posing"},
    {"reporting"},
    {"bake", "measures", "edit"},
    {"live", "trace", "files", "axes"},
    {"drag"},
    {"operators"},
    {"panels", "clearance", "cam"},
    {"__init__"},
]

#: Files of addon/ that are not part of the extension (a build script).
ADDON_NOT_MODULES = {"package"}


def package_imports(path, package, modules):
    """(line, imported module) for every import of a module of ``package`` in ``path``,
    wherever it stands (top level or inside a function).  ``from . import NAME`` counts as
    an import of module NAME if there is one, else of the package's ``__init__``."""
    out = []
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level == 1:
                base = node.module
            elif node.level == 0 and package and (node.module or "").split(".")[0] == package:
                base = node.module[len(package) + 1:] or None
            else:
                continue
            if base:
                out.append((node.lineno, base.split(".")[0]))
            else:
                out.extend((node.lineno, a.name if a.name in modules else "__init__") for a in node.names)
        elif isinstance(node, ast.Import) and package:
            for a in node.names:
                parts = a.name.split(".")
                if parts[0] == package:
                    out.append((node.lineno, parts[1] if len(parts) > 1 else "__init__"))
    return out


def graph(folder, package, skip=()):
    modules = {p.stem for p in folder.glob("*.py")} - set(skip)
    return {m: package_imports(folder / f"{m}.py", package, modules) for m in sorted(modules)}, modules


def circles(edges):
    """Import circles of a graph {module: [(line, module)]}, each as a list of modules."""
    found, state = [], {}

    def visit(m, stack):
        state[m] = "open"
        stack.append(m)
        for _, t in edges.get(m, ()):
            if t == m or t not in edges:
                continue
            if state.get(t) == "open":
                found.append(stack[stack.index(t):] + [t])
            elif t not in state:
                visit(t, stack)
        stack.pop()
        state[m] = "done"

    for m in edges:
        if m not in state:
            visit(m, [])
    return found


def layer_violations(edges, layers, where):
    layer = {m: i for i, ms in enumerate(layers) for m in ms}
    bad = [f"{where}/{m}.py: give it a place in the layer list" for m in edges if m not in layer]
    for m, imports in edges.items():
        for line, t in imports:
            if t == m or m not in layer:
                continue
            if t not in layer:
                bad.append(f"{where}/{m}.py:{line} imports {t}, which is no module of {where}/")
            elif layer[t] >= layer[m]:
                bad.append(f"{where}/{m}.py:{line} imports {t} (layer {layer[t]}, not below its own {layer[m]})")
    return bad


def test_layer_lists_name_each_module_once():
    for layers in (CORE_LAYERS, ADDON_LAYERS):
        names = [m for ms in layers for m in ms]
        assert len(names) == len(set(names))
    assert {m for ms in CORE_LAYERS for m in ms} == {p.stem for p in CORE.glob("*.py")}
    assert {m for ms in ADDON_LAYERS for m in ms} == {p.stem for p in ADDON.glob("*.py")} - ADDON_NOT_MODULES


def test_core_has_no_import_circle():
    edges, _ = graph(CORE, "jointwise")
    assert circles(edges) == []


def test_core_imports_point_down_the_layers():
    edges, _ = graph(CORE, "jointwise")
    assert layer_violations(edges, CORE_LAYERS, "core") == []


def test_addon_has_no_import_circle():
    edges, _ = graph(ADDON, None, ADDON_NOT_MODULES)
    assert circles(edges) == []


def test_addon_imports_point_down_the_layers():
    edges, _ = graph(ADDON, None, ADDON_NOT_MODULES)
    assert layer_violations(edges, ADDON_LAYERS, "addon") == []


def test_the_checks_catch_a_circle_and_an_upward_import(tmp_path):
    # a tiny package with a circle hidden in a function and an upward import
    (tmp_path / "low.py").write_text("def f():\n    from .high import g\n")
    (tmp_path / "high.py").write_text("from . import low\n")
    (tmp_path / "__init__.py").write_text("")
    edges, _ = graph(tmp_path, "pkg")
    assert circles(edges) in ([["low", "high", "low"]], [["high", "low", "high"]])
    bad = layer_violations(edges, [{"low"}, {"high"}, {"__init__"}], "pkg")
    assert len(bad) == 1 and "pkg/low.py:2 imports high" in bad[0]
    (tmp_path / "other.py").write_text("from pkg.low import f\nimport pkg.high\nimport pkg\nfrom pkg import low, x\n")
    edges, _ = graph(tmp_path, "pkg")
    assert [t for _, t in edges["other"]] == ["low", "high", "__init__", "low", "__init__"]
