"""Hypothesis round trip: canonical rows → plain CSV → reader → the same rows."""
from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from auditor.ingest.frame import ReadOptions
from auditor.ingest.readers import plain_csv

ZONES = ["UTC", "Europe/Berlin", "America/New_York", "Asia/Kolkata", "Australia/Adelaide"]


@st.composite
def meter_rows(draw):
    n = draw(st.integers(1, 300))
    minutes = draw(st.sampled_from([5, 15, 30, 60]))
    day = draw(st.dates(min_value=pd.Timestamp("2020-01-01").date(), max_value=pd.Timestamp("2030-12-31").date()))
    zone = draw(st.sampled_from(ZONES))
    start = pd.Timestamp(day).tz_localize("UTC") + pd.Timedelta(minutes=minutes * draw(st.integers(0, 95)))
    idx = pd.date_range(start, periods=n, freq=f"{minutes}min")
    values = st.floats(0, 1e6, allow_nan=False, allow_infinity=False).map(lambda x: round(x, 3))
    cols = {q: draw(st.lists(values, min_size=n, max_size=n)) for q in ("kwh", "kvarh_lag", "kvarh_lead")}
    flags = draw(st.lists(st.sampled_from("AE"), min_size=n, max_size=n))
    label_end = draw(st.booleans())
    return idx, zone, cols, flags, label_end, minutes


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(meter_rows())
def test_plain_csv_round_trip(tmp_path_factory, data):
    idx, zone, cols, flags, label_end, minutes = data
    local = idx.tz_convert(zone)
    stamps = local + pd.Timedelta(minutes=minutes) if label_end else local
    path = tmp_path_factory.mktemp("rt") / "f.csv"
    frame = pd.DataFrame({"meter": "RT-1", ("end" if label_end else "start"): [t.isoformat() for t in stamps],
                          **cols, "flag": flags})
    frame.to_csv(path, index=False)
    out = plain_csv.read(path, ReadOptions(chunk_rows=97))
    got = pd.concat(list(out.chunks), ignore_index=True)
    assert out.info.label == ("end" if label_end else "start")
    shift = minutes * 60 if label_end else 0
    np.testing.assert_array_equal(got["start"].to_numpy() - shift, idx.as_unit("s").asi8)
    for q, v in cols.items():
        np.testing.assert_allclose(got[q].to_numpy(), v, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(got["estimated"].to_numpy(), np.array(flags) == "E")
    np.testing.assert_array_equal(got["line"].to_numpy(), np.arange(2, len(idx) + 2))
