"""The one bounded thread-pool loop shared by detection and the audit's amplitude pass."""


import pytest

from rigside.core.progress import Cancelled, run_bounded


def test_results_in_order_with_bounded_flight():
    got = []

    def work(i, j):
        return i * j

    def on_result(r):
        got.append(r)

    submitted = []

    def items():
        for i in range(50):
            submitted.append(i)
            # never more than 2 * workers submitted ahead of what has been collected
            assert len(submitted) - len(got) <= 2 * 3
            yield (i, 2)

    run_bounded(work, items(), 3, on_result)
    assert got == [2 * i for i in range(50)]


def test_cancel_and_errors_stop_the_loop():
    seen = []
    with pytest.raises(Cancelled):
        run_bounded(lambda i: i, ((i,) for i in range(100)), 2, seen.append, cancel=lambda: len(seen) >= 5)
    assert 5 <= len(seen) < 100

    def boom(i):
        if i == 7:
            raise ValueError("bad item 7")
        return i

    with pytest.raises(ValueError, match="bad item 7"):
        run_bounded(boom, ((i,) for i in range(100)), 2, lambda r: None)
