"""A multi-resolution min/max overview of the filtered recording, built while detection streams it.

Level ``k`` holds, for every channel, the minimum and maximum (float32 microvolts) of the
band-passed signal over consecutive bins of ``bin`` samples, aligned to the file start
(bin ``i`` covers samples ``[i * bin, (i + 1) * bin)``; the last bin may be partial). The
finest bin is the smallest power of two of at least :data:`MIN_BIN` samples that keeps the
finest level within :data:`FINE_VALUES` values per array; each further level doubles the
bin, down to at most :data:`TOP_BINS` bins.

The overview is cached in the user's cache folder (:func:`cache_folder`), in a file named
from the recording's path and a key over its quick fingerprint, sample layout and the
filter (:func:`cache_path`), so a changed file, layout or filter never reads a stale
overview. The file stores the fingerprint and, when detection computed it, the whole
content hash; :func:`load_overview` refuses a file whose fingerprint differs and
:meth:`Overview.matches_content` settles it once the content hash is known.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import threading
from pathlib import Path

import h5py
import numba
import numpy as np

from rigside.core.io.atomic import WriteError, atomic_write, safe_unlink
from rigside.core.io.content import BackgroundHasher
from rigside.core.io.h5image import write_h5
from rigside.core.io.recording import Recording
from rigside.core.params import FilterParams
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.signal.chunk_pool import CHUNK_VALUES
from rigside.core.signal.filtering import BandPass

FORMAT = "rigside-overview"
VERSION = 1
MIN_BIN = 256             # shorter spans are drawn from samples; finer bins cost more to write than to read
FINE_VALUES = 1 << 23      # bins x channels of the finest level, per array (32 MiB of float32)
TOP_BINS = 256


def finest_bin(n_samples: int, n_channels: int) -> int:
    """Bin length (samples) of the finest level: a power of two, at least :data:`MIN_BIN`."""
    size = MIN_BIN
    while -(-n_samples // size) * n_channels > FINE_VALUES:
        size *= 2
    return size


@numba.njit(nogil=True, cache=True, fastmath=True)
def _bin_min_max(y, size, lo, hi):
    for b in range(lo.shape[0]):
        r0 = b * size
        lb = lo[b]
        hb = hi[b]
        lb[:] = y[r0]
        hb[:] = y[r0]
        for i in range(r0 + 1, r0 + size):
            row = y[i]
            for c in range(row.shape[0]):
                v = row[c]
                lb[c] = min(lb[c], v)
                hb[c] = max(hb[c], v)


def coarser(lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The next level: pairs of bins merged (an odd last bin kept alone)."""
    n = len(lo) // 2
    lo2, hi2 = np.minimum(lo[0:2 * n:2], lo[1:2 * n:2]), np.maximum(hi[0:2 * n:2], hi[1:2 * n:2])
    if len(lo) % 2:
        lo2, hi2 = np.vstack([lo2, lo[-1:]]), np.vstack([hi2, hi[-1:]])
    return lo2, hi2


class OverviewBuilder:
    """Collects the overview from filtered chunks handed over in any order, from any thread.

    Parameters
    ----------
    recording
        The recording being filtered (its size, channels, fingerprint and layout).
    filter_params
        The band-pass the chunks come from (stored in the cache key).
    """

    def __init__(self, recording: Recording, filter_params: FilterParams) -> None:
        self.recording = recording
        self.filter_params = filter_params
        self.n_samples, self.n_channels = recording.n_samples, recording.n_channels
        self.bin = finest_bin(self.n_samples, self.n_channels)
        n_bins = -(-self.n_samples // self.bin)
        self.lo = np.empty((n_bins, self.n_channels), dtype=np.float32)
        self.hi = np.empty((n_bins, self.n_channels), dtype=np.float32)
        self._edges: list[tuple[int, np.ndarray, np.ndarray]] = []
        self._added = 0
        self._lock = threading.Lock()
        self.path: Path | None = None
        self.error: str | None = None

    def add(self, y: np.ndarray, y_start: int, start: int, stop: int) -> None:
        """Take samples ``[start, stop)`` of the filtered block ``y`` (all channels) that begins at ``y_start``."""
        size = self.bin
        first, last = -(-start // size), stop // size
        y = np.ascontiguousarray(y[start - y_start:stop - y_start], dtype=np.float32)
        pieces = []
        if first >= last:
            pieces.append((start, stop))
        else:
            _bin_min_max(y[first * size - start:last * size - start], size, self.lo[first:last], self.hi[first:last])
            pieces += [(start, first * size), (last * size, stop)]
        edges = [(s // size, y[s - start:e - start].min(axis=0), y[s - start:e - start].max(axis=0))
                 for s, e in pieces if e > s]
        with self._lock:
            self._edges += edges
            self._added += stop - start

    def levels(self) -> list[tuple[int, np.ndarray, np.ndarray]]:
        """``(bin, min, max)`` from finest to coarsest; every sample must have been added once."""
        if self._added != self.n_samples:
            raise RuntimeError(f"overview must receive every sample once, got {self._added} of {self.n_samples}")
        seen: set[int] = set()
        for b, lo, hi in self._edges:
            if b in seen:
                np.minimum(self.lo[b], lo, out=self.lo[b])
                np.maximum(self.hi[b], hi, out=self.hi[b])
            else:
                self.lo[b], self.hi[b] = lo, hi
                seen.add(b)
        out = [(self.bin, self.lo, self.hi)]
        while len(out[-1][1]) > TOP_BINS:
            size, lo, hi = out[-1]
            out.append((2 * size, *coarser(lo, hi)))
        return out

    def save(self, path: str | Path | None = None) -> Path:
        """Write the overview atomically (default :func:`cache_path`) and drop older caches of this recording."""
        rec = self.recording
        key = _key(rec, self.filter_params)
        path = Path(path) if path is not None else cache_path(rec, self.filter_params, key)
        levels = self.levels()

        def fill(f: h5py.File) -> None:
            f.attrs.update(format=FORMAT, version=VERSION, fingerprint=rec.fingerprint(),
                           content_hash=rec.content_hash or "", n_samples=self.n_samples,
                           n_channels=self.n_channels, rate_hz=rec.rate_hz, source=str(rec.path), key=key)
            for size, lo, hi in levels:
                g = f.create_group(f"levels/{size}")
                g.create_dataset("min", data=lo)
                g.create_dataset("max", data=hi)

        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise WriteError(f"overview folder must be writable, got {str(path.parent)!r}: {exc.strerror}") from None
        atomic_write(path, lambda tmp: write_h5(tmp, fill))
        for old in path.parent.glob(path.name.split("-")[0] + "-*.h5"):
            if old != path:
                safe_unlink(old)
        self.path = path
        return path


class Overview:
    """A saved overview, open read-only; :meth:`read` gives bins of one level."""

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._file = h5py.File(self.path, "r")
        attrs = self._file.attrs
        self.fingerprint = str(attrs["fingerprint"])
        self.content_hash = str(attrs["content_hash"]) or None
        self.key = str(attrs["key"])
        self.n_samples, self.n_channels = int(attrs["n_samples"]), int(attrs["n_channels"])
        self.bins = sorted(int(k) for k in self._file["levels"])

    def level_for(self, step: int) -> int | None:
        """The coarsest bin not longer than ``step`` samples (None if every level is coarser)."""
        fit = [b for b in self.bins if b <= step]
        return fit[-1] if fit else None

    def read(self, size: int, start: int, stop: int, channels: np.ndarray | None = None
             ) -> tuple[int, np.ndarray, np.ndarray]:
        """First bin index and the (bins x channels) min and max of bins covering ``[start, stop)``."""
        g = self._file[f"levels/{size}"]
        i0 = max(0, start // size)
        i1 = min(g["min"].shape[0], -(-stop // size))
        lo, hi = g["min"][i0:i1], g["max"][i0:i1]
        if channels is not None:
            lo, hi = lo[:, channels], hi[:, channels]
        return i0, lo, hi

    def matches_content(self, content_hash: str | None) -> bool:
        """False only when both this file and the recording know a whole-content hash of one algorithm
        (its prefix, :mod:`rigside.core.io.content`) and they differ."""
        if content_hash is None or self.content_hash is None:
            return True
        same_kind = content_hash.split(":", 1)[0] == self.content_hash.split(":", 1)[0]
        return not same_kind or content_hash == self.content_hash

    def close(self) -> None:
        """Release the file."""
        self._file.close()


def cache_folder() -> Path:
    """``$RIGSIDE_CACHE_DIR``, else ``$XDG_CACHE_HOME/rigside``, else ``~/.cache/rigside``."""
    if os.environ.get("RIGSIDE_CACHE_DIR"):
        return Path(os.environ["RIGSIDE_CACHE_DIR"])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "rigside"


def _key(recording: Recording, filter_params: FilterParams) -> str:
    desc = {k: v for k, v in recording.describe().items() if k != "path"}
    layout = dataclasses.asdict(recording.layout) if dataclasses.is_dataclass(recording.layout) else {}
    text = json.dumps({"version": VERSION, "fingerprint": recording.fingerprint(), "recording": desc,
                       "layout": layout, "filter": dataclasses.asdict(filter_params)}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def cache_path(recording: Recording, filter_params: FilterParams, key: str | None = None) -> Path:
    """``<cache folder>/overviews/<path hash>-<content key>.h5`` for this recording and filter."""
    where = hashlib.sha256(str(Path(recording.path).resolve()).encode()).hexdigest()[:16]
    key = key or _key(recording, filter_params)
    return cache_folder() / "overviews" / f"{where}-{key[:24]}.h5"


def load_overview(recording: Recording, filter_params: FilterParams) -> Overview | None:
    """The cached overview of this recording and filter, or None when there is none or it is stale."""
    key = _key(recording, filter_params)
    path = cache_path(recording, filter_params, key)
    if not path.is_file():
        return None
    try:
        ov = Overview(path)
    except (OSError, KeyError):
        return None   # unreadable cache file: rebuilt by the next detection pass
    if ov.key != key or ov.n_samples != recording.n_samples or not ov.matches_content(recording.content_hash):
        ov.close()
        return None
    return ov


def build_overview(recording: Recording, filter_params: FilterParams, progress: ProgressFn = None,
                   cancel: CancelFn = None) -> OverviewBuilder:
    """Filter the whole recording in chunks and collect its overview (when no detection pass does).

    Parameters
    ----------
    recording, filter_params
        The recording and its band-pass.
    progress, cancel
        Progress callback and cancel check (one step per chunk).

    Returns
    -------
    OverviewBuilder
        Complete; call :meth:`OverviewBuilder.save` to cache it. Like detection, the pass
        also sets ``recording.content_hash``.
    """
    bp = BandPass(recording, filter_params)
    builder = OverviewBuilder(recording, filter_params)
    n = recording.n_samples
    chunk = max(builder.bin, CHUNK_VALUES // recording.n_channels // builder.bin * builder.bin)
    with BackgroundHasher(recording.path) as hasher:
        for s in range(0, n, chunk):
            check(cancel)
            e = min(n, s + chunk)
            builder.add(bp.read(s, e), s, s, e)
            hasher.advance(e / n)
            report(progress, e / n, "building the trace overview")
        recording.content_hash = hasher.finish()
    return builder
