"""Block-formatted CSV text equals Python's own number formatting byte for byte (the reference:
CPython's correctly rounded ``format(x, ".Nf")`` and the csv module), on invented tables."""

import csv
import io

import numpy as np
import pytest

from rigside.core.events import EventTable
from rigside.core.exports.units import export_sorting
from rigside.core.io import csv_text
from rigside.core.io.csv_text import format_rows, write_rows
from rigside.core.units.sorting import LABELS, Sorting, SortingData, Unit


def python_text(values, decimals, newline="\n"):
    return "".join(format(float(v), f".{decimals}f") + newline for v in values).encode()


def tricky(rng, n=20000):
    """Random magnitudes, exact ties (binary fractions ending in 5 at the rounding digit),
    signed zeros, tiny negatives, nan and infinities."""
    ties = np.arange(-n, n) / 1024.0
    return np.concatenate([rng.uniform(0, 7200, n), rng.normal(0, 300, n), ties, np.arange(n) / 30000.0,
                           10.0 ** rng.uniform(-12, 9, n) * rng.choice([-1, 1], n),
                           [0.0, -0.0, -1e-9, 0.125, 0.375, 2.5, 1e-300, 2.0 ** -1074, np.nan, np.inf, -np.inf]])


@pytest.mark.parametrize("decimals", range(8))
def test_fixed_decimals_equal_python_formatting(decimals):
    values = tricky(np.random.default_rng(decimals))
    assert csv_text._kernel_range([("fixed", values, decimals)])      # the compiled path is the one checked
    assert format_rows([("fixed", values, decimals)]) == python_text(values, decimals)


def test_float32_values_and_integers():
    rng = np.random.default_rng(3)
    amp = rng.normal(0, 80, 5000).astype(np.float32)
    assert format_rows([("fixed", amp, 3)]) == "".join(f"{a:.3f}\n" for a in amp).encode()
    ints = np.concatenate([rng.integers(-10**15, 10**15, 5000), [0, -1, 9, 10, np.iinfo(np.int64).max]])
    assert format_rows([("int", ints)]) == "".join(f"{v}\n" for v in ints.tolist()).encode()


def test_numbers_beyond_the_exact_range_are_still_exact():
    values = np.array([1.5, 3.0e17, -2.0 ** 60, 0.1])
    assert not csv_text._kernel_range([("fixed", values, 7)])
    assert format_rows([("fixed", values, 7)], "\r\n") == python_text(values, 7, "\r\n")
    ints = np.array([np.iinfo(np.int64).min, 5])
    assert format_rows([("int", ints)]) == b"-9223372036854775808\n5\n"


def test_blocks_and_bad_tables():
    rng = np.random.default_rng(4)
    t = rng.uniform(0, 10, 1001)
    fh = io.BytesIO()
    write_rows(fh, [("int", np.arange(1001)), ("text", np.arange(1001) % 2, ["ä", "b"]), ("fixed", t, 2)],
               block_rows=64)
    assert fh.getvalue() == "".join(f"{k},{'äb'[k % 2]},{x:.2f}\n" for k, x in enumerate(t)).encode()
    with pytest.raises(ValueError, match="one length"):
        format_rows([("int", np.arange(3)), ("fixed", np.zeros(2), 1)])
    with pytest.raises(ValueError, match="text codes must index"):
        format_rows([("text", np.array([0, 2]), ["a", "b"])])
    with pytest.raises(ValueError, match="0-7 decimals"):
        format_rows([("fixed", np.zeros(2), 9)])


def old_event_csv(ev):
    """The event writer as it was: csv module rows with f-string numbers."""
    fh = io.StringIO(newline="")
    w = csv.writer(fh)
    w.writerow(["sample", "time_s", "channel", "group", "amplitude_uv", "amplitude_sigma", "artefact"])
    w.writerows(zip(ev.sample.tolist(), (f"{t:.6f}" for t in ev.time_s), ev.channel.tolist(), ev.group.tolist(),
                    (f"{a:.3f}" for a in ev.amplitude_uv), (f"{a:.4f}" for a in ev.amplitude_sigma),
                    ev.artefact.astype(int).tolist()))
    return fh.getvalue().encode()


def random_events(rng, n, rate_hz=30000.0):
    sample = np.sort(rng.integers(0, 10**8, n))
    return EventTable(sample=sample, channel=rng.integers(0, 64, n), group=rng.integers(0, 16, n),
                      amplitude_uv=rng.normal(-60, 40, n), amplitude_sigma=rng.gamma(6, 1, n),
                      artefact=rng.random(n) < 0.05, rate_hz=rate_hz, n_samples=10**8, sigma_uv=np.ones(64),
                      floor_sigma=4.0)


@pytest.mark.parametrize("rate_hz", [30000.0, 32768.0, 20000.0])
def test_event_csv_same_bytes_as_before(tmp_path, rate_hz):
    ev = random_events(np.random.default_rng(5), 3000, rate_hz)
    ev.write_csv(tmp_path / "e.csv")
    assert (tmp_path / "e.csv").read_bytes() == old_event_csv(ev)


def test_unit_times_csv_same_bytes_as_before(tmp_path):
    rng = np.random.default_rng(6)
    ev = random_events(rng, 4000, 32000.0)
    assign = np.where(rng.random(len(ev)) < 0.1, -1, rng.integers(1, 6, len(ev)))
    ev.group = np.maximum(assign, 0).astype(np.int32)            # unit u lives on group u
    data = SortingData.from_events(ev, np.zeros((len(ev), 1), np.float32), ["f0"])
    units = {u: Unit(u, LABELS[u % len(LABELS)]) for u in range(1, 6)}
    sorting = Sorting(data, assign, units, next_id=6)
    out = export_sorting(ev, sorting, tmp_path / "x")
    old = "unit,label,time_s\n" + "".join(
        "".join(f"{u},{rec.label},{x:.7f}\n" for x in ev.time_s[sorting.events_of(u)]) for u, rec in units.items())
    assert out["csv"][0].read_bytes() == old.encode()


@pytest.mark.parametrize("decimals", [0, 3, 7])
def test_fixed_values_are_the_numbers_the_text_reads_back_as(decimals):
    # reference: float(format(x, ".Nf")), CPython's correctly rounded formatting and parsing
    rng = np.random.default_rng(decimals)
    rates = rng.choice([30000.0, 24414.0625, 20000.0, 32000.0, 1234.5], 50000)
    x = np.concatenate([rng.integers(0, 10**9, 50000) / rates, rng.normal(0, 1e3, 20000),
                        [0.0, -0.0, -1e-9, 2.5e-7, 0.5, 1.5, 2.0**53 / 10**decimals * 1.5]])
    got = csv_text.fixed_values(x, decimals)
    ref = np.array([float(format(v, f".{decimals}f")) for v in x.tolist()])
    np.testing.assert_array_equal(got, ref)
    assert np.array_equal(np.signbit(got), np.signbit(ref))
    with pytest.raises(ValueError, match="finite"):
        csv_text.fixed_values(np.array([np.nan]), decimals)
