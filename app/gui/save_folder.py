"""Where save dialogs start: beside the data when that is the user's folder, else the folder used
last, else the user's documents; never inside the program's own folder (the bundled demo)."""

from __future__ import annotations

import os
from pathlib import Path

from PySide6.QtCore import QStandardPaths

import rigside
import rigside.core
from rigside.gui.settings_store import settings
from rigside.sample_data import demo_path

LAST_FOLDER_KEY = "files/last_save_folder"


def program_folders() -> list[Path]:
    """The folders the program runs from: its package, its core and the bundled demo's folder
    (side by side in a source tree, nested in an installed package)."""
    return [Path(rigside.__file__).resolve().parent, Path(rigside.core.__file__).resolve().parent,
            demo_path().resolve().parent]


def _usable(folder: Path) -> bool:
    folder = folder.resolve()
    inside = any(folder == p or p in folder.parents for p in program_folders())
    return folder.is_dir() and os.access(folder, os.W_OK) and not inside


def suggested_folder(near: str | Path | None = None) -> Path:
    """The folder a save dialog opens in: ``near``'s folder, the last one used, or documents."""
    candidates = [Path(near).resolve().parent] if near is not None else []
    last = settings().value(LAST_FOLDER_KEY)
    if isinstance(last, str) and last:
        candidates.append(Path(last))
    for folder in candidates:
        if _usable(folder):
            return folder
    documents = QStandardPaths.writableLocation(QStandardPaths.StandardLocation.DocumentsLocation)
    return Path(documents) if documents and Path(documents).is_dir() else Path.home()


def suggested_path(near: str | Path | None, name: str) -> Path:
    """``name`` in :func:`suggested_folder`."""
    return suggested_folder(near) / name


def remember_folder(folder: str | Path) -> None:
    """Keep the folder of a chosen save path for the next dialog."""
    s = settings()
    s.setValue(LAST_FOLDER_KEY, str(Path(folder).resolve()))
    s.sync()
