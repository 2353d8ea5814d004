"""CSV spike files parsed block by block read exactly as in one piece, with the same refusals
and absolute line numbers (invented data)."""

import numpy as np
import pytest

from rigside.core.errors import SpikeFileError
from rigside.core.io import spike_import_files
from rigside.core.io.spike_import_files import load_spikes

BLOCKS = [1, 7, 16, 64, 1 << 20]


def spike_text(rng, n):
    units = rng.integers(0, 9, n)
    times = np.round(np.cumsum(rng.uniform(0, 0.01, n)), 6)
    rows = [f'{u}, {t},"note {k}"' for k, (u, t) in enumerate(zip(units, times))]
    for k in (3, 40, 41):
        rows.insert(k, "# a comment in the middle" if k != 41 else "")
    return "\ufeff# written by hand\r\n\r\nUnit,time_s,label\r\n" + "\r\n".join(rows) + "\r\n", units, times


@pytest.mark.parametrize("block", BLOCKS)
def test_blocks_read_the_same_spikes(tmp_path, monkeypatch, block):
    text, units, times = spike_text(np.random.default_rng(2), 300)
    (tmp_path / "a.csv").write_bytes(text.encode("utf-8"))
    monkeypatch.setattr(spike_import_files, "CSV_BLOCK_BYTES", block)
    s = load_spikes(tmp_path / "a.csv")
    order = np.lexsort((times, units))
    np.testing.assert_array_equal(s.units, units[order])
    np.testing.assert_array_equal(s.times_s, times[order])


@pytest.mark.parametrize("block", BLOCKS)
def test_blocks_keep_line_numbers_and_refusals(tmp_path, monkeypatch, block):
    monkeypatch.setattr(spike_import_files, "CSV_BLOCK_BYTES", block)
    rows = "".join(f"1,{k / 10}\n" for k in range(50))
    (tmp_path / "a.csv").write_text("# c\nunit,time_s\n" + rows + "2,abc\n")
    with pytest.raises(SpikeFileError, match="line 53 column time_s must be a number"):
        load_spikes(tmp_path / "a.csv")
    (tmp_path / "b.csv").write_text("\n# c\n\n# only comments and a header\nunit,time_s\n# none\n")
    with pytest.raises(SpikeFileError, match="at least one spike, got a header only"):
        load_spikes(tmp_path / "b.csv")
    (tmp_path / "c.csv").write_text("# nothing but comments\n" * 5)
    with pytest.raises(SpikeFileError, match="empty file"):
        load_spikes(tmp_path / "c.csv")
    (tmp_path / "d.csv").write_bytes(b"unit,time_s\n" + rows.encode() + b"1,\xff\n")
    with pytest.raises(SpikeFileError, match=f"UTF-8 text, got undecodable bytes at byte {12 + len(rows) + 2}"):
        load_spikes(tmp_path / "d.csv")


@pytest.mark.parametrize("block", BLOCKS)
@pytest.mark.parametrize("brk", ["\r", "\x0c", "\u2028"])
def test_every_line_break_of_python_text(tmp_path, monkeypatch, block, brk):
    # str.splitlines breaks lines at these too; a bad row after them keeps its line number
    monkeypatch.setattr(spike_import_files, "CSV_BLOCK_BYTES", block)
    rows = brk.join(f"{k % 3},{k / 4}" for k in range(30))
    (tmp_path / "a.csv").write_bytes(("unit,time_s\n" + rows + "\n").encode())
    s = load_spikes(tmp_path / "a.csv")
    assert len(s) == 30 and sorted(s.times_s.tolist()) == [k / 4 for k in range(30)]
    (tmp_path / "b.csv").write_bytes(("unit,time_s\n" + rows + brk + "1,x\n2,0.5\n").encode())
    with pytest.raises(SpikeFileError, match="line 32 column time_s must be a number"):
        load_spikes(tmp_path / "b.csv")
