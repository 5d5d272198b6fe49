"""The import rule, checked on the source (AST): imports flow one way, no cycles, no private names across
modules, no function-level imports of our own modules; and the command line starts without heavy imports.

    cli -> workflows -> report -> {evaluate, stages, synth} -> io -> config -> {core, units} -> {errors, notices,
    version}

A package may import its own modules (acyclic) and any package of a lower layer, never one of its own layer
or above. ``chimeline/__init__`` (the notebook API, loaded lazily) sits with cli at the top.
"""
from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "pipeline" / "chimeline"

LAYER = {"__main__": -1, "__init__": 0, "cli": 0, "workflows": 1, "report": 2, "evaluate": 3, "stages": 3, "synth": 3, "io": 4,
         "config": 5, "core": 6, "units": 6, "errors": 7, "notices": 7, "version": 7}

#: third-party modules that may be imported inside functions (start-up time or optional)
HEAVY = {"open3d", "matplotlib", "pye57", "statsmodels", "dask", "distributed", "laspy", "lazrs", "pint", "tqdm",
         "PIL", "jinja2", "sklearn", "pyproj", "filelock"}


def module_name(path: Path, root: Path) -> str:
    rel = path.relative_to(root.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _resolve(mod: str, is_pkg: bool, node: ast.ImportFrom) -> str:
    if node.level == 0:
        return node.module or ""
    base = mod.split(".") if is_pkg else mod.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def scan_imports(root: Path):
    """(module-level edges, function-level imports, private-name imports) of every module under ``root``."""
    top = root.name
    modules = {}
    for path in sorted(root.rglob("*.py")):
        modules[module_name(path, root)] = path
    edges, inner, private = {}, [], []
    for mod, path in modules.items():
        is_pkg = path.name == "__init__.py"
        tree = ast.parse(path.read_text(encoding="utf-8"))
        targets = set()

        def add(target, lineno, nested, names=()):
            if target.split(".")[0] == top:
                # "from pkg import module" imports the module itself
                for n in names:
                    if f"{target}.{n}" in modules:
                        target_n = f"{target}.{n}"
                        (inner.append((mod, target_n, lineno)) if nested else targets.add(target_n))
                if target in modules and not (names and all(f"{target}.{n}" in modules for n in names)):
                    (inner.append((mod, target, lineno)) if nested else targets.add(target))
                for n in names:
                    if n.startswith("_") and not n.startswith("__") and target != mod:
                        private.append((mod, f"{target}.{n}", lineno))
            elif nested and target.split(".")[0] not in HEAVY:
                inner.append((mod, target, lineno))

        def visit(node, nested):
            for child in ast.iter_child_nodes(node):
                deeper = nested or isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda, ast.ClassDef))
                if isinstance(child, ast.Import):
                    for a in child.names:
                        add(a.name, child.lineno, deeper)
                elif isinstance(child, ast.ImportFrom):
                    add(_resolve(mod, is_pkg, child), child.lineno, deeper, [a.name for a in child.names])
                elif (isinstance(child, ast.Call) and getattr(child.func, "id", None) == "lazy_import"
                      and child.args and isinstance(child.args[0], ast.Constant)):
                    add(child.args[0].value, child.lineno, False)
                visit(child, deeper)

        visit(tree, False)
        edges[mod] = targets
    return modules, edges, inner, private


def layer_of(mod: str) -> tuple[str, int]:
    parts = mod.split(".")
    name = parts[1] if len(parts) > 1 else "__init__"
    if name == "__main__":  # python -m chimeline: the entry point sits with __init__ at the top
        name = "__init__"
    return name, LAYER[name]


def layer_violations(edges):
    out = []
    for a, targets in edges.items():
        pa, la = layer_of(a)
        for b in targets:
            pb, lb = layer_of(b)
            if pa == pb and pa != "__init__":
                continue
            if a == b.rsplit(".", 1)[0] or b == a:
                continue
            if lb <= la and not (pa == "__init__" or pb in ("version",) and la < LAYER["version"]):
                out.append(f"{a} imports {b} ({pa} layer {la} -> {pb} layer {lb})")
    return out


def cycles(edges):
    """Module-level import cycles (each as a list of modules)."""
    state, stack, found = {}, [], []

    def dfs(v):
        state[v] = 1
        stack.append(v)
        for w in edges.get(v, ()):
            if w not in edges:
                continue
            if state.get(w) == 1:
                found.append(stack[stack.index(w):] + [w])
            elif not state.get(w):
                dfs(w)
        stack.pop()
        state[v] = 2

    for v in sorted(edges):
        if not state.get(v):
            dfs(v)
    return found


@pytest.fixture(scope="module")
def scanned():
    return scan_imports(PKG)


def test_every_package_has_a_layer(scanned):
    modules = scanned[0]
    assert {layer_of(m)[0] for m in modules} <= set(LAYER)


def test_imports_flow_one_way(scanned):
    assert layer_violations(scanned[1]) == []


def test_no_import_cycles(scanned):
    assert cycles(scanned[1]) == []


def test_no_function_level_imports_of_our_modules(scanned):
    assert scanned[2] == []


def test_no_private_names_imported_across_modules(scanned):
    assert scanned[3] == []


def test_the_checker_catches_an_upward_import_a_cycle_and_a_private_name(tmp_path):
    """The rule can fail: a fake package with each kind of violation."""
    root = tmp_path / "chimeline"
    for sub in ("stages", "workflows", "core"):
        (root / sub).mkdir(parents=True)
        (root / sub / "__init__.py").write_text("")
    (root / "__init__.py").write_text("")
    (root / "stages" / "a.py").write_text("from ..workflows import run\nfrom .b import _helper\n")
    (root / "stages" / "b.py").write_text("from . import a\n\ndef _helper():\n    from ..core import x\n")
    (root / "workflows" / "run.py").write_text("")
    (root / "core" / "x.py").write_text("")
    modules, edges, inner, private = scan_imports(root)
    assert any("chimeline.stages.a imports chimeline.workflows.run" in v for v in layer_violations(edges))
    assert cycles(edges)
    assert inner == [("chimeline.stages.b", "chimeline.core", 4)] or inner[0][:2] == ("chimeline.stages.b", "chimeline.core.x")
    assert private and private[0][1] == "chimeline.stages.b._helper"


def _modules_after(code: str) -> set:
    out = subprocess.run([sys.executable, "-c", code + "\nimport sys\nprint(' '.join(sorted(sys.modules)))"],
                         capture_output=True, text=True, check=True)
    return set(out.stdout.split())


HEAVY_AT_START = {"open3d", "matplotlib", "statsmodels", "scipy", "laspy", "pint", "numpy"}


def test_cli_import_and_help_load_nothing_heavy():
    """`chimeline --help` and `chimeline run --help` import click and our light modules only."""
    for argv in (["--help"], ["run", "--help"], ["evaluate", "--help"]):
        mods = _modules_after(
            "from chimeline.cli import main\ntry:\n    main(%r)\nexcept SystemExit:\n    pass" % (argv,))
        assert not {m.split(".")[0] for m in mods} & HEAVY_AT_START, argv


def test_evaluate_does_not_import_open3d():
    mods = _modules_after("import chimeline.workflows.evaluate")
    assert "open3d" not in {m.split(".")[0] for m in mods}
