"""Architecture contracts: the core imports no Qt, pyqtgraph or app, checked statically
(import-linter) and by importing every core module with those packages made unimportable."""

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_import_linter_contract():
    code = "import sys; from importlinter.cli import lint_imports_command; sys.exit(lint_imports_command())"
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    assert "core never imports Qt, pyqtgraph or app KEPT" in r.stdout


IMPORT_EACH = """
import importlib, json, pkgutil, sys, traceback
import tests.block_qt
import core
failed = {}
names = sorted(m.name for m in pkgutil.walk_packages(core.__path__, "core."))
for name in names:
    try:
        importlib.import_module(name)
    except Exception:
        failed[name] = traceback.format_exc(limit=3)
loaded = sorted(m for m in sys.modules if m.split(".")[0] in ("PySide6", "shiboken6", "pyqtgraph", "app", "matplotlib"))
print(json.dumps({"names": names, "failed": failed, "loaded": loaded}))
"""


def test_every_core_module_imports_with_qt_blocked():
    r = subprocess.run([sys.executable, "-c", IMPORT_EACH], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr[-3000:]
    out = json.loads(r.stdout.strip().splitlines()[-1])
    on_disk = sorted("core." + p.stem for p in (ROOT / "core").glob("*.py") if p.stem != "__init__")
    assert out["names"] == on_disk
    assert out["failed"] == {}, "\n".join(out["failed"].values())
    # nothing of the window side, and no plotting library either: the report imports it on first use
    assert out["loaded"] == []
