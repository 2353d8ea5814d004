"""Start-up: the help texts load none of the heavy packages (they are imported by the commands'
run functions when a command actually runs)."""

from __future__ import annotations

import subprocess
import sys

import pytest

HEAVY = ("numpy", "scipy", "numba", "sklearn", "h5py", "PySide6", "pyqtgraph")

PROBE = (
    "import runpy, sys\n"
    "sys.argv = ['rigside'] + sys.argv[1:]\n"
    "try:\n"
    "    runpy.run_module('rigside', run_name='__main__')\n"
    "except SystemExit:\n"
    "    pass\n"
    "print('LOADED', ' '.join(sorted({m.split('.')[0] for m in sys.modules})))\n"
)


def loaded_after(*argv: str) -> set[str]:
    out = subprocess.run([sys.executable, "-c", PROBE, *argv], capture_output=True, text=True, check=True).stdout
    line = next(x for x in out.splitlines() if x.startswith("LOADED "))
    return set(line.split()[1:])


@pytest.mark.parametrize("argv", [("--help",), ("detect", "--help"), ("sort", "--help"), ("metrics", "--help"),
                                  ("audit", "--help"), ("batch", "--help"), ("open", "--help"),
                                  ("synth", "--help")])
def test_help_imports_no_heavy_package(argv):
    loaded = loaded_after(*argv)
    assert "rigside" in loaded  # the probe did run the command line
    assert not loaded & set(HEAVY), f"rigside {' '.join(argv)} imported {sorted(loaded & set(HEAVY))}"


def test_help_lists_every_command():
    out = subprocess.run([sys.executable, "-m", "rigside", "--help"], capture_output=True, text=True,
                         check=True).stdout
    for command in ("detect", "synth", "batch", "sort", "export", "metrics", "audit", "open", "demo"):
        assert command in out


def test_metrics_help_carries_the_caution():
    from rigside.core.quality.unit_table import CAUTION

    out = subprocess.run([sys.executable, "-m", "rigside", "metrics", "--help"], capture_output=True, text=True,
                         check=True).stdout
    assert "single unit" in " ".join(out.split()) and CAUTION.split()[0] in out


def test_workers_help_says_it_also_sets_the_clustering_processes():
    # first_pass spreads channel groups over this many processes (rigside.core.units.clustering)
    out = subprocess.run([sys.executable, "-m", "rigside", "sort", "--help"], capture_output=True, text=True,
                         check=True).stdout
    text = " ".join(out.split())
    assert "--workers N threads" in text and "processes clustering channel groups" in text
