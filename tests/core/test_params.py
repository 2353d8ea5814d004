import os

import pytest

from rigside.core.errors import ParamError
from rigside.core.io.atomic import WriteError
from rigside.core.params import Params


def test_defaults_are_valid_and_as_documented():
    p = Params()
    p.validate(30000.0)
    # common practice, no source: 300-6000 Hz, order 3, 4.5 sigma, negative, 1 ms dead time
    assert (p.filter.low_hz, p.filter.high_hz, p.filter.order) == (300.0, 6000.0, 3)
    assert (p.detect.threshold_sigma, p.detect.polarity, p.detect.dead_time_ms) == (4.5, "negative", 1.0)


def test_high_edge_at_nyquist_is_refused_with_the_value():
    p = Params()
    p.filter.high_hz = 15000.0
    with pytest.raises(ParamError, match=r"band high edge must be below Nyquist \(15000 Hz\), got 15000 Hz"):
        p.validate(30000.0)


@pytest.mark.parametrize("section,key,value,text", [
    ("filter", "low_hz", -5.0, "band low edge must be above 0 Hz"),
    ("filter", "order", 0, "filter order must be an integer from 1 to 8"),
    ("detect", "threshold_sigma", float("nan"), "threshold must be a finite number"),
    ("detect", "polarity", "sideways", "polarity must be one of negative, positive, both"),
    ("detect", "dead_time_ms", -1.0, "dead time must be between 0 and 100 ms"),
    ("run", "workers", 0, "worker count must be an integer from 1 to 64"),
    ("snippets", "n_pcs", 0, "number of principal components"),
])
def test_nonsense_values_get_specific_messages(section, key, value, text):
    p = Params()
    setattr(getattr(p, section), key, value)
    with pytest.raises(ParamError, match=text):
        p.validate(30000.0)


def test_toml_round_trip(tmp_path):
    p = Params()
    p.detect.threshold_uv = 55.0
    p.filter.common_reference = True
    p.save_toml(tmp_path / "p.toml")
    q = Params.load_toml(tmp_path / "p.toml")
    assert q == p


def test_save_toml_is_atomic_and_keeps_the_old_file_on_failure(tmp_path, monkeypatch):
    target = tmp_path / "p.toml"
    Params().save_toml(target)
    before = target.read_bytes()
    p = Params()
    p.detect.threshold_sigma = 6.0

    def refuse(src, dst):
        raise OSError(28, "No space left on device")
    monkeypatch.setattr(os, "replace", refuse)   # the rename onto the target fails
    with pytest.raises(WriteError, match="No space left on device"):    # one line, not a traceback
        p.save_toml(target)
    assert target.read_bytes() == before and sorted(x.name for x in tmp_path.iterdir()) == ["p.toml"]
    monkeypatch.undo()
    p.save_toml(target)
    assert Params.load_toml(target) == p


def test_toml_unknown_key_missing_file_and_garbage(tmp_path):
    (tmp_path / "bad.toml").write_text("[detect]\nthreshhold = 4\n")
    with pytest.raises(ParamError, match="parameter \\[detect\\] threshhold must be one of"):
        Params.load_toml(tmp_path / "bad.toml")
    with pytest.raises(ParamError, match="parameter file must exist"):
        Params.load_toml(tmp_path / "none.toml")
    (tmp_path / "junk.toml").write_bytes(b"\x00\xff[[[")
    with pytest.raises(ParamError, match="valid TOML"):
        Params.load_toml(tmp_path / "junk.toml")
    (tmp_path / "sect.toml").write_text("[warp]\nx = 1\n")
    with pytest.raises(ParamError, match="parameter section must be one of"):
        Params.load_toml(tmp_path / "sect.toml")
