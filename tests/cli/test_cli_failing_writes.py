"""A failing write (full disk, here a file size limit) is one line and exit 2, never a crash or a
partial file; a recording that changes size while it is read is one line too (never SIGBUS).

The limit is set with resource.setrlimit(RLIMIT_FSIZE) in a child process (Python ignores
SIGXFSZ, so writes past the limit fail with EFBIG). Common practice, no source.
"""

import importlib.util
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from rigside.cli.main import main
from rigside.core.io.atomic import stale_temporaries
from rigside.core.synthetic.synth import write_synth

ROOT = Path(__file__).resolve().parents[2]
needs_resource = pytest.mark.skipif(importlib.util.find_spec("resource") is None,
                                    reason="file size limits need the resource module (POSIX)")
LIMITED = """
import resource, sys
limit = int(sys.argv[1])
resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
from rigside.cli.main import main
sys.exit(main(sys.argv[2:]))
"""
CHANGING = """
import os, sys
import rigside.core.signal.pipeline as pipeline
path, how = sys.argv[1], sys.argv[2]
original, calls = pipeline.detect_block, []

def changed_after_first_block(*args, **kwargs):
    calls.append(1)
    if len(calls) == 1:
        if how == "shrink":
            os.truncate(path, os.path.getsize(path) // 3)
        else:
            with open(path, "ab") as fh:
                fh.write(bytes(16))
    return original(*args, **kwargs)
pipeline.detect_block = changed_after_first_block
from rigside.cli.main import main
sys.exit(main(["detect", path] + sys.argv[3:]))
"""


def run_child(script: str, *args) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-c", script, *map(str, args)], cwd=ROOT, env=env,
                          capture_output=True, text=True, timeout=300)


def assert_one_line(proc: subprocess.CompletedProcess, *words: str) -> None:
    assert proc.returncode == 2, (proc.returncode, proc.stderr[-2000:])
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, lines
    for w in words:
        assert w in lines[0], lines[0]


@pytest.fixture(scope="module")
def rec(tmp_path_factory):
    d = tmp_path_factory.mktemp("limits")
    write_synth(d / "r.bin", seconds=3, channels=4, seed=2)
    return d / "r.bin"


@needs_resource
def test_detect_on_a_full_disk_keeps_the_previous_events(rec, tmp_path):
    out = tmp_path / "ev.csv"
    assert main(["detect", str(rec), "--out", str(out), "--quiet"]) == 0
    before = out.read_bytes()
    assert len(before) > 2000
    proc = run_child(LIMITED, 2000, "detect", rec, "--out", out, "--quiet")
    assert_one_line(proc, str(out), "File too large")
    assert out.read_bytes() == before
    assert not stale_temporaries(out)


@needs_resource
def test_sort_on_a_full_disk_is_an_error_not_a_crash(rec, tmp_path):
    session = tmp_path / "s.h5"
    assert main(["sort", str(rec), "--session", str(session), "--quiet"]) == 0
    before = session.read_bytes()
    files = sorted(p.name for p in tmp_path.iterdir())
    assert len(files) == 2 and files[1].startswith("s.h5.static-")    # state part and static part
    proc = run_child(LIMITED, 8000, "sort", rec, "--session", session, "--overwrite", "--quiet")
    assert_one_line(proc, "File too large")
    assert session.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == files        # no temporary, checkpoint or backup left


@needs_resource
def test_export_on_a_full_disk_leaves_no_complete_looking_mix(rec, tmp_path):
    session, out = tmp_path / "s.h5", tmp_path / "exp"
    assert main(["sort", str(rec), "--session", str(session), "--quiet"]) == 0
    assert main(["export", str(session), "--out", str(out), "--quiet"]) == 0
    names = sorted(json.loads((out / "export.json").read_text())["files"])
    incomplete = len(json.dumps({"complete": False, "files": names}, indent=1))
    proc = run_child(LIMITED, incomplete + 16, "export", session, "--out", out, "--quiet")
    assert_one_line(proc, str(out), "File too large")
    assert json.loads((out / "export.json").read_text())["complete"] is False
    assert not [p for p in out.iterdir() if p.name.endswith(".tmp")]


@pytest.mark.parametrize("how", ["shrink", "grow"])
def test_a_recording_that_changes_size_during_detection_is_one_line(rec, tmp_path, how):
    changing = tmp_path / "c.bin"
    changing.write_bytes(rec.read_bytes())
    (tmp_path / "c.rigside.toml").write_text((rec.parent / "r.rigside.toml").read_text())
    proc = run_child(CHANGING, changing, how, "--out", tmp_path / "ev.csv", "--workers", "1",
                     "--chunk-s", "0.25", "--quiet")
    assert_one_line(proc, "must keep its size while it is read")
    assert not (tmp_path / "ev.csv").exists()
