"""`rigside export --nwb`: the file its help names and nothing else, one line and exit 2 for bad
input, a full disk or a missing pynwb, and never a write onto an input."""

import re

import pytest

from rigside.cli.main import main
from rigside.core.io.atomic import stale_temporaries
from tests.cli.test_cli_failing_writes import LIMITED, assert_one_line, needs_resource, run_child

pynwb = pytest.importorskip("pynwb")   # the nwb extra
NO_PYNWB = """
import sys
sys.modules["pynwb"] = None
from rigside.cli.main import main
sys.exit(main(sys.argv[1:]))
"""


@pytest.fixture(scope="module")
def sorted_demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("export_nwb")
    assert main(["synth", str(d / "r.bin"), "--seconds", "4", "--channels", "8", "--seed", "3", "--quiet"]) == 0
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "s.h5"), "--quiet"]) == 0
    return d


def test_help_names_exactly_the_files_written(sorted_demo, tmp_path, capsys):
    folder, nwb_dir = tmp_path / "folder", tmp_path / "nwb"
    nwb_dir.mkdir()
    assert main(["export", str(sorted_demo / "s.h5"), "--out", str(folder), "--nwb", str(nwb_dir / "OUT.nwb"),
                 "--quiet"]) == 0
    written = {re.sub(r"^unit_\d+\.npy$", "unit_<id>.npy", p.name) for p in folder.iterdir()}
    written |= {p.name for p in nwb_dir.iterdir()}
    assert pynwb.validate(path=str(nwb_dir / "OUT.nwb")) == []     # the standard's own check
    capsys.readouterr()
    with pytest.raises(SystemExit):
        main(["export", "--help"])
    description = capsys.readouterr().out.split("positional arguments:")[0].split("\n\n", 1)[1]  # not usage, options
    named = set(re.findall(r"[\w<>]+\.(?:csv|npy|h5|json|nwb)", " ".join(description.split())))
    assert named == written == {"unit_times.csv", "unit_<id>.npy", "binned.h5", "export.json", "OUT.nwb"}


@pytest.mark.parametrize("args,msg", [
    (["export", "{d}/s.h5"], "needs --out DIR, --nwb OUT.nwb or both"),
    (["export", "{d}/s.h5", "--nwb", "{d}/x.h5"], "must end in .nwb"),
    (["export", "{d}/s.h5", "--nwb", "{d}/x.nwb", "--into-copy"], "needs a session whose recording is an NWB"),
    (["export", "{d}/s.h5", "--out", "{d}/e", "--into-copy"], "needs --nwb"),
    (["export", "{d}/s.h5", "--nwb", "{d}/x.nwb", "--recording", "{d}/nothing.bin"], "must be an existing file"),
    (["export", "{d}/s.h5", "--nwb", "{d}/x.nwb", "--waveform-events", "0"], "at least 1"),
    (["export", "{d}/r.bin", "--nwb", "{d}/x.nwb"], "session"),
])
def test_bad_input_is_one_line(sorted_demo, capsys, args, msg):
    code = main([a.format(d=sorted_demo) for a in args] + ["--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and msg in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert not (sorted_demo / "x.nwb").exists()


def test_never_onto_an_input(sorted_demo, capsys):
    before = (sorted_demo / "r.bin").read_bytes()
    link = sorted_demo / "link.nwb"
    link.unlink(missing_ok=True)
    link.symlink_to(sorted_demo / "r.bin")
    assert main(["export", str(sorted_demo / "s.h5"), "--nwb", str(link), "--quiet"]) == 2
    assert "must not be one of the inputs" in capsys.readouterr().err
    assert (sorted_demo / "r.bin").read_bytes() == before and link.is_symlink()


def test_a_moved_recording_is_named_and_can_be_given(sorted_demo, tmp_path, capsys):
    import shutil
    moved = tmp_path / "moved.bin"
    shutil.copy(sorted_demo / "r.bin", moved)
    shutil.copy(sorted_demo / "r.rigside.toml", tmp_path / "moved.rigside.toml")
    session = tmp_path / "s.h5"
    assert main(["sort", str(moved), "--session", str(session), "--quiet"]) == 0
    moved.rename(tmp_path / "again.bin")
    (tmp_path / "moved.rigside.toml").rename(tmp_path / "again.rigside.toml")
    assert main(["export", str(session), "--nwb", str(tmp_path / "u.nwb"), "--quiet"]) == 2
    assert "--recording" in capsys.readouterr().err
    assert main(["export", str(session), "--nwb", str(tmp_path / "u.nwb"), "--recording",
                 str(tmp_path / "again.bin"), "--quiet"]) == 0
    assert pynwb.validate(path=str(tmp_path / "u.nwb")) == []


@needs_resource
def test_a_full_disk_is_one_line_and_no_file(sorted_demo, tmp_path):
    out = tmp_path / "full.nwb"
    proc = run_child(LIMITED, 20000, "export", sorted_demo / "s.h5", "--nwb", out, "--quiet")
    assert_one_line(proc, str(out), "File too large")
    assert not out.exists() and not stale_temporaries(out)


def test_without_pynwb_one_line(sorted_demo, tmp_path):
    out = tmp_path / "n.nwb"
    proc = run_child(NO_PYNWB, "export", sorted_demo / "s.h5", "--nwb", out, "--quiet")
    assert_one_line(proc, "needs the pynwb package")
    assert not out.exists()
