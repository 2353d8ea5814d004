"""The made-up earlier sorting the audit tests and the screenshots import: each true unit with a share of its
spikes dropped and as many added (checked against the demo's truth file by counting; common practice, no source)."""

import numpy as np
import pytest

from rigside.core.errors import RigsideError
from rigside.core.synthetic.truth import write_imperfect_sorting
from rigside.sample_data import demo_path


def test_each_unit_keeps_all_but_a_share_of_its_true_spikes_and_gains_as_many(tmp_path):
    truth_path = demo_path().with_name("demo.truth.csv")
    truth = np.genfromtxt(truth_path, delimiter=",", names=True)
    counts = write_imperfect_sorting(truth_path, tmp_path / "old.csv", 0.1, seed=3)
    got = np.genfromtxt(tmp_path / "old.csv", delimiter=",", names=True)
    assert list(got.dtype.names) == ["unit", "time_s"]
    for u in np.unique(truth["unit"]).astype(int):
        true_t = truth["time_s"][truth["unit"] == u]
        mine = got["time_s"][got["unit"] == u]
        assert counts[u] == len(mine) == len(true_t)
        assert np.all(np.diff(mine) >= 0)
        kept = np.isin(np.round(mine, 6), np.round(true_t, 6)).sum()
        assert len(true_t) - len(true_t) // 10 <= kept <= len(true_t)   # an extra spike may land on a true time
    again = write_imperfect_sorting(truth_path, tmp_path / "again.csv", 0.1, seed=3)
    assert again == counts and (tmp_path / "again.csv").read_bytes() == (tmp_path / "old.csv").read_bytes()
    with pytest.raises(RigsideError, match="from 0 to 1"):
        write_imperfect_sorting(truth_path, tmp_path / "bad.csv", 1.5)
    assert not (tmp_path / "bad.csv").exists()
