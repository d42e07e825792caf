"""The package boundaries of the design: vintages knows nothing of harness; harness uses vintages' front."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import vintages

ROOT = Path(__file__).resolve().parents[2]


def _imports(folder: str) -> list[tuple[Path, int, str, list[str]]]:
    out = []
    for path in sorted((ROOT / folder).rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.module:
                out.append((path, node.lineno, node.module, [a.name for a in node.names]))
            elif isinstance(node, ast.Import):
                out.extend((path, node.lineno, a.name, []) for a in node.names)
    return out


def test_vintages_never_imports_harness():
    """No module of vintages imports harness, statically or at run time (common practice: layering)."""
    bad = [f"{p.relative_to(ROOT)}:{ln} imports {m}" for p, ln, m, _ in _imports("vintages")
           if m == "harness" or m.startswith("harness.")]
    assert not bad, bad
    code = ("import sys, importlib, pkgutil, vintages\n"
            "for m in pkgutil.iter_modules(vintages.__path__):\n"
            "    importlib.import_module('vintages.' + m.name)\n"
            "print(sorted(n for n in sys.modules if n == 'harness' or n.startswith('harness.')))")
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert res.stdout.strip() == "[]", res.stdout


def test_harness_imports_vintages_front_only():
    """harness imports from ``vintages`` itself, and only names listed in ``vintages.__all__``."""
    bad = []
    for p, ln, m, names in _imports("harness"):
        where = f"{p.relative_to(ROOT)}:{ln}"
        if m.startswith("vintages."):
            bad.append(f"{where} imports the private module {m}")
        elif m == "vintages":
            bad += [f"{where} imports {n}, not in vintages.__all__" for n in names if n not in vintages.__all__]
    assert not bad, bad


def test_vintages_front_resolves():
    """Every name of ``vintages.__all__`` resolves (the lazy front has no stale entry)."""
    for name in vintages.__all__:
        assert getattr(vintages, name) is not None, name


def test_public_names_never_collide_with_submodules():
    """Every harness top-level name is the documented object on every access, even after all submodules load."""
    code = ("import importlib, pkgutil, harness, types\n"
            "for m in pkgutil.walk_packages(harness.__path__, 'harness.'):\n"
            "    importlib.import_module(m.name)\n"
            "bad = [n for n in harness.__all__ if isinstance(getattr(harness, n), types.ModuleType)]\n"
            "print(bad, callable(harness.evaluate), harness.evaluate.__module__)")
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    assert res.stdout.strip() == "[] True harness.evaluation.evaluator", res.stdout + res.stderr
    import harness

    for name in harness.__all__:
        obj = getattr(harness, name)
        assert obj.__doc__, f"harness.{name} has no docstring"
