"""No command writes, renames onto or deletes one of its inputs; sort never replaces a session silently.

Rules from the product brief (inputs never overwritten, hand curation never replaced silently);
common practice, no source.
"""

import shutil

import h5py
import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.io.recording import metadata_path
from rigside.core.synthetic.synth import write_synth
from rigside.core.units.session import load_session


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("kept")
    write_synth(d / "r.bin", seconds=3, channels=4, seed=2)
    return d


def one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    return err[0]


def copy_raw(demo, folder, name):
    """The demo recording under another name, with its metadata file."""
    folder.mkdir(exist_ok=True)
    shutil.copy(demo / "r.bin", folder / name)
    shutil.copy(metadata_path(demo / "r.bin"), folder / (name + ".rigside.toml"))
    return folder / name


def test_detect_keeps_a_recording_named_like_a_temporary_file(demo, tmp_path, capsys):
    rec = copy_raw(demo, tmp_path, "ev.csv.tmp")
    before = rec.read_bytes()
    assert main(["detect", str(rec), "--out", str(tmp_path / "ev.csv"), "--quiet"]) == 0
    assert rec.read_bytes() == before
    assert (tmp_path / "ev.csv").read_text().startswith("sample,")


def test_detect_refuses_to_write_over_the_ground_truth_beside_the_recording(demo, tmp_path, capsys):
    rec = copy_raw(demo, tmp_path, "r.bin")
    truth = tmp_path / "r.truth.csv"
    shutil.copy(demo / "r.truth.csv", truth)
    before = truth.read_bytes()
    assert main(["detect", str(rec), "--out", str(truth), "--quiet"]) == 2
    assert "must not be one of the inputs" in one_error_line(capsys)
    assert truth.read_bytes() == before


def test_detect_refuses_an_output_that_is_a_link_to_the_recording(demo, tmp_path, capsys):
    rec = copy_raw(demo, tmp_path, "r.bin")
    (tmp_path / "out.csv").symlink_to(rec)
    before = rec.read_bytes()
    assert main(["detect", str(rec), "--out", str(tmp_path / "out.csv"), "--quiet"]) == 2
    assert "must not be one of the inputs" in one_error_line(capsys)
    assert rec.read_bytes() == before


def test_sort_keeps_an_hdf5_recording_named_like_the_checkpoint(demo, tmp_path, capsys):
    raw = np.fromfile(demo / "r.bin", dtype="<i2").reshape(-1, 4)
    rec = tmp_path / "s.h5.checkpoint.h5"
    with h5py.File(rec, "w") as f:
        f.create_dataset("data", data=raw).attrs.update(rate_hz=30000.0, gain_uv=0.195)
    before = rec.read_bytes()
    assert main(["sort", str(rec), "--session", str(tmp_path / "s.h5"), "--quiet"]) == 2
    assert "checkpoint must not be one of the inputs" in one_error_line(capsys)
    assert rec.read_bytes() == before
    assert not (tmp_path / "s.h5").exists()


def test_export_refuses_to_write_over_its_own_session(demo, tmp_path, capsys):
    rec = copy_raw(demo, tmp_path, "r.bin")
    session = tmp_path / "binned.h5"
    assert main(["sort", str(rec), "--session", str(session), "--quiet"]) == 0
    before = session.read_bytes()
    capsys.readouterr()
    assert main(["export", str(session), "--out", str(tmp_path), "--quiet"]) == 2
    assert "must not be one of the inputs" in one_error_line(capsys)
    assert session.read_bytes() == before
    assert not list(tmp_path.glob("unit_*.npy")) and not (tmp_path / "export.json").exists()


def test_batch_refuses_outputs_that_are_inputs_of_the_batch(demo, tmp_path, capsys):
    a = copy_raw(demo, tmp_path, "a.events.csv")
    b = copy_raw(demo, tmp_path, "b.bin")
    before = a.read_bytes()
    assert main(["batch", str(b), str(a), "--out-dir", str(tmp_path), "--quiet"]) == 2
    assert "batch output must not be one of the inputs" in one_error_line(capsys)
    assert a.read_bytes() == before
    assert not (tmp_path / "b.events.csv").exists()      # refused before anything was written


def test_synth_refuses_to_write_over_an_existing_recording(demo, tmp_path, capsys):
    rec = copy_raw(demo, tmp_path, "r.bin")
    before = rec.read_bytes()
    assert main(["synth", str(rec), "--seconds", "1", "--channels", "4", "--quiet"]) == 2
    assert "--overwrite" in one_error_line(capsys)
    assert rec.read_bytes() == before
    assert main(["synth", str(rec), "--seconds", "1", "--channels", "4", "--overwrite", "--quiet"]) == 0
    assert rec.stat().st_size == 30000 * 4 * 2


def test_sort_over_a_session_needs_overwrite_and_never_loses_a_backup(demo, tmp_path, capsys):
    rec = copy_raw(demo, tmp_path, "r.bin")
    s = tmp_path / "s.h5"
    assert main(["sort", str(rec), "--session", str(s), "--quiet"]) == 0
    curated = s.read_bytes()                      # stands for a hand-curated session
    capsys.readouterr()
    assert main(["sort", str(rec), "--session", str(s), "--quiet"]) == 2
    assert "--overwrite" in one_error_line(capsys)
    assert s.read_bytes() == curated
    assert main(["sort", str(rec), "--session", str(s), "--overwrite", "--quiet"]) == 0
    assert "kept as" in capsys.readouterr().out
    first_rerun = s.read_bytes()
    assert main(["sort", str(rec), "--session", str(s), "--overwrite", "--quiet", "--seed", "3"]) == 0
    assert (tmp_path / "s.h5.bak").read_bytes() == curated
    assert (tmp_path / "s.h5.bak.1").read_bytes() == first_rerun
    assert load_session(s).sorting.units
