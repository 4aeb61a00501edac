"""The read path: the block layout's codec, the block reader against the row reader (SQLite and
PostgreSQL, whose row reader is binary COPY), and the local calendar's integer arithmetic
against pandas' own calendar fields and the ``holidays`` library."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from auditor.store.blocks import BLOCK, BLOCK_COLUMNS, Intervals, pack, unpack
from auditor.store.models import QUANTITIES


def intervals(start, kwh, *, lag=None, received=None, flags=None, batch=None) -> Intervals:
    start = np.asarray(start, dtype=np.int64)
    n = len(start)
    kwh = np.asarray(kwh, dtype=float)
    return Intervals(start, {"kwh": kwh, "kvarh_lag": kwh * 0.5 if lag is None else np.asarray(lag, float),
                             "kvarh_lead": np.zeros(n),
                             "kwh_received": np.full(n, np.nan) if received is None else np.asarray(received, float)},
                     np.zeros(n, np.int16) if flags is None else np.asarray(flags, np.int16),
                     np.full(n, 7, np.int32) if batch is None else np.asarray(batch, np.int32))


def assert_same(a: Intervals, b: Intervals) -> None:
    np.testing.assert_array_equal(a.start, b.start)
    for q in QUANTITIES:
        np.testing.assert_array_equal(a.values[q], b.values[q])
    np.testing.assert_array_equal(a.flags, b.flags)
    np.testing.assert_array_equal(a.batch, b.batch)


def test_round_trip_with_gaps_flags_absent_values_and_mixed_batches():
    size = 24  # blocks of 6 hours, as revision 0010 wrote them: 100 slots span five
    step = 900
    t0 = 1_735_689_600  # 2025-01-01T00:00Z, a block boundary
    start = t0 + step * np.r_[np.arange(0, 30), np.arange(40, 100)]  # a gap inside the second block
    n = len(start)
    kwh = np.round(np.linspace(1.0, 99.0, n), 3)
    kwh[5] = np.nan  # an interval stored without a kWh value
    received = np.where(np.arange(n) >= 60, 0.25, np.nan)
    flags = np.zeros(n, np.int16)
    flags[3] = 1  # estimated
    batch = np.where(np.arange(n) < 50, 3, 9)
    iv = intervals(start, kwh, received=received, flags=flags, batch=batch)
    rows = pack(12, 15, iv, size)
    assert all(len(r) == len(BLOCK_COLUMNS) for r in rows)
    assert [r[1] for r in rows] == [t0 + k * size * step for k in range(5)]  # 100 slots: 5 blocks
    by_block = {r[1]: dict(zip(BLOCK_COLUMNS, r, strict=True)) for r in rows}
    first = by_block[t0]
    assert first["kwh_received"] is None  # no value in the block: no bytes
    assert first["flags"] is not None and first["batch_ids"] is None and first["batch_id"] == 3
    assert by_block[t0 + 3 * size * step]["flags"] is None  # slots 72-95: full and unflagged
    assert by_block[t0 + 4 * size * step]["flags"] is not None  # slots 96-99 of 120: partly empty
    assert by_block[t0 + 2 * size * step]["batch_ids"] is not None  # batches 3 and 9 meet there
    back = unpack([r[1:] for r in rows], 15, size=size)
    assert_same(back, iv)
    part = unpack([r[1:] for r in rows], 15, int(start[10]), int(start[70]), size=size)
    np.testing.assert_array_equal(part.start, start[10:70])
    # the current layout: a day of 15-minute slots per block, the same intervals back
    day = pack(12, 15, iv)
    assert [r[1] for r in day] == [t0 + k * BLOCK * step for k in range(-(-100 // BLOCK))]
    assert_same(unpack([r[1:] for r in day], 15), iv)
    part = unpack([r[1:] for r in day], 15, int(start[10]), int(start[70]))
    np.testing.assert_array_equal(part.start, start[10:70])


def test_pack_refuses_starts_off_the_grid():
    with pytest.raises(ValueError, match="grid"):
        pack(1, 15, intervals([1_735_689_600 + 60], [1.0]))


def test_blocks_of_hourly_and_five_minute_meters():
    for minutes in (5, 60):
        start = 1_735_689_600 + 60 * minutes * np.arange(3 * BLOCK + 5)
        iv = intervals(start, np.arange(len(start), dtype=float))
        rows = pack(1, minutes, iv)
        assert len(rows) == 4
        assert_same(unpack([r[1:] for r in rows], minutes), iv)


def _expected_frame(lines: list[str], meter: str, multiplier: float = 1.0) -> pd.DataFrame:
    """The interval frame of one meter built from the CSV lines by pandas alone."""
    rows = [x.split(",") for x in lines if x.startswith(meter + ",")]
    index = pd.DatetimeIndex(pd.to_datetime([r[1] for r in rows], utc=True), name="start").as_unit("ns")
    vals = np.array([[float(v) for v in r[2:5]] for r in rows])
    return pd.DataFrame({"kwh": vals[:, 0] * multiplier, "kvarh_lag": vals[:, 1] * multiplier,
                         "kvarh_lead": vals[:, 2] * multiplier, "kwh_received": np.zeros(len(rows)),
                         "estimated": np.array([r[5] == "E" for r in rows])}, index=index)


def test_block_reader_gives_the_files_intervals(store, tmp_path):
    """What the import stored in blocks reads back as the file's own intervals (gaps, an
    estimated interval, an absent channel, the meter multiplier, a date range), SQLite and
    PostgreSQL alike; and as the codec unpacks the stored blocks."""
    from auditor.ingest.pipeline import import_file
    from auditor.services.meters import load_meter, set_multiplier
    from tests.ingest_helpers import day_rows, stored_rows, write_csv

    lines = day_rows(meter="RB-1", day="2025-03-29", kwh=4.0) + day_rows(meter="RB-1", day="2025-03-31", kwh=5.0)
    lines += [x.replace(",0.000", ",0.125") for x in day_rows(meter="RB-2", day="2025-03-30", lag=2.0)[:50]]
    lines[7] = lines[7] + ",E"  # an estimated interval
    lines = [x if x.count(",") == 5 else x + ",A" for x in lines]
    f = write_csv(tmp_path / "b.csv", lines, header="meter,start,kwh,kvarh_lag,kvarh_lead,flag")
    assert import_file(store, f).status == "imported"
    set_multiplier(store, "RB-1", 2.5)
    got = {m: load_meter(store, m).frame for m in ("RB-1", "RB-2")}
    assert got["RB-1"]["estimated"].sum() == 1
    pd.testing.assert_frame_equal(got["RB-1"], _expected_frame(lines, "RB-1", 2.5), check_index_type=False)
    pd.testing.assert_frame_equal(got["RB-2"], _expected_frame(lines, "RB-2"), check_index_type=False)
    ranged = load_meter(store, "RB-1", pd.Timestamp("2025-03-30").date(), pd.Timestamp("2025-04-01").date())
    pd.testing.assert_frame_equal(ranged.frame, got["RB-1"].loc["2025-03-30":], check_index_type=False)
    assert len(ranged.frame) == 96
    rows = stored_rows(store)
    assert len(rows) == 96 * 2 + 50 and {r[5] for r in rows} == {None}  # no received energy in the file


# --------------------------------------------------------------------------------------------
# the local calendar
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("tz", ["Europe/Berlin", "America/New_York", "Australia/Lord_Howe", "Asia/Kolkata", "UTC"])
def test_local_calendar_matches_pandas_fields_across_dst(tz):
    """pandas' own calendar accessors on the converted index are the reference."""
    from auditor.tariffs.engine import local_calendar

    idx = pd.date_range("2024-12-30", "2026-01-03", freq="15min", tz="UTC")
    cal = local_calendar(idx, tz, None)
    local = idx.tz_convert(tz)
    np.testing.assert_array_equal(cal.weekday, local.day_of_week.to_numpy())
    np.testing.assert_array_equal(cal.hour, local.hour.to_numpy())
    np.testing.assert_array_equal(cal.month, local.month.to_numpy())
    assert not cal.holiday.any()


def test_local_calendar_holidays_are_the_holidays_librarys():
    import holidays

    from auditor.tariffs.engine import local_calendar
    from auditor.tariffs.spec import Calendar

    idx = pd.date_range("2025-01-01", "2026-12-31", freq="60min", tz="UTC")
    cal = local_calendar(idx, "Europe/Berlin", Calendar(country="DE", subdivision="BY"))
    days = holidays.country_holidays("DE", subdiv="BY", years=[2025, 2026])
    expected = np.array([d in days for d in idx.tz_convert("Europe/Berlin").date])
    np.testing.assert_array_equal(cal.holiday, expected)


# --------------------------------------------------------------------------------------------
# what meters with the same interval index share in an audit
# --------------------------------------------------------------------------------------------
def test_meters_sharing_an_index_get_the_audit_computed_afresh():
    """Audits that reuse the shared per-index parts equal audits computed with nothing kept,
    for meters with the same index, another time zone, another tariff and a gap."""
    import auditor.audit as audit_module
    from auditor.audit import audit
    from auditor.services.audit import resolve_tariff
    from tests.audit_helpers import interval_frame

    tou, pf = resolve_tariff("harrowgate_industrial_tou"), resolve_tariff("millbrook_commercial_pf")
    rng = np.random.default_rng(5)
    base = interval_frame("2025-01-01", "2025-04-01", minutes=15)
    frames = []
    for _ in range(3):
        f = base.copy()
        f["kwh"] = rng.uniform(5, 50, len(f))
        f["kvarh_lag"] = f["kwh"] * rng.uniform(0.2, 0.9, len(f))
        frames.append(f)
    frames.append(frames[0].drop(frames[0].index[100:140]))  # a gap: its own index
    cases = [(f, t, tz) for f in frames for t in (tou, pf) for tz in ("Europe/Berlin", "America/Chicago")]
    kept = [audit(f, t, tz=tz, interval_minutes=15).to_dict() for f, t, tz in cases]
    assert len(audit_module._shared) > 0
    for (f, t, tz), got in zip(cases, kept, strict=True):
        audit_module._shared.clear()
        assert audit(f, t, tz=tz, interval_minutes=15).to_dict() == got
