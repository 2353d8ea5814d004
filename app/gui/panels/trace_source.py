"""Where the trace view's envelope comes from: the overview when zoomed out, samples when close."""

from __future__ import annotations

from typing import Callable

import numpy as np

from rigside.core.signal.filtering import BandPass
from rigside.gui.trace_data import Block, load_block, overview_block

SYNC_LIMIT = 3_000_000   # samples x channels loaded on the GUI thread; more goes to a job
SPAN_LIMIT = 60_000_000  # samples x channels the view may show at once without an overview


class TraceSource:
    """Keeps the block the traces are drawn from and fetches a new one when the view needs it.

    Filtered traces whose run length reaches an overview level are read from the overview
    (``bench.overview``) at once; shorter spans read samples (at once when small, else in a
    background job, with the finest overview level drawn meanwhile). The raw (unfiltered)
    signal always reads samples.
    """

    def __init__(self, bench, runner, on_loaded: Callable[[], None]) -> None:
        self.bench = bench
        self.runner = runner
        self.on_loaded = on_loaded
        self.bandpass: BandPass | None = None
        self.block: Block | None = None
        self._pending: tuple | None = None
        self.unshowable = False      # set when the recording's samples cannot be read

    def reset(self, bandpass: BandPass | None = None) -> None:
        """Forget the block (and, for a new recording, use ``bandpass`` from now on)."""
        if bandpass is not None:
            self.bandpass = bandpass
            self.unshowable = False
        self.block = None

    def overview(self):
        """The overview to draw from, or None (none built yet, or the raw signal is shown)."""
        b = self.bench
        return None if b.show_raw else b.overview

    def max_span_s(self) -> float:
        """The longest view allowed: the whole file with an overview, else what samples allow."""
        rec = self.bench.recording
        if self.overview() is not None:
            return rec.duration_s
        return max(0.01, min(rec.duration_s, SPAN_LIMIT / (rec.rate_hz * len(self.bench.shown_channels))))

    def prepare(self, a: int, z: int, step: int) -> None:
        """Make ``self.block`` cover samples ``[a, z)`` at run length ``step`` (or start fetching it)."""
        b = self.bench
        rec = b.recording
        chans = tuple(int(c) for c in b.shown_channels)
        span = z - a
        lo, hi = max(0, a - span), min(rec.n_samples, z + span)
        blk = self.block
        usable = (blk is not None and blk.covers(a, z, chans, b.show_raw, step, rec.n_samples)
                  and blk.step * 16 >= step)
        ov = self.overview()
        level = ov.level_for(step) if ov is not None else None
        if usable:
            if not self._near_edge(blk, a, z, span):
                return
            if level is not None:          # the next stretch from the overview, at once
                self.block = overview_block(ov, level, lo, hi, chans)
            elif not self._pending_covers(a, z, chans, step):
                self._request(lo, hi, blk.step, chans)
        elif level is not None:
            self.block = overview_block(ov, level, lo, hi, chans)
        elif (hi - lo) * len(chans) <= SYNC_LIMIT:
            self.block = load_block(rec, self.bandpass, lo, hi, step, np.array(chans), b.show_raw)
        elif not self._pending_covers(a, z, chans, step):
            self._request(lo, hi, step, chans)
            if ov is not None:     # something to look at until the samples arrive
                self.block = overview_block(ov, ov.bins[0], lo, hi, chans)

    def _near_edge(self, blk: Block, a: int, z: int, span: int) -> bool:
        n = self.bench.recording.n_samples
        return (a - blk.start < span // 2 and blk.start > 0) or (blk.stop - z < span // 2 and blk.stop < n)

    def _pending_covers(self, a: int, z: int, chans: tuple, step: int) -> bool:
        p = self._pending
        return (p is not None and self.runner.busy("traces") and p[3] == chans and p[4] == self.bench.show_raw
                and p[2] <= step and p[0] <= a and p[1] >= z)

    def _request(self, lo: int, hi: int, step: int, chans: tuple) -> None:
        raw = self.bench.show_raw
        self._pending = (lo, hi, step, chans, raw)
        self.runner.submit("traces", "Reading traces", load_block, self.bench.recording, self.bandpass, lo, hi,
                           step, np.array(chans), raw, on_done=self._on_block)

    def _on_block(self, block: Block) -> None:
        self._pending = None
        self.block = block
        self.on_loaded()
