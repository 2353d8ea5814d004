"""Event-table conventions with one home: the microvolt-to-sigma threshold conversion, used by detection, the event
table and the window (common practice, no source: threshold / noise sigma, dead channels never cross)."""

import numpy as np
import pytest

from rigside.core.errors import RigsideError
from rigside.core.events import uv_to_sigma
from rigside.core.params import Params
from rigside.core.signal.pipeline import params_at_thresholds, thresholds_sigma


def test_microvolts_become_sigma_multiples_and_dead_channels_never_cross():
    sigma = np.array([10.0, 0.0, 4.0])
    np.testing.assert_allclose(uv_to_sigma(50.0, sigma), [5.0, np.inf, 12.5])
    np.testing.assert_allclose(uv_to_sigma([20.0, 20.0, 2.0], sigma), [2.0, np.inf, 0.5])


def test_detection_parameters_in_microvolts():
    params = Params()
    params.detect.threshold_uv = 30.0
    sigma = np.array([6.0, 0.0, 15.0])
    np.testing.assert_allclose(thresholds_sigma(params, sigma), [5.0, np.inf, 2.0])


def test_parameters_at_per_channel_thresholds_state_one_value():
    """One sigma multiple, else one microvolt value on the live channels (30 uV = 5 x 6 = 2 x 15); per-channel
    values that are neither are stored per channel; the parameters given are left as they were."""
    params = Params()
    sigma = np.array([6.0, 0.0, 15.0])
    same = params_at_thresholds(params, np.full(3, 4.5), sigma)
    assert (same.detect.threshold_sigma, same.detect.threshold_uv) == (4.5, None)
    uv = params_at_thresholds(params, np.array([5.0, np.inf, 2.0]), sigma)
    assert uv.detect.threshold_uv == pytest.approx(30.0)
    np.testing.assert_allclose(thresholds_sigma(uv, sigma), [5.0, np.inf, 2.0])
    assert params.detect.threshold_uv is None and params.detect.threshold_sigma == Params().detect.threshold_sigma
    per = params_at_thresholds(params, np.array([5.0, 4.0, 4.0]), sigma)
    # the dead channel (sigma 0) holds no events; it keeps the highest live threshold, a finite number
    assert per.detect.channel_thresholds_sigma == [5.0, 5.0, 4.0] and per.detect.threshold_uv is None
    np.testing.assert_array_equal(thresholds_sigma(per, sigma), [5.0, 5.0, 4.0])
    assert params_at_thresholds(params, np.array([5.0, 4.0, 4.0]), None).detect.channel_thresholds_sigma \
        == [5.0, 4.0, 4.0]
    assert params_at_thresholds(per, np.full(3, 4.5), sigma).detect.channel_thresholds_sigma is None
    with pytest.raises(RigsideError, match="finite numbers above 0 sigma on live channels"):
        params_at_thresholds(params, np.array([5.0, 4.0, np.inf]), sigma)


def test_one_event_column_list(tmp_path):
    """The CSV header, the block detection returns and the stored columns all follow events.COLUMNS."""
    import csv
    from dataclasses import fields

    from rigside.core.events import COLUMNS, CSV_COLUMNS, POSITION_COLUMNS, EventColumns, EventTable
    from rigside.core.signal.detection import BlockEvents

    stored = [f.name for f in fields(EventColumns)]
    assert stored == list(COLUMNS) == [f.name for f in fields(EventTable)][:len(COLUMNS)]
    assert [f.name for f in fields(BlockEvents)] == list(COLUMNS) + list(POSITION_COLUMNS)
    n = 3
    table = EventTable(sample=np.arange(n, dtype=np.int64) * 30, channel=np.zeros(n, np.int32),
                       group=np.zeros(n, np.int32), amplitude_uv=np.full(n, -50.5, np.float32),
                       amplitude_sigma=np.full(n, 5.05, np.float32), artefact=np.zeros(n, bool),
                       rate_hz=30000.0, n_samples=1000, sigma_uv=np.array([10.0]), floor_sigma=3.0,
                       polarity="negative", excluded={})
    table.write_csv(tmp_path / "e.csv")
    with open(tmp_path / "e.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == CSV_COLUMNS == ("sample", "time_s", *[c for c in COLUMNS if c != "sample"])
    assert rows[2] == ["30", "0.001000", "0", "0", "-50.500", "5.0500", "0"]
