"""The installed distribution: one top-level package, ``rigside``, carrying the bundled demo."""

import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_the_wheel_installs_only_rigside_and_carries_the_demo(tmp_path):
    r = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
                        "-w", str(tmp_path), str(ROOT)], capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-3000:]
    wheel = next(tmp_path.glob("rigside-*.whl"))
    names = zipfile.ZipFile(wheel).namelist()
    tops = {n.split("/")[0] for n in names if not n.split("/")[0].endswith((".dist-info", ".data"))}
    assert tops == {"rigside"}
    top_level = next(n for n in names if n.endswith(".dist-info/top_level.txt"))
    assert zipfile.ZipFile(wheel).read(top_level).decode().split() == ["rigside"]
    for part in ("rigside/__main__.py", "rigside/core/__init__.py", "rigside/cli/main.py",
                 "rigside/sample_data/demo.bin", "rigside/sample_data/demo.rigside.toml",
                 "rigside/sample_data/demo.truth.csv"):
        assert part in names
    assert not any(n.startswith(("core/", "app/", "tests/")) for n in names)
