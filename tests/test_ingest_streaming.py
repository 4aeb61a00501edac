"""The import streams a file in chunks and groups rows by meter (spilling to disk past a memory
budget); every rule must hold wherever the chunk boundaries fall, and the result must be the
same as reading the file in one piece. Above all the repeated autumn hour of a wall-time export:
a chunk boundary inside it once gave a false "occurs twice" error (documented, and now gone)."""
from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from auditor.ingest.frame import ReadOptions
from auditor.ingest.pipeline import ImportOptions, MeterPartition, import_file
from auditor.ingest.profile import profile_from_dict
from auditor.ingest.readers import plain_csv, profile_csv
from tests.ingest_helpers import epoch, reading_count, readings, write_csv

BERLIN = "Europe/Berlin"


def autumn_rows(meter: str = "M1", hours: int = 25) -> list[str]:
    # 2025-10-26 in Europe/Berlin has 25 hours: wall times 02:00-02:45 occur twice (CEST, then CET)
    idx = pd.date_range(pd.Timestamp("2025-10-26", tz=BERLIN), periods=hours * 4, freq="15min")
    return [f"{meter},{t.tz_localize(None).isoformat()},{1 + i / 100:.2f},0.5,0" for i, t in enumerate(idx)]


def expected_starts(n: int = 100) -> np.ndarray:
    return epoch("2025-10-25T22:00:00+00:00") + 900 * np.arange(n)


@pytest.mark.parametrize("chunk_rows", [1, 2, 3, 5, 7, 8, 9, 10, 11, 13])
def test_repeated_hour_across_every_chunk_boundary(tmp_path, chunk_rows):
    # rows 9..16 (0-based 8..15) are the repeated 02:00-02:45: these chunk sizes put a boundary
    # before, inside and after the first and the second pass
    path = write_csv(tmp_path / "a.csv", autumn_rows())
    out = plain_csv.read(path, ReadOptions(timezone=BERLIN, chunk_rows=chunk_rows))
    got = pd.concat(list(out.chunks), ignore_index=True)
    np.testing.assert_array_equal(got["start"].to_numpy(), expected_starts())


def test_repeated_hour_across_chunks_of_two_interleaved_meters(tmp_path):
    a, b = autumn_rows("M1"), autumn_rows("M2")
    lines = [x for pair in zip(a, b, strict=True) for x in pair]  # sorted by time, meters alternating
    path = write_csv(tmp_path / "a.csv", lines)
    for chunk_rows in (3, 17, 19, 250_000):
        got = pd.concat(list(plain_csv.read(path, ReadOptions(timezone=BERLIN, chunk_rows=chunk_rows)).chunks))
        for m in ("M1", "M2"):
            np.testing.assert_array_equal(got.loc[got["meter"] == m, "start"].to_numpy(), expected_starts())


def test_chunk_boundary_inside_the_repeated_hour_imports(store, tmp_path):
    """The documented false error: with 250,000-row chunks a boundary inside the repeated hour was
    reported as an ambiguous time. The same case at a small chunk size now imports exactly."""
    path = write_csv(tmp_path / "a.csv", autumn_rows())
    out = import_file(store, path, ImportOptions(timezone=BERLIN, chunk_rows=11))  # boundary after row 11
    assert out.status == "imported", out.errors
    np.testing.assert_array_equal(readings(store)["start"].to_numpy(), expected_starts())


def test_profile_reader_resolves_the_repeated_hour_across_chunks(tmp_path):
    profile = profile_from_dict({
        "file": {"delimiter": ";"}, "meter": {"id": "LOG-1"},
        "time": {"column": "Zeit", "format": "%d.%m.%Y %H:%M", "timezone": BERLIN, "interval_minutes": 15},
        "quantities": {"kwh": {"column": "kWh", "unit": "kWh"}}})
    idx = pd.date_range(pd.Timestamp("2025-10-26", tz=BERLIN), periods=100, freq="15min").tz_localize(None)
    text = "Zeit;kWh\n" + "".join(f"{t:%d.%m.%Y %H:%M};1.0\n" for t in idx)
    path = tmp_path / "p.csv"
    path.write_text(text)
    for chunk_rows in (1, 6, 9, 12, 1000):
        out = profile_csv.read(path, ReadOptions(profile=profile, chunk_rows=chunk_rows))
        got = pd.concat(list(out.chunks), ignore_index=True)
        np.testing.assert_array_equal(got["start"].to_numpy(), expected_starts())


def test_a_single_pass_through_the_repeated_hour_is_still_an_error(tmp_path):
    # 02:00-02:45 once, then 03:00: which pass is it? Not knowable: an error naming the first line
    rows = ["M1,2025-10-26T01:45:00,1,1,0", "M1,2025-10-26T02:00:00,1,1,0", "M1,2025-10-26T02:15:00,1,1,0",
            "M1,2025-10-26T02:30:00,1,1,0", "M1,2025-10-26T02:45:00,1,1,0", "M1,2025-10-26T03:00:00,1,1,0"]
    path = write_csv(tmp_path / "a.csv", rows)
    for chunk_rows in (2, 3, 100):
        with pytest.raises(Exception) as exc:
            list(plain_csv.read(path, ReadOptions(timezone=BERLIN, chunk_rows=chunk_rows)).chunks)
        assert exc.value.problems[0].line == 3 and "occurs twice" in exc.value.problems[0].message


def _year_rows(meter: str, seed: int, n: int = 2000) -> list[str]:
    rng = np.random.default_rng(seed)
    t = pd.date_range("2025-03-01", periods=n, freq="15min", tz="UTC")
    kwh = (20 + 10 * rng.random(n)).round(3)
    return [f"{meter},{s.isoformat()},{k},{k * 0.5:.3f},0" for s, k in zip(t, kwh, strict=True)]


@pytest.mark.parametrize("chunk_rows,memory_rows", [(7, 50), (333, 1000), (250_000, 1_500_000)])
def test_small_chunks_and_spills_store_exactly_what_one_piece_does(store, tmp_path, chunk_rows, memory_rows):
    # meters interleaved (a file sorted by time), a gap, an exact duplicate across chunks
    a, b, c = _year_rows("S-A", 1), _year_rows("S-B", 2), _year_rows("S-C", 3)
    del b[500:510]  # a gap of 10 intervals
    lines = [x for trio in itertools.zip_longest(a, b, c) for x in trio if x is not None]
    lines.insert(1500, a[3])  # an exact duplicate of a row far before it
    path = write_csv(tmp_path / "a.csv", lines)
    out = import_file(store, path, ImportOptions(chunk_rows=chunk_rows, memory_rows=memory_rows))
    assert out.status == "imported", out.errors
    assert out.inserted == 3 * 2000 - 10
    assert any("gap of 10 interval(s)" in w.message for w in out.warnings)
    assert any("1 exact duplicate row(s) for meter S-A" in w.message for w in out.warnings)
    df = readings(store)
    assert reading_count(store) == 3 * 2000 - 10
    got = df.groupby("meter_id")["kwh"].sum().to_numpy()
    want = [sum(float(r.split(",")[2]) for r in rows) for rows in (a, b, c)]
    np.testing.assert_allclose(np.sort(got), np.sort(want), rtol=1e-12)


def test_duplicate_with_other_values_across_a_spill_is_named(store, tmp_path):
    a = _year_rows("S-A", 1, n=400)
    bad = a[5].rsplit(",", 3)[0] + ",99,1,0"
    path = write_csv(tmp_path / "a.csv", a + _year_rows("S-B", 2, n=400) + [bad])
    out = import_file(store, path, ImportOptions(chunk_rows=50, memory_rows=100))
    assert out.status == "rejected"
    assert out.errors[0].line == 802 and "first at line 7" in out.errors[0].message
    assert reading_count(store) == 0


def test_partition_returns_each_meters_rows_in_file_order(tmp_path):
    part = MeterPartition(memory_rows=5)
    frames = []
    for i in range(6):
        n = 4
        frame = pd.DataFrame({"meter": np.array(["X", "Y"] * 2, dtype=object), "start": np.arange(n) + 10 * i,
                              "kwh": np.arange(n) * 1.0 + i, "kvarh_lag": 0.5, "kvarh_lead": 0.0,
                              "kwh_received": np.nan, "estimated": [True, False] * 2,
                              "line": np.arange(n) + 4 * i + 2})
        frames.append(frame)
        part.add(frame)
    whole = pd.concat(frames, ignore_index=True)
    assert part.meters() == ["X", "Y"] and part.total == 24
    for m in ("X", "Y"):
        rows = part.take(m)
        want = whole[whole["meter"] == m]
        np.testing.assert_array_equal(rows["line"], want["line"].to_numpy())
        np.testing.assert_array_equal(rows["kwh"], want["kwh"].to_numpy())
        np.testing.assert_array_equal(rows["estimated"], want["estimated"].to_numpy())
        assert np.isnan(rows["kwh_received"]).all()
    part.close()


def test_repeated_hours_of_two_years_are_separate_runs(tmp_path):
    # a meter's rows jump from 2024's repeated hour straight into 2025's (a year missing between):
    # each run is resolved on its own, in one chunk or across a boundary between them
    def hour(day):
        idx = pd.date_range(pd.Timestamp(day, tz=BERLIN) + pd.Timedelta(hours=2), periods=8, freq="15min")
        return idx, [f"M1,{t.tz_localize(None).isoformat()},1,0.5,0" for t in idx]

    i24, r24 = hour("2024-10-27")
    i25, r25 = hour("2025-10-26")
    path = write_csv(tmp_path / "a.csv", r24 + r25)
    want = np.r_[i24.as_unit("s").asi8, i25.as_unit("s").asi8]  # tz-aware: UTC instants
    for chunk_rows in (8, 5, 100):
        got = pd.concat(list(plain_csv.read(path, ReadOptions(timezone=BERLIN, chunk_rows=chunk_rows)).chunks))
        np.testing.assert_array_equal(got["start"].to_numpy(), want)
