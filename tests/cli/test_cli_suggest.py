import csv

import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.params import Params
from rigside.core.units.history import UndoStack
from rigside.core.units.session import RecordingRef, Session, file_fingerprint, save_session
from tests.core.suggestion_data import suggestion_sorting


@pytest.fixture(scope="module")
def invented(tmp_path_factory):
    """A session of the invented sorting (units 1 and 2 one neuron, unit 4 two) with merge 1+2 rejected."""
    d = tmp_path_factory.mktemp("suggest")
    raw = d / "rec.bin"
    raw.write_bytes(np.random.default_rng(0).integers(0, 255, 1 << 16, dtype=np.uint8).tobytes())
    events, sorting, _ = suggestion_sorting()
    params = Params()
    params.metrics.refractory_ms, params.metrics.censored_ms = 2.0, 0.5
    session = Session(RecordingRef(str(raw), raw.stat().st_size, file_fingerprint(raw)), params, events, sorting)
    save_session(d / "s.h5", session)
    return d


def _rows(path):
    return list(csv.DictReader(open(path, newline="")))


def test_suggest_writes_ranked_rows_and_leaves_out_rejections(invented, tmp_path):
    out = tmp_path / "sug.csv"
    assert main(["suggest", str(invented / "s.h5"), "--out", str(out), "--without-recording", "--quiet"]) == 0
    rows = _rows(out)
    assert [(r["kind"], r["units"]) for r in rows[:2]] == [("split", "4"), ("merge", "1 2")]
    assert [int(r["rank"]) for r in rows] == list(range(1, len(rows) + 1))
    assert float(rows[1]["refractory_dip"]) == 1.0 and rows[1]["waveform_similarity"] == ""
    # reject the merge in the session, as the window does; the command no longer lists it
    from rigside.core.quality.suggestions import suggest
    from rigside.core.units.session import load_session
    session = load_session(invented / "s.h5", check_recording=False)
    merge = next(s for s in suggest(session.events, session.sorting, session.params.metrics) if s.kind == "merge")
    UndoStack(session.sorting).push(merge.dismissal())
    save_session(tmp_path / "r.h5", session)
    out2 = tmp_path / "sug2.csv"
    assert main(["suggest", str(tmp_path / "r.h5"), "--out", str(out2), "--without-recording", "--quiet"]) == 0
    assert merge.key not in {r["key"] for r in _rows(out2)} and merge.key in {r["key"] for r in rows}


def test_suggest_with_the_recording_compares_mean_waveforms(tmp_path):
    rec, session, out = tmp_path / "r.bin", tmp_path / "s.h5", tmp_path / "sug.csv"
    assert main(["synth", str(rec), "--seconds", "3", "--channels", "4", "--seed", "1", "--quiet"]) == 0
    assert main(["sort", str(rec), "--session", str(session), "--quiet"]) == 0
    assert main(["suggest", str(session), "--out", str(out), "--min-score", "0", "--quiet"]) == 0
    merges = [r for r in _rows(out) if r["kind"] == "merge"]
    assert merges and all(-1 <= float(r["waveform_similarity"]) <= 1 for r in merges)


@pytest.mark.parametrize("extra, message", [
    (["--top", "0"], "number of suggestions must be at least 1"),
    (["--min-score", "2"], "lowest suggestion score must be from 0 to 1"),
    (["--recording", "elsewhere.bin", "--without-recording"], "exclude each other"),
])
def test_bad_options_are_one_line_and_exit_2(invented, tmp_path, capsys, extra, message):
    out = tmp_path / "x.csv"
    assert main(["suggest", str(invented / "s.h5"), "--out", str(out), "--quiet", *extra]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0] and not out.exists()


def test_bad_inputs_exit_2_and_the_session_is_never_written(invented, tmp_path, capsys):
    session = invented / "s.h5"
    before = session.read_bytes()
    assert main(["suggest", str(tmp_path / "none.h5"), "--out", str(tmp_path / "x.csv"), "--quiet"]) == 2
    assert main(["suggest", str(session), "--out", str(session), "--quiet"]) == 2
    (tmp_path / "s.csv").write_bytes(before)
    assert main(["suggest", str(tmp_path / "s.csv"), "--out", str(tmp_path / "s.csv"), "--quiet"]) == 2
    (invented / "rec.bin").rename(invented / "moved.bin")
    try:
        assert main(["suggest", str(session), "--out", str(tmp_path / "y.csv"), "--quiet"]) == 2
    finally:
        (invented / "moved.bin").rename(invented / "rec.bin")
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 4 and "--recording" in lines[3]
    assert session.read_bytes() == before and not (tmp_path / "y.csv").exists()
