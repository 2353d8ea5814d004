"""Ask what practice recording to make: the settings a trainer varies, and where to write it."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFileDialog,
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from rigside.core.errors import RigsideError
from rigside.core.synthetic.settings import COLOURS, MAX_CHANNELS, MAX_SECONDS, MAX_UNITS, SynthSettings
from rigside.core.synthetic.synth import synth_side_files
from rigside.gui.fields import double_spin

AMPLITUDE_KINDS = ("peak amplitude (µV)", "SNR (× noise σ in the band)")
PER_BUNDLE = "3 per bundle"


def _int_spin(low: int, high: int, value: int, special: str = "") -> QSpinBox:
    box = QSpinBox()
    box.setRange(low, high)
    box.setValue(value)
    if special:
        box.setSpecialValueText(special)
    return box


def _pair(low: QDoubleSpinBox, high: QDoubleSpinBox) -> QWidget:
    w = QWidget()
    lay = QHBoxLayout(w)
    lay.setContentsMargins(0, 0, 0, 0)
    lay.addWidget(low)
    lay.addWidget(QLabel("to"))
    lay.addWidget(high)
    return w


class PracticeDialog(QDialog):
    """The practice recording's settings (defaults: the demo scenario), a folder and a file name;
    the size on disk is estimated as the settings change. Accepted only with valid settings and a
    name whose files do not exist yet."""

    def __init__(self, folder: str | Path, parent=None, settings: SynthSettings | None = None):
        super().__init__(parent)
        self.setWindowTitle("New practice recording")
        d = settings or SynthSettings()
        self.folder = QLineEdit(str(folder))
        browse = QPushButton("Choose…")
        browse.clicked.connect(self._choose_folder)
        where = QWidget()
        row = QHBoxLayout(where)
        row.setContentsMargins(0, 0, 0, 0)
        row.addWidget(self.folder, 1)
        row.addWidget(browse)
        self.name = QLineEdit("practice.bin")
        self.seconds = double_spin(d.seconds, 0.1, MAX_SECONDS, 1, " s")
        self.channels = _int_spin(1, MAX_CHANNELS, d.channels)
        self.group_size = _int_spin(1, 64, d.group_size)
        self.rate = double_spin(d.rate_hz, 1000.0, 100000.0, 0, " Hz", step=1000.0)
        self.units = _int_spin(-1, MAX_UNITS, -1 if d.units is None else d.units, PER_BUNDLE)
        self.units.setToolTip("0 makes a noise-only recording")
        self.amplitude_kind = QComboBox()
        self.amplitude_kind.addItems(list(AMPLITUDE_KINDS))
        lo, hi = d.amplitude_uv if d.snr is None else d.snr
        self.amplitude_kind.setCurrentIndex(0 if d.snr is None else 1)
        self.amp_low, self.amp_high = double_spin(lo, 0.1, 5000.0), double_spin(hi, 0.1, 5000.0)
        self.rate_low, self.rate_high = (double_spin(v, 0.01, 200.0, 2, " Hz") for v in d.rates_hz)
        self.noise = double_spin(d.noise_uv, 0.0, 1000.0, 1, " µV")
        self.colour = QComboBox()
        self.colour.addItems(list(COLOURS))
        self.colour.setCurrentText(d.noise_colour)
        self.hum = double_spin(d.hum_uv, 0.0, 5000.0, 1, " µV")
        self.drift = double_spin(d.drift_uv, 0.0, 5000.0, 1, " µV")
        self.artefacts = double_spin(d.artefacts_per_min, 0.0, 600.0, 1, " per min")
        self.overlap = double_spin(d.overlap_fraction, 0.0, 0.5, 2, step=0.05)
        self.seed = _int_spin(0, 2 ** 31 - 1, min(d.seed, 2 ** 31 - 1))
        self.size = QLabel("")
        self.problem = QLabel("")
        self.problem.setWordWrap(True)
        self.problem.setStyleSheet("color: #b00000")
        self._build(where)

    def _build(self, where: QWidget) -> None:
        form = QFormLayout()
        rows = [("Folder", where), ("File name", self.name), ("Duration", self.seconds),
                ("Channels", self.channels), ("Wires per bundle", self.group_size), ("Sampling rate", self.rate),
                ("True units", self.units), ("Amplitudes as", self.amplitude_kind),
                ("Amplitude range", _pair(self.amp_low, self.amp_high)),
                ("Firing rates", _pair(self.rate_low, self.rate_high)), ("Background noise SD", self.noise),
                ("Noise colour", self.colour), ("Mains hum (50 Hz, largest)", self.hum),
                ("Baseline drift (largest)", self.drift), ("Artefacts", self.artefacts),
                ("Overlapping spikes (share)", self.overlap), ("Seed", self.seed)]
        for label, widget in rows:
            form.addRow(label, widget)
        note = QLabel("The same settings and seed always give the same recording: the settings are saved "
                      "beside it (<tt>NAME.synth.toml</tt>) for <tt>rigside synth --settings</tt>.")
        note.setWordWrap(True)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        buttons.button(QDialogButtonBox.StandardButton.Ok).setText("Write and open")
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        self.ok_button = buttons.button(QDialogButtonBox.StandardButton.Ok)
        lay = QVBoxLayout(self)
        lay.addLayout(form)
        lay.addWidget(note)
        lay.addWidget(self.size)
        lay.addWidget(self.problem)
        lay.addWidget(buttons)
        for box in (self.seconds, self.rate, self.amp_low, self.amp_high, self.rate_low, self.rate_high,
                    self.overlap):
            box.valueChanged.connect(self._update)
        for box in (self.channels, self.group_size, self.units):
            box.valueChanged.connect(self._update)
        self.amplitude_kind.currentIndexChanged.connect(self._update)
        self.name.textChanged.connect(self._update)
        self.folder.textChanged.connect(self._update)
        self._update()

    def _choose_folder(self) -> None:
        folder = QFileDialog.getExistingDirectory(self, "Folder for the practice recording", self.folder.text())
        if folder:
            self.folder.setText(folder)

    def settings(self) -> SynthSettings:
        """The settings shown, checked (:class:`RigsideError` names the first bad value)."""
        pair = (self.amp_low.value(), self.amp_high.value())
        snr = self.amplitude_kind.currentIndex() == 1
        return SynthSettings(seconds=self.seconds.value(), channels=self.channels.value(),
                             group_size=self.group_size.value(), rate_hz=self.rate.value(),
                             units=None if self.units.value() < 0 else self.units.value(),
                             amplitude_uv=SynthSettings().amplitude_uv if snr else pair,
                             snr=pair if snr else None, rates_hz=(self.rate_low.value(), self.rate_high.value()),
                             noise_uv=self.noise.value(), noise_colour=self.colour.currentText(),
                             hum_uv=self.hum.value(), drift_uv=self.drift.value(),
                             artefacts_per_min=self.artefacts.value(), overlap_fraction=self.overlap.value(),
                             seed=self.seed.value()).validate()

    def path(self) -> Path:
        name = self.name.text().strip()
        return Path(self.folder.text().strip()) / (name if Path(name).suffix else name + ".bin")

    def _check(self) -> str:
        """Why the dialog cannot be accepted yet ("" when it can)."""
        try:
            self.settings()
        except RigsideError as exc:
            return str(exc)
        name, folder = self.name.text().strip(), Path(self.folder.text().strip())
        if not name or Path(name).name != name:
            return "The file name must be a plain name (no folders)."
        if not folder.is_dir():
            return f"The folder must exist, got {str(folder)!r}."
        taken = [f.name for f in (self.path(), *synth_side_files(self.path())) if f.exists()]
        if taken:
            return f"These files exist already (choose another name): {', '.join(taken)}"
        return ""

    def _update(self) -> None:
        try:
            mb = self.settings().estimated_bytes() / 1e6
            self.size.setText(f"About {mb:,.1f} MB on disk (int16 raw file plus ground truth).")
        except RigsideError:
            self.size.setText("")
        why = self._check()
        self.problem.setText(why)
        self.ok_button.setEnabled(not why)

    def accept(self) -> None:
        why = self._check()
        if why:
            self.problem.setText(why)
            return
        super().accept()
