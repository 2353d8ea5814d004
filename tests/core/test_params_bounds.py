"""Parameters that size memory are bounded, loose types are refused, and hostile TOML gives
one ParamError line (common practice, no source: the bounds are our own)."""

import pytest

from rigside.core.errors import ParamError
from rigside.core.params import MEMORY_BUDGET_BYTES, Params


@pytest.mark.parametrize("section, key, value, message", [
    ("run", "workers", True, "worker count must be an integer"),
    ("noise", "n_windows", True, "noise window count must be an integer"),
    ("filter", "order", True, "filter order must be an integer"),
    ("filter", "common_reference", 1, "common reference must be true or false"),
    ("snippets", "n_pcs", False, "principal components must be an integer"),
    ("detect", "threshold_sigma", True, "threshold must be a finite number"),
    ("noise", "window_s", 1e9, "at most 10 s"),
    ("noise", "n_windows", 10**7, "from 1 to 10000"),
    ("snippets", "pca_fit_events", 10**9, "from 10 to 1000000"),
    ("cluster", "fit_events", 10**8, "from 100 to 1000000"),
])
def test_loose_or_memory_sizing_values_are_refused(section, key, value, message):
    p = Params()
    setattr(getattr(p, section), key, value)
    with pytest.raises(ParamError, match=message):
        p.validate()


def test_memory_budget_names_the_bound():
    p = Params()
    p.check_memory(30000.0, 384)              # defaults fit a 384-channel probe at 30 kHz
    p.run.workers, p.run.chunk_s = 16, 10.0
    with pytest.raises(ParamError, match=f"within {MEMORY_BUDGET_BYTES >> 20} MiB") as info:
        p.check_memory(30000.0, 384)
    assert "got 10 s x 16" in str(info.value)
    p = Params()
    p.noise.window_s = 10.0
    with pytest.raises(ParamError, match="noise windows"):
        p.check_memory(30000.0, 64)


def test_workers_true_in_a_toml_file_is_refused(tmp_path):
    f = tmp_path / "p.toml"
    f.write_text("[run]\nworkers = true\n")
    with pytest.raises(ParamError, match="worker count must be an integer from 1 to 64, got True"):
        Params.load_toml(f).validate()


@pytest.mark.parametrize("text", ["[run]\nworkers = " + "[" * 50_000 + "]" * 50_000,
                                  "[run]\nworkers = " + "{a = " * 5000 + "1" + "}" * 5000,
                                  "[run]\nworkers = " + "[" * 40 + "]" * 40], ids=["array", "table", "just-over"])
def test_deeply_nested_toml_is_one_parameter_error(tmp_path, text):
    f = tmp_path / "deep.toml"
    f.write_text(text)
    with pytest.raises(ParamError, match="nested at most 32 levels") as info:
        Params.load_toml(f)
    assert "\n" not in str(info.value)
