"""Export parameters whose spike matrix would not fit are refused before anything is written;
counts written block by block equal a one-shot histogram (invented data)."""

import h5py
import numpy as np
import pytest

import rigside.core.exports.units as export
from rigside.core.errors import RigsideError
from rigside.core.exports.units import export_sorting

from .test_export import small_sorting


@pytest.mark.parametrize("bin_ms", [1e-12, 5e-324, 1e-320])
def test_tiny_bins_are_refused_before_writing(tmp_path, bin_ms):
    ev, s = small_sorting()
    with pytest.raises(RigsideError, match="bin width must give at most .* bins per unit") as info:
        export_sorting(ev, s, tmp_path / "x", bin_ms=bin_ms)
    assert "\n" not in str(info.value) and not (tmp_path / "x").exists()


def test_block_writes_equal_the_histogram(tmp_path, monkeypatch):
    monkeypatch.setattr(export, "BLOCK_BINS", 7)       # many blocks, some without spikes
    ev, s = small_sorting()
    out = export_sorting(ev, s, tmp_path / "x", bin_ms=0.1)
    with h5py.File(out["binned"][0]) as f:
        counts = f["counts"][()]
    # reference: numpy's histogram with edges k * 0.1 ms (samples are integers at 30 kHz: exact)
    edges = np.arange(counts.shape[1] + 1) * 3.0
    for row, u in enumerate((1, 2, 3)):
        want, _ = np.histogram(ev.sample[s.assignments == u], bins=edges)
        np.testing.assert_array_equal(counts[row], want)
