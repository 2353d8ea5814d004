"""Sessions whose checksum is valid but whose content is hostile or out of range are refused
with one SessionError line, never a traceback from deeper code."""

import numpy as np
import pytest

from rigside.core.errors import SessionError
from rigside.core.textparse import MAX_NESTING, nesting, parse_json
from rigside.core.units.session import load_session, save_session

from .test_session import copy_session, edit_session, made, reseal  # noqa: F401  (module fixture and helpers)

DEEP = "[" * 50_000 + "]" * 50_000


def _set_text(f, name, value: str) -> None:
    del f[name]
    f.create_dataset(name, data=np.frombuffer(value.encode(), np.uint8))


def _replace(f, name, value) -> None:
    del f[name]
    f.create_dataset(name, data=value)


CONTENT = {
    "deep description": (lambda f: f["recording"].attrs.__setitem__("description", DEEP), "nested at most"),
    "deep parameters": (lambda f: f["params"].attrs.__setitem__("json", '{"run": ' + DEEP + "}"), "nested at most"),
    "deep feature names": (lambda f: f["features"].attrs.__setitem__("names", DEEP), "nested at most"),
    "deep notes": (lambda f: _set_text(f, "sorting/notes", DEEP), "nested at most"),
    "deep journal": (lambda f: _set_text(f, "journal/lines", DEEP + "\n"), "nested at most"),
    "nested just below the interpreter limit": (
        lambda f: f["recording"].attrs.__setitem__("description", "[" * 900 + "]" * 900), "nested at most"),
    "parameters not a table": (lambda f: f["params"].attrs.__setitem__("json", "[1, 2]"), "parameters must be"),
    "out-of-range parameter": (lambda f: f["params"].attrs.__setitem__("json", '{"run": {"workers": 0}}'),
                               "worker count"),
    "tiny rate": (lambda f: f["events"].attrs.__setitem__("rate_hz", 1e-300), "sampling rate must be"),
    "huge length": (lambda f: f["events"].attrs.__setitem__("n_samples", np.int64(2**62)), "recording length"),
    "negative floor": (lambda f: f["events"].attrs.__setitem__("floor_sigma", -1.0), "look-up floor"),
    "unknown polarity": (lambda f: f["events"].attrs.__setitem__("polarity", "sideways"), "polarity must be"),
    "NaN amplitudes": (lambda f: _replace(f, "events/amplitude_uv", np.full(2000, np.nan, np.float32)),
                       "amplitudes must be finite"),
    "NaN noise": (lambda f: _replace(f, "events/sigma_uv", np.full(12, np.nan)), "noise sigmas"),
    "float samples": (lambda f: _replace(f, "events/sample", np.arange(2000, dtype=np.float64)),
                      "sample must be"),
    "group beyond the channels": (lambda f: _replace(f, "events/group", np.full(2000, 99, np.int32)),
                                  "event groups must be from 0 to 7"),
    "channel in two groups": (lambda f: f["events/group"].__setitem__(0, 1 - f["events/group"][0]),
                              "one channel must all belong to one group"),
    "NaN features": (lambda f: f["features/values"].__setitem__((0, 0), np.nan), "features/values must hold finite"),
    "unit group beyond the channels": (lambda f: f["sorting/unit_group"].__setitem__(0, 500), "unit groups"),
}


@pytest.mark.parametrize("name", list(CONTENT))
def test_valid_checksum_with_hostile_content_is_refused(made, tmp_path, name):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "h.h5", copy_session(s))
    mutate, message = CONTENT[name]
    with edit_session(p) as f:
        mutate(f)
    reseal(p)
    with pytest.raises(SessionError, match=message) as info:
        load_session(p)
    assert "\n" not in str(info.value)


def test_nesting_is_measured_without_recursion():
    # common practice, no source: depth of [[1]] is 2, of {"a": [1]} is 2, of a scalar 0
    assert nesting(1) == 0 and nesting([[1]]) == 2 and nesting({"a": [1]}) == 2
    assert nesting(parse_json("[" * MAX_NESTING + "]" * MAX_NESTING, "x")) == MAX_NESTING
    deep: list = []
    for _ in range(5000):
        deep = [deep]
    assert nesting(deep) == MAX_NESTING + 1  # stops counting just past the limit
