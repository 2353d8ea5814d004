"""The one-page practice summary: the count curve and the trade-off view with the recording's
settings as an image (PNG or SVG), the curve as CSV, and the settings as TOML."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QPoint, QPointF, QRect, QRectF, QSize, Qt
from PySide6.QtGui import QFont, QImage, QPainter
from PySide6.QtSvg import QSvgGenerator
from PySide6.QtWidgets import QWidget

from rigside.core.errors import RigsideError
from rigside.core.io.atomic import WriteError, atomic_write
from rigside.core.io.recording import side_files
from rigside.core.synthetic.settings import SynthSettings, settings_path
from rigside.core.synthetic.tradeoff import Tradeoff, write_tradeoff_csv

PAGE = QSize(1800, 960)
MARGIN = 30
HEADER = 200
IMAGE_SUFFIXES = (".png", ".svg")
PER_LINE = 8


def summary_files(image: Path) -> tuple[Path, Path, Path]:
    """The image, ``NAME.csv`` (the curve) and ``NAME.settings.toml`` beside it."""
    return image, image.with_suffix(".csv"), image.with_name(image.stem + ".settings.toml")


def recording_settings(recording_path: Path) -> SynthSettings | None:
    """The practice settings kept beside a recording, or None (not a practice recording, or unreadable)."""
    path = settings_path(recording_path)
    try:
        return SynthSettings.load(path) if path.exists() else None
    except RigsideError:
        return None


def settings_lines(settings: SynthSettings | None) -> list[str]:
    if settings is None:
        return ["Settings of this recording: not known (no practice settings file beside it)."]
    items = [f"{k} = {v}" for k, v in settings.to_dict().items()]
    rows = [", ".join(items[i:i + PER_LINE]) for i in range(0, len(items), PER_LINE)]
    return ["Settings of this practice recording:"] + ["    " + r for r in rows]


def _paint(painter: QPainter, title: str, lines: list[str], views: list[QWidget]) -> None:
    painter.fillRect(QRect(0, 0, PAGE.width(), PAGE.height()), Qt.GlobalColor.white)
    painter.setPen(Qt.GlobalColor.black)
    font = QFont()
    font.setPixelSize(30)
    font.setBold(True)
    painter.setFont(font)
    painter.drawText(QPointF(MARGIN, MARGIN + 30), title)
    font.setPixelSize(17)
    font.setBold(False)
    painter.setFont(font)
    for i, line in enumerate(lines):
        painter.drawText(QPointF(MARGIN, MARGIN + 70 + 26 * i), line)
    width = (PAGE.width() - MARGIN * (len(views) + 1)) / max(len(views), 1)
    height = PAGE.height() - HEADER - MARGIN
    for i, view in enumerate(views):
        size = view.size()
        scale = min(width / max(size.width(), 1), height / max(size.height(), 1))
        painter.save()
        painter.translate(MARGIN + i * (width + MARGIN), HEADER)
        painter.scale(scale, scale)
        view.render(painter, QPoint(0, 0))
        painter.restore()


def _write_image(path: Path, title: str, lines: list[str], views: list[QWidget]) -> None:
    def write(tmp: Path) -> None:
        if path.suffix.lower() == ".svg":
            gen = QSvgGenerator()
            gen.setFileName(str(tmp))
            gen.setSize(PAGE)
            gen.setViewBox(QRectF(0, 0, PAGE.width(), PAGE.height()))
            gen.setTitle(title)
            painter = QPainter(gen)
            _paint(painter, title, lines, views)
            ok = painter.end()
        else:
            image = QImage(PAGE, QImage.Format.Format_ARGB32)
            painter = QPainter(image)
            _paint(painter, title, lines, views)
            painter.end()
            ok = image.save(str(tmp), "PNG")
        if not ok or not tmp.exists() or tmp.stat().st_size == 0:
            raise OSError(f"the image could not be written to {str(path)!r}")
    atomic_write(path, write)


def save_summary(image: str | Path, recording_path: str | Path, group_name: str, curve: Tradeoff,
                 views: list[QWidget]) -> list[Path]:
    """Write the summary files; refuses names that would replace the recording or its own files."""
    image = Path(image)
    if image.suffix.lower() not in IMAGE_SUFFIXES:
        raise RigsideError(f"summary image must end in {' or '.join(IMAGE_SUFFIXES)}, got {image.name!r}")
    rec = Path(recording_path)
    own = {p.resolve() for p in [rec, settings_path(rec), *side_files(rec)]}
    files = summary_files(image)
    clash = [p.name for p in files if p.resolve() in own]
    if clash:
        raise RigsideError(f"summary files must not replace the recording's own files, got {', '.join(clash)}")
    settings = recording_settings(rec)
    title = f"Practice summary: {rec.name}, {group_name}"
    try:
        _write_image(files[0], title, settings_lines(settings), views)
        write_tradeoff_csv(files[1], curve)
        if settings is not None:
            settings.save(files[2])
    except OSError as exc:
        raise WriteError(f"summary could not be written: {exc}") from None
    return list(files if settings is not None else files[:2])
