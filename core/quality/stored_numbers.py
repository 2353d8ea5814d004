"""Quality numbers kept in a session: stored when it is saved, taken back on opening while current.

A stored row is current when the table's key (program version, metric settings, per-channel
thresholds and noise, feature names: everything besides a unit's events that its numbers depend on)
equals the session's, and the row's ``members`` digest equals the digest of the unit's events now
(:func:`rigside.core.units.dismissals.members_digest`). A unit's numbers depend on no other unit's
membership (isolation distance and L-ratio compare it with every other event of its group, whatever
unit those are in), so every other unit is recomputed, and only those.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict

import numpy as np

from rigside.core import __version__
from rigside.core.progress import CancelFn, ProgressFn
from rigside.core.quality.metric_settings import metric_settings
from rigside.core.quality.unit_position import POSITION_COLUMNS
from rigside.core.quality.unit_table import COLUMNS, column_dtype, unit_metrics_for_events
from rigside.core.signal.features import Features
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.units.dismissals import members_digest
from rigside.core.units.session import Session
from rigside.core.units.session_numbers import StoredTable

MEMBERS = "members"
"""Stored column: digest of each unit's events when its numbers were computed."""


def stored_columns(session: Session) -> dict[str, str]:
    """The columns of the session's quality table: :data:`COLUMNS`, and the position columns when its
    events carry positions (a probe)."""
    return COLUMNS | (POSITION_COLUMNS if session.events.x_um is not None else {})


def numbers_key(session: Session) -> str:
    """Digest of what a session's quality numbers depend on besides each unit's events."""
    params, events = session.params, session.events
    what = {"program": __version__, "metrics": asdict(metric_settings(params)),
            "thresholds_sigma": np.asarray(thresholds_sigma(params, events.sigma_uv), dtype=float).ravel().tolist(),
            "sigma_uv": np.asarray(events.sigma_uv, dtype=float).tolist(), "duration_s": float(events.duration_s),
            "features": list(session.sorting.data.feature_names)}
    return "sha256:" + hashlib.sha256(json.dumps(what, sort_keys=True).encode()).hexdigest()


def compute_numbers(session: Session, only_units=None, progress: ProgressFn = None,
                    cancel: CancelFn = None) -> dict[str, np.ndarray]:
    """The session's quality table (:func:`rigside.core.quality.unit_table.unit_metrics_for_events` at its
    metric settings and thresholds), for every unit or ``only_units``."""
    s = session.sorting
    features = Features(s.data.features, list(s.data.feature_names))
    return unit_metrics_for_events(session.events, s.assignments, features,
                                   thresholds_sigma(session.params, session.events.sigma_uv),
                                   metric_settings(session.params), progress, cancel, only_units)


def table_rows(table: dict[str, np.ndarray]) -> dict[int, dict]:
    """The rows of a quality table by unit id: ``{unit: {column: value}}``."""
    return {int(u): {c: v[i] for c, v in table.items()} for i, u in enumerate(table["unit"].tolist())}


def numbers_to_store(session: Session, rows: dict[int, dict]) -> StoredTable:
    """The table to keep in the session: the given rows of its current units (rows that are current
    for the units' events now; the caller leaves stale ones out), each with its members digest.

    Parameters
    ----------
    session
        The session being saved (its sorting as saved).
    rows
        ``{unit: {column: value}}`` with every column of :func:`stored_columns`.
    """
    s = session.sorting
    units = sorted(u for u in rows if u in s.units)
    columns = {c: np.array([rows[u][c] for u in units], dtype=column_dtype(c)) for c in stored_columns(session)}
    columns[MEMBERS] = np.array([members_digest(s, [u]) for u in units], dtype=str)
    return StoredTable(numbers_key(session), columns)


def current_numbers(session: Session) -> tuple[dict[int, dict], list[int]]:
    """The stored quality numbers still current for the session's units, and the units whose numbers
    must be computed (changed since, or none stored: sessions saved before numbers were stored).

    Returns
    -------
    rows, stale
        ``{unit: {column: value}}`` as :func:`table_rows` gives, and the unit ids left to compute.
    """
    s = session.sorting
    table = session.unit_numbers
    units = s.unit_ids()
    names = stored_columns(session)
    if table is None or table.key != numbers_key(session) or not set(names) | {MEMBERS} <= set(table.columns):
        return {}, units
    stored = table.columns
    index = {int(u): i for i, u in enumerate(stored["unit"].tolist())}
    rows = {}
    for u in units:
        i = index.get(u)
        if i is not None and str(stored[MEMBERS][i]) == members_digest(s, [u]):
            rows[u] = {c: stored[c][i] for c in names}
    return rows, [u for u in units if u not in rows]
