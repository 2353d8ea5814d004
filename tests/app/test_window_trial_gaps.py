"""Window usability gaps found in the trial: foreign truth files, layout dialog, exports, layout
restore, undo after reopening, save folders."""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np

from tests.app.test_window_frame import write_noise


def test_a_foreign_or_broken_truth_file_is_ignored_with_a_warning(window, tmp_path, caplog):
    for name, text in (("foreign", "time,neuron\n0.1,3\n0.2,4\n"),
                       ("broken", "unit,sample,time_s\n1,abc,0.1\n")):
        rec = tmp_path / f"{name}.bin"
        write_noise(rec, 0.5, 4)
        rec.with_name(f"{name}.truth.csv").write_text(text)
        with caplog.at_level(logging.WARNING, logger="rigside"):
            assert window.open_path(str(rec))
            assert window.wait_idle(60)
        assert window.analysis_outcome == "done" and window.last_error is None
        assert window.bench.events is not None and window.bench.analysis.truth is None
        assert "ground truth ignored" in window.statusBar().currentMessage()
        assert any("ground truth ignored" in r.getMessage() for r in caplog.records)


def test_layout_dialog_saves_the_layout_beside_the_data(window, tmp_path, monkeypatch):
    from PySide6.QtWidgets import QDialog

    from rigside.core.io.recording import open_recording
    from rigside.gui.dialogs.raw_layout import RawLayoutDialog

    raw = tmp_path / "lab.dat"
    x = np.random.default_rng(2).normal(0, 40, (15000, 4))
    raw.write_bytes(b"\0" * 256 + np.round(x + 32768).astype("<u2").tobytes())

    def fill_in(dialog):
        dialog.channels.setValue(4)
        dialog.dtype.setCurrentText("uint16")
        assert dialog.offset_counts.value() == 32768      # proposed for centred unsigned data
        dialog.header.setValue(256)
        dialog.group_size.setValue(4)
        assert "15,000 samples per channel" in dialog.implied.text()
        return QDialog.DialogCode.Accepted

    monkeypatch.setattr(RawLayoutDialog, "exec", fill_in)
    assert window.open_path(str(raw))
    assert window.wait_idle(60)
    meta = tmp_path / "lab.rigside.toml"
    assert meta.exists()
    # the command line and the next opening read the same layout without asking
    again = open_recording(raw)
    assert (again.layout.header_bytes, again.layout.offset_counts, again.layout.dtype) == (256, 32768.0, "uint16")
    np.testing.assert_allclose(again.read(0, 5), window.bench.recording.read(0, 5))
    again.close()
    monkeypatch.setattr(RawLayoutDialog, "exec", lambda d: (_ for _ in ()).throw(AssertionError("asked again")))
    assert window.open_path(str(raw))
    assert window.wait_idle(60)


def test_hdf5_with_several_datasets_offers_the_choice(window, tmp_path, monkeypatch):
    import h5py

    from rigside.gui.dialogs.hdf5_dataset import DatasetDialog

    path = tmp_path / "two.h5"
    x = np.random.default_rng(0).normal(0, 20, (15000, 4)).astype(np.float32)
    with h5py.File(path, "w") as f:
        f.attrs["rate_hz"] = 30000.0
        f.create_dataset("lfp", data=x[::10].copy())
        f.create_dataset("raw", data=x)
    offered = []

    def choose(dialog):
        offered.extend(dialog.choice.itemText(i) for i in range(dialog.choice.count()))
        dialog.choice.setCurrentText("raw")
        return DatasetDialog.DialogCode.Accepted

    monkeypatch.setattr(DatasetDialog, "exec", choose)
    assert window.open_path(str(path))
    assert sorted(offered) == ["lfp", "raw"]
    assert window.bench.recording.n_samples == 15000
    assert window.wait_idle(60)
    monkeypatch.setattr(DatasetDialog, "exec", lambda d: DatasetDialog.DialogCode.Rejected)
    assert not window.open_path(str(path))


def test_saving_the_demo_starts_in_documents_then_the_last_folder(demo_window, tmp_path, monkeypatch):
    from PySide6.QtCore import QStandardPaths

    from rigside.gui.save_folder import program_folders
    from tests.app.units_helpers import cluster_demo

    docs = tmp_path / "Documents"
    docs.mkdir()
    monkeypatch.setattr(QStandardPaths, "writableLocation", lambda where: str(docs))
    win = demo_window
    cluster_demo(win)
    starts = []
    win.units.files.pick_file = lambda title, start, filt, save=False: starts.append(start) or ""
    assert not win.units.files.save()
    first = starts[-1]
    assert not any(p == Path(first) or p in Path(first).parents for p in program_folders())
    assert first == str(docs / "demo.session.h5")
    chosen = tmp_path / "mine" / "demo.h5"
    chosen.parent.mkdir()
    assert win.units.files.save(chosen)
    assert win.wait_idle(60)
    assert not win.units.files.save_as()
    assert starts[-1] == str(chosen)       # save-as starts at the session's own file
    win.units.files.path = None
    assert not win.units.files.save()
    assert starts[-1] == str(chosen.parent / "demo.session.h5")   # the folder used last


def test_a_saved_layout_that_squeezes_the_traces_is_not_restored(qtbot):
    from PySide6.QtCore import Qt

    from rigside.gui.window import MIN_TRACE_SHARE, MainWindow

    first = MainWindow()
    qtbot.addWidget(first)
    first.show()
    first.resizeDocks([first.docks["waveforms"]], [850], Qt.Orientation.Vertical)
    qtbot.waitUntil(lambda: first.central.height() < MIN_TRACE_SHARE * first.height())
    first.close()
    second = MainWindow()
    qtbot.addWidget(second)
    second.show()
    qtbot.waitUntil(lambda: second.central.height() >= MIN_TRACE_SHARE * second.height(), timeout=3000)
    assert "too little room" in second.statusBar().currentMessage()
    # a layout that leaves the traces room is kept as it was saved
    second.docks["features"].setVisible(False)
    second.close()
    third = MainWindow()
    qtbot.addWidget(third)
    third.show()
    qtbot.wait(20)
    assert not third.docks["features"].isVisible()
    assert third.central.height() >= MIN_TRACE_SHARE * third.height()
    third.close()


def test_undo_after_reopening_a_session_undoes_the_last_step_of_the_previous_sitting(demo_window, tmp_path):
    from tests.app.units_helpers import biggest_unit, cluster_demo

    win = demo_window
    ctl = win.units
    cluster_demo(win)
    units = ctl.sorting.units
    a, b = next([u, v] for u in units for v in units if u < v and units[u].group == units[v].group)
    assert ctl.relabel([biggest_unit(ctl)], "single unit")
    before_last = ctl.sorting.copy()
    assert ctl.merge([a, b])
    assert win.wait_idle(60)
    after_last = ctl.sorting.copy()
    path = tmp_path / "sitting.h5"
    assert ctl.files.save(path)
    assert win.wait_idle(60)
    assert ctl.files.open(path)
    assert win.wait_idle(60)
    assert ctl.sorting.state_equal(after_last)
    undo = win.actions_by_name["undo"]
    assert undo.isEnabled() and "Merge" in undo.text()
    assert ctl.undo_stack.isClean() and ctl.undo_stack.count() == 2   # the first pass is not a step
    undo.trigger()
    assert win.wait_idle(60)
    assert ctl.sorting.state_equal(before_last)        # assignments bit for bit, units, id counter
    np.testing.assert_array_equal(ctl.sorting.assignments, before_last.assignments)
    win.actions_by_name["redo"].trigger()
    assert ctl.sorting.state_equal(after_last)
    undo.trigger()
    undo.trigger()
    assert not undo.isEnabled()
    assert ctl.sorting.unit(biggest_unit(ctl)).label == "unreviewed"


def test_file_export_writes_spike_times_and_the_unit_table(demo_window, tmp_path):
    import csv

    from rigside.core.exports.units import export_units
    from rigside.core.units.session import load_session
    from tests.app.units_helpers import cluster_demo

    win = demo_window
    menu_texts = [a.text() for a in win.menuBar().actions()[0].menu().actions()]
    assert "&Export" in menu_texts
    export_menu = next(a.menu() for a in win.menuBar().actions()[0].menu().actions() if a.text() == "&Export")
    audit = [a for a in export_menu.actions() if a in (win.actions_by_name["audit_report"],
                                                      win.actions_by_name["audit_table"])]
    assert len(audit) == 2 and not any(a.isEnabled() for a in audit)     # enabled once an audit exists
    assert not win.actions_by_name["export_spike_times"].isEnabled()
    cluster_demo(win)
    ex = win.exporter
    assert win.actions_by_name["export_spike_times"].isEnabled()
    folder = tmp_path / "spikes"
    folder.mkdir()
    ex.pick_folder = lambda title, start: str(folder)
    win.actions_by_name["export_spike_times"].trigger()
    assert win.wait_idle(60)
    rows = list(csv.DictReader(open(folder / "unit_times.csv")))
    counts = {u: n for u, n in win.units.sorting.counts().items() if u >= 0 and n > 0}
    assert len(rows) == sum(counts.values())
    assert {int(r["unit"]) for r in rows} == set(counts)
    for u, n in counts.items():
        assert len(np.load(folder / f"unit_{u}.npy")) == n
    table = tmp_path / "units.csv"
    ex.pick_file = lambda title, start, filt: str(table)
    win.actions_by_name["export_unit_table"].trigger()
    assert win.wait_idle(60)
    lines = [ln for ln in table.read_text().splitlines() if not ln.startswith("#")]
    units = [int(r["unit"]) for r in csv.DictReader(lines)]
    assert sorted(units) == sorted(win.units.sorting.units)
    assert "written" in win.statusBar().currentMessage()
    # the same files as the command line writes from the saved session
    session_file = tmp_path / "s.h5"
    assert win.units.files.save(session_file)
    assert win.wait_idle(60)
    cli = tmp_path / "cli"
    export_units(load_session(session_file, check_recording=False), cli)
    assert (cli / "unit_times.csv").read_text() == (folder / "unit_times.csv").read_text()
