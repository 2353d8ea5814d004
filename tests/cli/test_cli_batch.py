import csv
import json

import pytest

from rigside.cli.main import main
from rigside.core.synthetic.synth import write_synth


@pytest.fixture(scope="module")
def recordings(tmp_path_factory):
    d = tmp_path_factory.mktemp("batch")
    for i in range(2):
        write_synth(d / f"r{i}.bin", seconds=2, channels=4, seed=i)
    (d / "broken.bin").write_bytes(b"\x00" * 7)
    (d / "broken.rigside.toml").write_text("[recording]\nchannels = 4\nrate_hz = 30000\n")
    return d


def outcomes(folder):
    return {row["recording"].split("/")[-1]: row for row in csv.DictReader(open(folder / "batch.csv"))}


def test_local_batch_writes_every_output_and_reports_failures(recordings, capsys):
    out = recordings / "out"
    code = main(["batch", str(recordings / "r0.bin"), str(recordings / "broken.bin"), str(recordings / "r1.bin"),
                 "--out-dir", str(out), "--quiet"])
    assert code == 2  # one recording failed: an input error, the others still done
    rows = outcomes(out)
    assert rows["r0.bin"]["status"] == "done" and rows["r1.bin"]["status"] == "done"
    assert rows["broken.bin"]["status"] == "failed" and "multiple of channels" in rows["broken.bin"]["message"]
    for stem in ("r0", "r1"):
        events = list(csv.DictReader(open(out / f"{stem}.events.csv")))
        summary = json.load(open(out / f"{stem}.summary.json"))
        assert len(events) == int(rows[f"{stem}.bin"]["events"]) == sum(c["events"] for c in summary["channels"])
    assert "failed: " in capsys.readouterr().out


def test_dask_engine_gives_the_same_events_as_local(recordings):
    pytest.importorskip("dask")   # the dask extra
    local, dask_out = recordings / "local", recordings / "dask"
    files = [str(recordings / "r0.bin"), str(recordings / "r1.bin")]
    assert main(["batch", *files, "--out-dir", str(local), "--format", "h5", "--quiet"]) == 0
    assert main(["batch", *files, "--out-dir", str(dask_out), "--format", "h5", "--engine", "dask",
                 "--processes", "2", "--quiet"]) == 0
    from rigside.core.events import EventTable
    for stem in ("r0", "r1"):
        a, b = EventTable.read_h5(local / f"{stem}.events.h5"), EventTable.read_h5(dask_out / f"{stem}.events.h5")
        assert len(a) > 0 and (a.sample == b.sample).all()


@pytest.mark.parametrize("args,msg", [
    (["--out-dir", "{d}/r0.bin"], "must be a folder"),
    (["--out-dir", "{d}/x/y"], "parent must exist"),
    (["--out-dir", "{d}/o2", "--processes", "0"], "process count"),
    (["--out-dir", "{d}/o3", "--threshold", "0"], "threshold must be above 0"),
])
def test_bad_options(recordings, capsys, args, msg):
    code = main(["batch", str(recordings / "r0.bin"), *[a.format(d=recordings) for a in args], "--quiet"])
    assert code == 2 and msg in capsys.readouterr().err


def test_same_names_in_different_folders_get_the_folder_names(tmp_path, capsys):
    for day, seed in (("day1", 5), ("day2", 6)):
        (tmp_path / day).mkdir()
        write_synth(tmp_path / day / "rec.bin", seconds=1, channels=4, seed=seed)
    out = tmp_path / "o"
    files = [str(tmp_path / "day1" / "rec.bin"), str(tmp_path / "day2" / "rec.bin")]
    assert main(["batch", *files, "--out-dir", str(out), "--quiet"]) == 0
    for day in ("day1", "day2"):
        rows = list(csv.DictReader(open(out / f"{day}_rec.events.csv")))
        summary = json.load(open(out / f"{day}_rec.summary.json"))
        assert len(rows) == sum(c["events"] for c in summary["channels"]) > 0
    # the two recordings differ, so their outputs do too
    assert (out / "day1_rec.events.csv").read_bytes() != (out / "day2_rec.events.csv").read_bytes()
    code = main(["batch", files[0], files[0], "--out-dir", str(tmp_path / "o2"), "--quiet"])
    assert code == 2 and "must be distinct files" in capsys.readouterr().err
