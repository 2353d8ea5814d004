"""Architecture contracts: the core imports no Qt, pyqtgraph or app, and its tests run without them."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_import_linter_contract():
    code = "import sys; from importlinter.cli import lint_imports_command; sys.exit(lint_imports_command())"
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    assert "core never imports Qt, pyqtgraph or app KEPT" in r.stdout


def test_core_tests_pass_with_qt_unimportable():
    code = ("import sys, tests.block_qt, pytest; "
            "sys.exit(pytest.main(['tests/core', '-x', '-p', 'no:pytest-qt', '-p', 'no:cacheprovider']))")
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-3000:]
    assert " passed" in r.stdout
