"""The one emitter: bound methods held weakly, every other callable strongly."""

import gc
from functools import partial

import pytest

from rigside.core.notify import Signal


class View:
    def __init__(self, seen):
        self.seen = seen

    def refresh(self, x):
        self.seen.append(("view", x))


def test_inline_lambda_keeps_firing_until_disconnected():
    sig, got = Signal(), []
    sig.connect(lambda x: got.append(x))   # nothing else holds this lambda
    gc.collect()
    sig.emit(1)
    sig.emit(2)
    assert got == [1, 2]


def test_bound_method_dies_with_its_object():
    sig, seen = Signal(), []
    view = View(seen)
    sig.connect(view.refresh)
    sig.emit(1)
    del view
    gc.collect()
    sig.emit(2)
    assert seen == [("view", 1)]


def test_functions_partials_twice_and_disconnect():
    sig, got = Signal(), []

    def f(x):
        got.append(("f", x))

    g = partial(lambda tag, x: got.append((tag, x)), "g")
    sig.connect(f)
    sig.connect(f)          # a second connect is a no-op
    sig.connect(g)
    sig.emit(1)
    sig.disconnect(f)
    sig.emit(2)
    assert got == [("f", 1), ("g", 1), ("g", 2)]


def test_every_callback_runs_before_the_first_error():
    sig, got = Signal(), []

    def bad(x):
        raise RuntimeError(f"bad {x}")

    sig.connect(bad)
    sig.connect(got.append)   # a bound method of a live list
    with pytest.raises(RuntimeError, match="bad 3"):
        sig.emit(3)
    assert got == [3]


def test_not_callable_is_refused():
    with pytest.raises(TypeError, match="callback must be callable"):
        Signal().connect(3)
