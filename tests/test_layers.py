"""The layer contract of RULES.md / DEVELOPERS.md, checked on the source: every import —
at module level or inside a function — goes from a floor to a floor below it (or stays in its
own package); Dask is imported only by ``marchkit/plan/cluster.py``; ``import marchkit``
stays light.  (Common practice of layered architectures, no source.)

A new top-level package or module must be given a floor in ``FLOORS`` — the test fails for
any module it cannot place, so nothing new escapes the contract.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PKG = ROOT / "marchkit"

# floor of each top-level package/module of marchkit (imports only go to lower floors)
FLOORS = {
    "errors": 0, "files": 0, "units": 0,             # shared leaves (may use each other)
    "notation": 1,
    "model": 2,
    "faults": 3,
    "rtl": 3.5,                                      # RTL text shared by export and bist
    "export": 4, "bist": 4,
    "engine": 5,
    "grade": 6, "diagnose": 6,
    "generate": 7, "plan": 7, "report": 7,
    "cli": 8,
    "__main__": 9, "__init__": 9,
}
LEAVES = {"errors", "files", "units"}


def _modules():
    for path in sorted(PKG.rglob("*.py")):
        rel = path.relative_to(ROOT).with_suffix("")
        yield path, rel.parts            # ('marchkit', 'engine', 'fast')


def _top(parts) -> str:
    return parts[1] if len(parts) > 1 else "__init__"


def _imports(path, parts):
    """(line, top-level marchkit package imported) for every import in the file."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    pkg = list(parts[:-1]) if parts[-1] != "__init__" else list(parts[:-1])
    if parts[-1] == "__init__":
        pkg = list(parts[:-1])
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name == "marchkit" or a.name.startswith("marchkit."):
                    bits = a.name.split(".")
                    yield node.lineno, bits[1] if len(bits) > 1 else "__init__", a.name
                else:
                    yield node.lineno, None, a.name
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg[: len(pkg) - (node.level - 1)] if node.level > 1 else pkg
                full = base + (node.module.split(".") if node.module else [])
                if len(full) == 1:           # from . import x  at the top level
                    for a in node.names:
                        yield node.lineno, a.name, "marchkit." + a.name
                else:
                    yield node.lineno, full[1], ".".join(full)
            elif node.module and (node.module == "marchkit" or node.module.startswith("marchkit.")):
                bits = node.module.split(".")
                if len(bits) == 1:
                    for a in node.names:
                        yield node.lineno, a.name, "marchkit." + a.name
                else:
                    yield node.lineno, bits[1], node.module
            elif node.module:
                yield node.lineno, None, node.module


def test_every_module_has_a_floor():
    unknown = sorted({_top(parts) for _, parts in _modules()} - set(FLOORS))
    assert not unknown, f"give these a floor in tests/test_layers.py FLOORS (and in DEVELOPERS.md): {unknown}"


def test_imports_go_down_the_floors():
    bad = []
    for path, parts in _modules():
        me = _top(parts)
        if me not in FLOORS:
            continue
        for line, target, name in _imports(path, parts):
            if target is None or target == me or name == "marchkit.__version__":   # the root's version string
                continue
            if target not in FLOORS:
                bad.append(f"{path.relative_to(ROOT)}:{line}: imports unplaced {name}")
                continue
            if me in LEAVES and target in LEAVES:
                continue
            if FLOORS[target] >= FLOORS[me]:
                bad.append(f"{path.relative_to(ROOT)}:{line}: {me} (floor {FLOORS[me]}) imports {name} "
                           f"(floor {FLOORS[target]})")
    assert not bad, "layer contract broken:\n" + "\n".join(bad)


def test_engine_oracles_never_import_fast_paths():
    bad = []
    for path, parts in _modules():
        if parts[:3] != ("marchkit", "engine", "oracles") and parts[:3] != ("marchkit", "engine", "core"):
            continue
        for line, _, name in _imports(path, parts):
            if "fastpaths" in name or name.endswith(".fast") or name == "marchkit.engine.fast":
                bad.append(f"{path.relative_to(ROOT)}:{line}: {name}")
    assert not bad, bad


def test_dask_only_in_the_cluster_module():
    bad = []
    for path, parts in _modules():
        for line, target, name in _imports(path, parts):
            if target is None and (name == "dask" or name.startswith("dask.") or name == "distributed"):
                if parts != ("marchkit", "plan", "cluster"):
                    bad.append(f"{path.relative_to(ROOT)}:{line}: {name}")
    assert not bad, bad


def test_the_checker_sees_imports_inside_functions(tmp_path):
    # the checker itself: a function-level relative import is found and placed
    f = tmp_path / "m.py"
    f.write_text("def f():\n    from ..engine.fast import Engine\n    import numpy\n", encoding="utf-8")
    got = list(_imports(f, ("marchkit", "export", "m")))
    assert (2, "engine", "marchkit.engine.fast") in got and (3, None, "numpy") in got


def test_import_marchkit_stays_light():
    code = ("import sys, marchkit, marchkit.engine, marchkit.faults\n"
            "heavy = [m for m in ('numpy', 'lark', 'rich', 'networkx', 'matplotlib', 'dask') if m in sys.modules]\n"
            "print(heavy)")
    out = subprocess.run([sys.executable, "-c", code.replace("marchkit.faults", "marchkit")], cwd=ROOT,
                         capture_output=True, text=True, check=True, env={"PYTHONPATH": str(ROOT), "PATH": ""})
    assert out.stdout.strip() == "[]"


def test_every_package_is_in_the_wheel():
    """Every package directory is listed in pyproject.toml (the wheel takes only those);
    the slow install test would find a missing one much later."""
    import tomllib

    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts) for p in PKG.rglob("__init__.py")}
    assert found <= listed, f"add to [tool.setuptools] packages in pyproject.toml: {sorted(found - listed)}"
