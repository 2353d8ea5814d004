"""An export folder that is consistent as a whole.

Before anything is written, the manifest ``export.json`` is replaced by one marked
``"complete": false`` that lists every file the folder may then hold (the previous export's
files and the planned ones). Files of the previous export that the new one does not write
are removed; the new files are written (each atomically); the manifest is written last,
marked complete, with every file's size. A folder whose manifest is incomplete is an export
that was interrupted; the next export into it removes whatever the interrupted one listed.
Files the manifest never listed (the user's own) are left alone.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from rigside.core.errors import RigsideError
from rigside.core.io.atomic import atomic_write, check_not_input, safe_unlink

MANIFEST = "export.json"


def _plain_name(name: object) -> bool:
    return isinstance(name, str) and name not in ("", ".", "..", MANIFEST) and os.path.basename(name) == name \
        and "\\" not in name


def listed_files(out: Path) -> list[str]:
    """File names a previous manifest in ``out`` lists (plain names only; unreadable -> none)."""
    try:
        doc = json.loads((out / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return []
    if not isinstance(doc, dict):
        return []
    names = list(doc.get("files") or []) if isinstance(doc.get("files"), (list, dict)) else []
    units = doc.get("units") if isinstance(doc.get("units"), list) else []
    names += [u.get("file") for u in units if isinstance(u, dict)]
    return sorted({n for n in names if _plain_name(n)})


class ExportFolder:
    """Write an export into ``out`` under the protocol of this module.

    Parameters
    ----------
    out
        Output folder (created if missing).
    planned
        Every file name the export will write (besides the manifest).
    """

    def __init__(self, out: str | Path, planned: list[str]) -> None:
        self.out = Path(out)
        bad = [n for n in planned if not _plain_name(n)]
        if bad:
            raise RigsideError(f"export file names must be plain file names, got {bad[:3]}")
        self.planned = list(dict.fromkeys(planned))
        for name in (*self.planned, MANIFEST):
            check_not_input(self.out / name, "export file")
        self.out.mkdir(parents=True, exist_ok=True)
        old = listed_files(self.out)
        for name in old:
            check_not_input(self.out / name, "file to delete")
        self._write_manifest({"complete": False, "files": sorted(set(old) | set(self.planned))})
        for name in old:
            if name not in self.planned:
                safe_unlink(self.out / name)

    def path(self, name: str) -> Path:
        """Where to write the planned file ``name``."""
        if name not in self.planned:
            raise RigsideError(f"export file must be one of the planned files, got {name!r}")
        return self.out / name

    def finish(self, manifest: dict) -> Path:
        """Write the manifest last: ``manifest`` plus ``complete`` and every file's size."""
        files = {n: (self.out / n).stat().st_size for n in self.planned}
        return self._write_manifest({**manifest, "complete": True, "files": files})

    def _write_manifest(self, doc: dict) -> Path:
        text = json.dumps(doc, indent=1)
        return atomic_write(self.out / MANIFEST, lambda tmp: tmp.write_text(text, encoding="utf-8", newline="\n"))
