"""Architecture contracts, checked on the installed layout of the code (one ``rigside`` package):
the core imports no Qt, pyqtgraph, window or command line; rooms import downward only; no module
imports itself through others; and every core module imports with Qt made unimportable."""

import json
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
CONFIG = tomllib.loads((ROOT / "pyproject.toml").read_text())


@pytest.fixture(scope="module")
def staged(tmp_path_factory) -> Path:
    """The package as it is installed (rigside/ = app/, rigside/core/ = core/, rigside/sample_data/):
    the static checks read folders, and in the repository the two halves are side by side."""
    root = tmp_path_factory.mktemp("staged")
    for name, src in CONFIG["tool"]["setuptools"]["package-dir"].items():
        dst = root.joinpath(*name.split("."))
        shutil.copytree(ROOT / src, dst, dirs_exist_ok=True, ignore=shutil.ignore_patterns("__pycache__"))
    return root


def test_import_linter_contracts(staged):
    code = "import sys; from importlinter.cli import lint_imports_command; sys.exit(lint_imports_command())"
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True,
                       env={"PYTHONPATH": str(staged), "PATH": "/usr/bin:/bin"})
    assert r.returncode == 0, r.stdout + r.stderr
    for contract in CONFIG["tool"]["importlinter"]["contracts"]:
        assert f"{contract['name']} KEPT" in r.stdout


CYCLES = """
import json, sys, grimp
g = grimp.build_graph("rigside")
mods = sorted(g.modules)
edges = {m: sorted(g.find_modules_directly_imported_by(m)) for m in mods}
index, low, stack, on, comps, n = {}, {}, [], set(), [], [0]
def visit(v):
    index[v] = low[v] = n[0]; n[0] += 1; stack.append(v); on.add(v)
    for w in edges[v]:
        if w not in index:
            visit(w); low[v] = min(low[v], low[w])
        elif w in on:
            low[v] = min(low[v], index[w])
    if low[v] == index[v]:
        comp = []
        while True:
            w = stack.pop(); on.discard(w); comp.append(w)
            if w == v:
                break
        if len(comp) > 1:
            comps.append(sorted(comp))
sys.setrecursionlimit(10000)
for m in mods:
    if m not in index:
        visit(m)
print(json.dumps(comps))
"""


def test_no_import_cycles(staged):
    """Tarjan's strongly connected components over the import graph (imports inside functions
    count too): a component of more than one module is a cycle."""
    r = subprocess.run([sys.executable, "-c", CYCLES], capture_output=True, text=True,
                       env={"PYTHONPATH": str(staged), "PATH": "/usr/bin:/bin"})
    assert r.returncode == 0, r.stderr[-3000:]
    assert json.loads(r.stdout) == []


IMPORT_EACH = """
import importlib, json, pkgutil, sys, traceback
import tests.block_qt
import rigside.core
failed = {}
names = sorted(m.name for m in pkgutil.walk_packages(rigside.core.__path__, "rigside.core."))
for name in names:
    try:
        importlib.import_module(name)
    except Exception:
        failed[name] = traceback.format_exc(limit=3)
loaded = sorted(m for m in sys.modules if m.split(".")[0] in ("PySide6", "shiboken6", "pyqtgraph", "matplotlib")
                or m.startswith(("rigside.gui", "rigside.cli")))
print(json.dumps({"names": names, "failed": failed, "loaded": loaded}))
"""


def test_every_core_module_imports_with_qt_blocked():
    r = subprocess.run([sys.executable, "-c", IMPORT_EACH], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr[-3000:]
    out = json.loads(r.stdout.strip().splitlines()[-1])
    on_disk = sorted("rigside.core." + ".".join(p.relative_to(ROOT / "core").with_suffix("").parts).removesuffix(
        ".__init__") for p in (ROOT / "core").rglob("*.py") if p.relative_to(ROOT / "core").parts != ("__init__.py",))
    assert out["names"] == on_disk
    assert out["failed"] == {}, "\n".join(out["failed"].values())
    # nothing of the window side, and no plotting library either: the report imports it on first use
    assert out["loaded"] == []


def test_every_package_folder_is_declared():
    """A package folder left out of pyproject's list would be missing from the wheel."""
    declared = set(CONFIG["tool"]["setuptools"]["packages"])
    dirs = CONFIG["tool"]["setuptools"]["package-dir"]
    found = set()
    for name, src in dirs.items():
        for init in (ROOT / src).rglob("__init__.py"):
            rel = init.parent.relative_to(ROOT / src).parts
            found.add(".".join((name, *rel)))
    assert found == declared
