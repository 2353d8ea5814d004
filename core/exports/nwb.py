"""Curated units as an NWB file (the field's open standard), written with pynwb.

A new file (:func:`export_nwb` without ``into_copy``) holds:

- a device ``recording_device``, one ``ElectrodeGroup`` per channel group of the layout (the
  group's name, location ``unknown``) and the ``electrodes`` table, one row per recording channel
  (row id = channel index; ``rel_x``/``rel_y`` in micrometres when the layout gives channel
  positions, ``x_um``/``y_um``);
- the ``units`` table: ``spike_times`` (s), ``electrodes`` (the unit's group channels),
  ``electrode_group``, ``waveform_mean`` / ``waveform_sd`` (volts, as the standard fixes; samples x
  group channels, see :mod:`rigside.core.exports.nwb_content`), ``label`` and ``note`` (curation),
  and the quality columns of the metrics CSV, each with its description;
- the provenance: the table ``sorting_provenance`` (one row, described columns: program version,
  every parameter as JSON, the recording's path, size, fingerprint and content hash, the session)
  in the processing module ``ecephys``, and ``source_script`` naming the program.

Why a table in a processing module: the standard has no provenance group; ``scratch`` is for
data not meant to be shared, and ``notes``/``source_script`` are free text set once when a file is
made, so they cannot be filled in a copy of an existing file. A ``DynamicTable`` in a processing
module is part of the schema, checked by the validator, machine-readable, and works in both cases.

With ``into_copy`` (an NWB recording), the file is a copy of that NWB file with the units table and
provenance added; the units point at the rows of the existing ``electrodes`` table that the recorded
``ElectricalSeries`` uses (channel ``c`` = row ``series.electrodes[c]``), and its electrode groups.

Writing is atomic: a new file is built in memory and written by Python I/O at once; a copy is
checked for free space first (the copy's size plus the units), copied by Python I/O to a temporary
name, given the units through pynwb, and renamed. A full disk is a :class:`WriteError` message.
"""

from __future__ import annotations

import shutil
import uuid
from datetime import datetime, timezone
from pathlib import Path

import h5py
import numpy as np

from rigside.core import __version__
from rigside.core.errors import RigsideError
from rigside.core.exports.nwb_content import PROVENANCE_COLUMNS, UnitsContent, units_content
from rigside.core.io.atomic import WriteError, atomic_write, check_output, protect_inputs
from rigside.core.io.h5image import memory_file
from rigside.core.params import MetricParams
from rigside.core.progress import CancelFn, ProgressFn, check, report

MODULE, PROVENANCE = "ecephys", "sorting_provenance"
COPY_BLOCK = 1 << 24
SPARE_BYTES = 16 << 20
"""Free space wanted beyond the copy and the units (HDF5 metadata, the file system)."""


def _pynwb():
    try:
        import pynwb
    except ImportError:
        raise RigsideError("NWB export needs the pynwb package, got none installed "
                           "(pip install 'rigside[nwb]')") from None
    return pynwb


def is_nwb_file(path: str | Path) -> bool:
    """An HDF5 file with the NWB root attribute ``nwb_version``."""
    p = Path(path)
    try:
        if not (p.is_file() and h5py.is_hdf5(p)):
            return False
        with h5py.File(p, "r") as f:
            return "nwb_version" in f.attrs
    except OSError:
        return False


def _group_names(names: list[str], n: int) -> list[str]:
    out: list[str] = []
    for i in range(n):
        base = (names[i] if i < len(names) else "").replace("/", "_").strip() or f"group {i}"
        out.append(base if base not in out else f"{base} ({i})")
    return out


def _new_file(recording):
    """A new NWBFile with the device, one electrode group per channel group and the electrodes."""
    pynwb = _pynwb()
    mtime = datetime.fromtimestamp(Path(recording.path).stat().st_mtime, tz=timezone.utc)
    nwb = pynwb.NWBFile(
        session_description=f"units curated with rigside from {Path(recording.path).name}",
        identifier=str(uuid.uuid4()), session_start_time=mtime,
        source_script=f"rigside {__version__}", source_script_file_name="rigside",
        notes="session_start_time is the recording file's modification time (the recording does not state "
              "its start); spike times are seconds from the recording's first sample.")
    device = nwb.create_device(name="recording_device", description="the device of the recording (not described "
                               "by the recording's layout)")
    names = _group_names(list(recording.group_names or []), len(recording.groups))
    groups = [nwb.create_electrode_group(name=name, description=f"channels {', '.join(map(str, g))}",
                                         location="unknown", device=device)
              for name, g in zip(names, recording.groups)]
    layout = getattr(recording, "layout", None)
    x, y = getattr(layout, "x_um", None), getattr(layout, "y_um", None)
    for c in range(recording.n_channels):
        at = {} if x is None or y is None else {"rel_x": float(x[c]), "rel_y": float(y[c])}
        nwb.add_electrode(group=groups[int(recording.channel_group[c])], location="unknown", id=c, **at)
    rows = np.arange(recording.n_channels)
    return nwb, rows, [groups[int(recording.channel_group[c])] for c in rows]


def _series_named(nwb, wanted: str | None):
    """The ElectricalSeries at path or name ``wanted`` (``acquisition/NAME``, ``processing/MODULE/.../NAME`` or
    ``NAME``), or the file's only one."""
    pynwb = _pynwb()
    found = [o for o in nwb.objects.values() if isinstance(o, pynwb.ecephys.ElectricalSeries)]
    hits = found
    if wanted:
        parts = wanted.strip("/").split("/")
        hits = [o for o in found if o.name == parts[-1]]
        if len(hits) > 1 and len(parts) > 1:
            parent = "root" if parts[-2] == "acquisition" else parts[-2]
            hits = [o for o in hits if o.parent is not None and o.parent.name == parent]
    if len(hits) != 1:
        names = ", ".join(sorted(o.name for o in found)) or "none"
        raise RigsideError(f"NWB series must be one ElectricalSeries of the file ({names}), got {wanted!r}")
    return hits[0]


def _series_rows(nwb, recording, series: str | None):
    """Electrodes-table rows and electrode groups of each recording channel in an NWB recording."""
    desc = recording.describe()
    es = _series_named(nwb, series or desc.get("series_path") or desc.get("series"))
    rows = np.asarray(es.electrodes.data[:], dtype=np.int64)
    if len(rows) != recording.n_channels:
        raise RigsideError(f"NWB series {es.name!r} must have one electrode per recording channel "
                           f"({recording.n_channels}), got {len(rows)}")
    table = es.electrodes.table
    return rows, [table["group"][int(r)] for r in rows]


def _add_units(nwb, content: UnitsContent, rows: np.ndarray, groups: list, rate_hz: float) -> None:
    pynwb = _pynwb()
    if nwb.units is not None:
        raise RigsideError("NWB file must hold no units table yet, got one (write the units into a new file)")
    nwb.units = pynwb.misc.Units(
        name="units", description="curated units of a rigside session; quality columns as in its metrics CSV",
        electrode_table=nwb.electrodes, waveform_rate=float(rate_hz), resolution=1.0 / float(rate_hz),
        waveform_time_before_peak_in_ms=float(-content.waveform_times_ms[0]))
    extra = {"label": content.labels, "note": content.notes} | content.columns
    for name in extra:
        nwb.add_unit_column(name=name, description=content.descriptions[name])
    for i, u in enumerate(content.ids):
        values = {name: _plain(col[i]) for name, col in extra.items()}
        nwb.add_unit(id=u, spike_times=content.spike_times[i],
                     electrodes=[int(rows[c]) for c in content.waveform_channels[i]],
                     electrode_group=groups[content.main_channels[i]],
                     waveform_mean=content.waveform_mean[i] * np.float32(1e-6),
                     waveform_sd=content.waveform_sd[i] * np.float32(1e-6), **values)


def _plain(value):
    if isinstance(value, (np.integer, bool)):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value


def _add_provenance(nwb, content: UnitsContent) -> None:
    from hdmf.common import DynamicTable, VectorData
    module = nwb.processing.get(MODULE) or nwb.create_processing_module(
        name=MODULE, description="extracellular electrophysiology processing")
    if PROVENANCE in module.data_interfaces:
        raise RigsideError(f"NWB processing module {MODULE!r} must hold no {PROVENANCE!r} yet, got one")
    columns = [VectorData(name=k, description=d, data=[content.provenance[k]]) for k, d in PROVENANCE_COLUMNS.items()]
    module.add(DynamicTable(name=PROVENANCE, description="how these units were made (one row per export)",
                            columns=columns))


def _fill(nwb, content: UnitsContent, rows, groups, rate_hz: float) -> None:
    _add_units(nwb, content, rows, groups, rate_hz)
    _add_provenance(nwb, content)


def _write_new(out: Path, content: UnitsContent, recording) -> Path:
    pynwb = _pynwb()
    nwb, rows, groups = _new_file(recording)
    _fill(nwb, content, rows, groups, recording.rate_hz)
    with memory_file(str(out), {}) as f:
        io = pynwb.NWBHDF5IO(mode="w", file=f)
        try:
            io.write(nwb)
            f.flush()
            image = f.id.get_file_image()
        finally:
            io.close()
    return atomic_write(out, lambda tmp: tmp.write_bytes(image))


def _check_space(out: Path, base: Path, content: UnitsContent) -> None:
    units = sum(t.nbytes for t in content.spike_times) + 2 * content.waveform_mean.nbytes
    need = base.stat().st_size + units + SPARE_BYTES
    free = shutil.disk_usage(out.parent).free
    if free < need:
        raise WriteError(f"output {str(out)!r} needs about {need / 1e6:.0f} MB free for the copy of "
                         f"{base.name} and the units, got {free / 1e6:.0f} MB (nothing written)")


def _write_copy(out: Path, base: Path, content: UnitsContent, recording, series: str | None,
                progress: ProgressFn, cancel: CancelFn) -> Path:
    pynwb = _pynwb()
    _check_space(out, base, content)
    size = max(1, base.stat().st_size)

    def write(tmp: Path) -> None:
        with open(base, "rb") as fi, open(tmp, "wb") as fo:
            while block := fi.read(COPY_BLOCK):
                check(cancel)
                fo.write(block)
                report(progress, 0.8 + 0.15 * fo.tell() / size, f"copying {base.name}")
        try:
            with pynwb.NWBHDF5IO(str(tmp), "a") as io:
                nwb = io.read()
                rows, groups = _series_rows(nwb, recording, series)
                _fill(nwb, content, rows, groups, recording.rate_hz)
                io.write(nwb)
        except (RigsideError, OSError):
            raise
        except Exception as exc:   # pynwb/hdmf raise many types for files they cannot extend
            raise RigsideError(f"NWB file {base.name!r} must take the units table, got "
                               f"{type(exc).__name__}: {exc}") from None
    return atomic_write(out, write)


def export_nwb(session, recording, out: str | Path, into_copy: str | Path | None = None, series: str | None = None,
               metric_params: MetricParams | None = None, n_waveforms: int | None = None,
               progress: ProgressFn = None, cancel: CancelFn = None) -> Path:
    """Write the curated units of ``session`` as an NWB file (see the module docstring).

    Parameters
    ----------
    session
        A loaded :class:`rigside.core.units.session.Session`.
    recording
        Its recording, open (for the layout and the mean waveforms).
    out
        The ``.nwb`` file to write; never the session, its recording or ``into_copy``.
    into_copy
        An NWB file (the session's NWB recording) to copy and add the units to; None writes a new file.
    series
        The ``ElectricalSeries`` of ``into_copy`` the recording was read from (default: its only one).
    metric_params
        Settings of the quality columns (default: the session's).
    n_waveforms
        Most events per unit averaged into the mean waveform (default
        :data:`rigside.core.exports.nwb_content.N_WAVEFORMS`).
    progress, cancel
        Progress callback and cancel check.

    Returns
    -------
    Path
        The file written.
    """
    _pynwb()
    inputs = [session.source, session.recording.path, recording.path, into_copy]
    with protect_inputs(inputs):
        out = check_output(out, suffixes=(".nwb",))
        if into_copy is not None and not is_nwb_file(into_copy):
            raise RigsideError(f"file to copy must be an NWB file, got {str(into_copy)!r}")
        kwargs = {} if n_waveforms is None else {"n_waveforms": n_waveforms}
        content = units_content(session, recording, metric_params, progress=progress, cancel=cancel, **kwargs)
        check(cancel)
        report(progress, 0.8, "writing the NWB file")
        if into_copy is None:
            written = _write_new(out, content, recording)
        else:
            written = _write_copy(out, Path(into_copy), content, recording, series, progress, cancel)
    report(progress, 1.0, "NWB file written")
    return written
