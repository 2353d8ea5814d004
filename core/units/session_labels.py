"""Unit labels as session files hold them: by name from format 2, by code in format 1.

Format 1 stored ``/sorting/unit_label`` as a uint8 index into :data:`FORMAT1_LABELS` and
journalled relabel steps with those names; :data:`FORMAT1_RENAMED` maps the names that no
longer exist to today's. Format 2 stores ``/sorting/labels``: a UTF-8 JSON list of one label
name per unit (a uint8 dataset, like the notes).
"""

from __future__ import annotations

import json
from typing import Any

from rigside.core.errors import SessionError
from rigside.core.io.h5safe import array, text
from rigside.core.units.sorting import LABELS

FORMAT1_LABELS = ("single unit", "multi-unit", "reject", "unreviewed")
"""The label order whose index format-1 sessions stored."""
FORMAT1_RENAMED = {"reject": "not neural"}
"""Format-1 label names and the labels they are today."""


def _current(name: str) -> str:
    return FORMAT1_RENAMED.get(name, name)


def labels_to_text(labels: list[str]) -> str:
    """The text stored in ``/sorting/labels``."""
    return json.dumps(labels)


def read_labels(data: dict, version: int, group: str = "sorting") -> list[str]:
    """One label name per unit of ``group`` from a verified session file of format ``version``."""
    if version == 1:
        codes = array(data, f"{group}/unit_label", "u1", 1)
        if len(codes) and codes.max() >= len(FORMAT1_LABELS):
            raise SessionError(f"unit label codes must be below {len(FORMAT1_LABELS)}, got {int(codes.max())}")
        return [_current(FORMAT1_LABELS[int(c)]) for c in codes]
    try:
        names = json.loads(text(data, f"{group}/labels"))
    except json.JSONDecodeError as exc:
        raise SessionError(f"session unit labels must be a JSON list, got {exc}") from None
    if not isinstance(names, list) or not all(isinstance(n, str) and n in LABELS for n in names):
        raise SessionError(f"unit labels must be among {', '.join(LABELS)}, got {str(names)[:80]!r}")
    return names


def upgrade_format1_journal(entries: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Journal entries of a format-1 session with renamed labels in today's names.

    Relabel steps to a renamed label get the new name and menu text; the undo and redo entries
    of those steps get the same text. Other entries are returned unchanged.
    """
    from rigside.core.units.operations import operation_from_record

    texts: dict[int, str] = {}
    out = []
    for e in entries:
        op = e.get("op")
        if e["action"] == "do" and op.get("op") == "relabel" and op.get("label") in FORMAT1_RENAMED:
            op = dict(op, label=_current(op["label"]))
            texts[e["seq"]] = operation_from_record(op).text
            e = dict(e, op=op, text=texts[e["seq"]])
        elif e["action"] != "do" and e.get("ref") in texts:
            e = dict(e, text=texts[e["ref"]])
        out.append(e)
    return out
