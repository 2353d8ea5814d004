"""The journal of curation steps (replay and the undo stack that writes it: :mod:`rigside.core.units.history`).

Every entry is one JSON object (one line in files)::

    {"seq": 3, "action": "do", "time": "2026-12-01T21:50:02.123456+00:00",
     "version": "0.1.0", "text": "Merge units 3, 5", "op": {"op": "merge", "units": [3, 5], "created": []}}

``action`` is "do" (a new step; ``op`` holds its parameters), "undo" or "redo" (``ref`` is the
``seq`` of the step undone or redone). Replaying the entries in order on an empty sorting
reproduces the assignments exactly (see :mod:`rigside.core.units.history`).
"""

from __future__ import annotations

import json
from datetime import datetime, timezone
from typing import Any, Iterable

from rigside.core import __version__
from rigside.core.errors import CurationError
from rigside.core.textparse import parse_json

ACTIONS = ("do", "undo", "redo")


def utc_now() -> str:
    """Current time, UTC, ISO 8601 with microseconds."""
    return datetime.now(timezone.utc).isoformat(timespec="microseconds")


class Journal:
    """Ordered list of journal entries (plain dicts, JSON-ready)."""

    def __init__(self, entries: Iterable[dict[str, Any]] = ()) -> None:
        self.entries: list[dict[str, Any]] = [dict(e) for e in entries]

    def __len__(self) -> int:
        return len(self.entries)

    def record(self, action: str, op, ref: int | None = None) -> dict[str, Any]:
        """Append one entry for ``op`` and return it."""
        if action not in ACTIONS:
            raise CurationError(f"journal action must be one of {', '.join(ACTIONS)}, got {action!r}")
        entry: dict[str, Any] = {"seq": len(self.entries), "action": action, "time": utc_now(),
                                 "version": __version__, "text": op.text}
        if action == "do":
            entry["op"] = op.to_record()
        else:
            entry["ref"] = ref
        self.entries.append(entry)
        return entry

    def to_text(self) -> str:
        """JSON lines."""
        return "".join(json.dumps(e, separators=(",", ":"), allow_nan=False) + "\n" for e in self.entries)

    @classmethod
    def from_text(cls, text: str) -> "Journal":
        """Parse JSON lines, checking the shape of every entry (:class:`CurationError`)."""
        entries = []
        for i, line in enumerate(text.splitlines()):
            if not line.strip():
                continue
            e = parse_json(line, f"journal line {i + 1}", CurationError)
            if not isinstance(e, dict) or e.get("action") not in ACTIONS or e.get("seq") != len(entries):
                raise CurationError(f"journal line {i + 1} must be an entry numbered {len(entries)} with an "
                                    f"action in {', '.join(ACTIONS)}, got {line[:80]!r}")
            if (e["action"] == "do") != isinstance(e.get("op"), dict):
                raise CurationError(f"journal line {i + 1} must carry operation parameters exactly when "
                                    f"its action is 'do', got {line[:80]!r}")
            entries.append(e)
        return cls(entries)
