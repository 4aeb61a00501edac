"""The day-per-row wide CSV reader."""
from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from auditor.errors import InputError
from auditor.ingest.frame import CANONICAL_COLUMNS, ReadOptions
from auditor.ingest.readers import wide_csv

BERLIN = "Europe/Berlin"
NEW_YORK = "America/New_York"


def utc(text: str) -> int:
    return int(pd.Timestamp(text).timestamp())


def header(n: int, unit: bool = True) -> str:
    return "meter,date,quantity," + ("unit," if unit else "") + ",".join(str(i) for i in range(1, n + 1))


def row(meter: str, day: str, quantity: str, values, unit: str | None = "default") -> str:
    if unit == "default":
        unit = "kvarh" if quantity.startswith("kvarh") else "kWh"
    cells = [meter, day, quantity] + ([unit] if unit is not None else []) + [repr(float(v)) for v in values]
    return ",".join(cells)


def write(tmp_path: Path, lines: list[str], name: str = "wide.csv") -> Path:
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def read(path: Path, timezone: str | None = BERLIN, chunk_rows: int = 250_000):
    out = wide_csv.read(path, ReadOptions(timezone=timezone, chunk_rows=chunk_rows))
    return out.info, pd.concat(list(out.chunks), ignore_index=True)


def expected_starts(day: str, timezone: str, minutes: int) -> np.ndarray:
    """Interval starts of a local day, computed independently by pandas' tz-aware date_range."""
    begin = pd.Timestamp(day, tz=timezone)
    end = pd.Timestamp(pd.Timestamp(day) + pd.Timedelta(days=1), tz=timezone)
    rng = pd.date_range(begin, end, freq=f"{minutes}min", inclusive="left")
    return rng.tz_convert("UTC").as_unit("s").asi8


# ---------------------------------------------------------------- good files

def test_berlin_normal_spring_and_autumn_days(tmp_path):
    # EU clocks change on the last Sunday of March / October at 01:00 UTC (common practice):
    # 2024-03-31 has 23 hours (92 quarter hours), 2024-10-27 has 25 hours (100).
    days = {"2024-03-30": 96, "2024-03-31": 92, "2024-10-27": 100}
    lines = [header(100)]
    for day, n in days.items():
        lines.append(row("PLANT-7", day, "kwh", np.arange(n) + 1.0))
        lines.append(row("PLANT-7", day, "kvarh_lag", np.arange(n) * 0.5))
    info, df = read(write(tmp_path, lines))
    assert info.interval_minutes == 15
    assert tuple(df.columns) == CANONICAL_COLUMNS
    assert len(df) == 96 + 92 + 100
    spring = df.iloc[96:188]
    autumn = df.iloc[188:]
    assert spring["start"].iloc[0] == utc("2024-03-30T23:00Z")  # local midnight CET
    # position 9 is the first quarter hour after the jump: 03:00 CEST = 01:00 UTC
    assert spring["start"].iloc[8] == utc("2024-03-31T01:00Z")
    assert spring["start"].iloc[-1] == utc("2024-03-31T21:45Z")  # 23:45 CEST
    assert autumn["start"].iloc[0] == utc("2024-10-26T22:00Z")  # local midnight CEST
    assert autumn["start"].iloc[-1] == utc("2024-10-27T22:45Z")  # 23:45 CET
    for day, part in (("2024-03-30", df.iloc[:96]), ("2024-03-31", spring), ("2024-10-27", autumn)):
        assert_array_equal(part["start"].to_numpy(), expected_starts(day, BERLIN, 15))
    assert_allclose(autumn["kwh"].to_numpy(), np.arange(100) + 1.0)
    assert_allclose(spring["kvarh_lag"].to_numpy(), np.arange(92) * 0.5)
    assert_array_equal(df["line"].to_numpy(), np.repeat([2, 4, 6], [96, 92, 100]))
    assert (df["meter"] == "PLANT-7").all()
    assert not df["estimated"].any()
    assert df["kwh_received"].isna().all()


def test_new_york_dst_days(tmp_path):
    # US clocks change on the second Sunday of March / first Sunday of November at 02:00 local
    # (common practice): 2024-03-10 has 23 hours, 2024-11-03 has 25.
    lines = [header(100, unit=False),
             row("NY-1", "2024-03-10", "kwh", np.full(92, 2.0), None),
             row("NY-1", "2024-11-03", "kwh", np.full(100, 3.0), None)]
    info, df = read(write(tmp_path, lines), timezone=NEW_YORK)
    assert len(df) == 192
    assert df["start"].iloc[0] == utc("2024-03-10T05:00Z")  # midnight EST
    assert df["start"].iloc[8] == utc("2024-03-10T07:00Z")  # 03:00 EDT, right after the jump
    assert df["start"].iloc[91] == utc("2024-03-11T03:45Z")  # 23:45 EDT
    assert df["start"].iloc[92] == utc("2024-11-03T04:00Z")  # midnight EDT
    assert df["start"].iloc[-1] == utc("2024-11-04T04:45Z")  # 23:45 EST
    assert_array_equal(df["start"].to_numpy()[92:], expected_starts("2024-11-03", NEW_YORK, 15))
    assert info.source_units == {"kwh": "kWh"}
    assert_allclose(df["kvarh_lag"].to_numpy(), 0.0)


@pytest.mark.parametrize("minutes", [5, 15, 30, 60])
def test_interval_length_from_the_header(tmp_path, minutes):
    n = 1440 // minutes
    lines = [header(n), row("M", "2024-06-01", "kwh", np.ones(n))]
    info, df = read(write(tmp_path, lines))
    assert info.interval_minutes == minutes
    assert_array_equal(np.diff(df["start"].to_numpy()), np.full(n - 1, minutes * 60))
    assert df["start"].iloc[0] == utc("2024-05-31T22:00Z")


def test_a_96_column_header_holds_the_spring_day(tmp_path):
    lines = [header(96), row("M", "2024-03-31", "kwh", np.ones(92))]
    info, df = read(write(tmp_path, lines))
    assert info.interval_minutes == 15
    assert len(df) == 92


def test_units_are_converted(tmp_path):
    lines = [header(24),
             row("M", "2024-06-01", "kwh", np.full(24, 1500.0), "Wh"),
             row("M", "2024-06-01", "kvarh_lag", np.full(24, 250.0), "varh"),
             row("M", "2024-06-01", "kvarh_lead", np.full(24, 0.002), "Mvarh"),
             row("M", "2024-06-01", "kwh_received", np.full(24, 0.25), "kWh")]
    info, df = read(write(tmp_path, lines))
    assert info.interval_minutes == 60
    assert_allclose(df["kwh"], 1.5)
    assert_allclose(df["kvarh_lag"], 0.25)
    assert_allclose(df["kvarh_lead"], 2.0)
    assert_allclose(df["kwh_received"], 0.25)
    assert info.source_units == {"kwh": "Wh", "kvarh_lag": "varh", "kvarh_lead": "Mvarh", "kwh_received": "kWh"}
    assert info.quantities == ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received")
    assert not info.warnings


def test_rows_of_one_day_are_joined_whatever_their_order(tmp_path):
    lines = [header(24, unit=False),
             row("B", "2024-06-02", "kvarh_lag", np.arange(24) + 100.0, None),
             row("A", "2024-06-01", "kvarh_lag", np.arange(24) + 200.0, None),
             row("B", "2024-06-02", "kwh", np.arange(24) + 300.0, None),
             row("A", "2024-06-01", "kwh", np.arange(24) + 400.0, None)]
    info, df = read(write(tmp_path, lines))
    a = df[df["meter"] == "A"]
    b = df[df["meter"] == "B"]
    assert_allclose(a["kwh"], np.arange(24) + 400.0)
    assert_allclose(a["kvarh_lag"], np.arange(24) + 200.0)
    assert_allclose(b["kwh"], np.arange(24) + 300.0)
    assert_allclose(b["kvarh_lag"], np.arange(24) + 100.0)
    assert (a["line"] == 5).all() and (b["line"] == 4).all()  # the line of the kwh row
    assert b["start"].iloc[0] == utc("2024-06-01T22:00Z")
    assert info.quantities == ("kwh", "kvarh_lag")
    assert [w.message for w in info.warnings] == ["the file has no kvarh_lead rows; kvarh_lead is taken as 0"]


def test_chunks_concatenate_to_the_whole(tmp_path):
    lines = [header(24)] + [row("M", f"2024-06-{d:02d}", "kwh", np.arange(24) + d) for d in range(1, 8)]
    path = write(tmp_path, lines)
    _, whole = read(path)
    out = wide_csv.read(path, ReadOptions(timezone=BERLIN, chunk_rows=50))
    chunks = list(out.chunks)
    assert [len(c) for c in chunks] == [50, 50, 50, 18]
    pd.testing.assert_frame_equal(pd.concat(chunks, ignore_index=True), whole)


def test_blank_lines_and_header_case_are_tolerated(tmp_path):
    lines = ["Meter,Date,Quantity,Unit," + ",".join(str(i) for i in range(1, 25)),
             row("M", "2024-06-01", "KWH", np.ones(24), "wh"), "",
             row("M", "2024-06-02", "kwh", np.ones(24), "Wh")]
    info, df = read(write(tmp_path, lines))
    assert_allclose(df["kwh"], 0.001)
    assert_array_equal(np.unique(df["line"]), [2, 4])


def test_sniff():
    assert wide_csv.sniff(Path("x"), header(96) + "\n")
    assert wide_csv.sniff(Path("x"), "\ufeffMeter, Date ,Quantity,1,2\n")
    assert not wide_csv.sniff(Path("x"), "meter,start,kwh,kvarh_lag,kvarh_lead\n")
    assert not wide_csv.sniff(Path("x"), "date,meter,quantity,1\n")


# ---------------------------------------------------------------- bad files

def one_problem(path: Path, timezone: str | None = BERLIN):
    with pytest.raises(InputError) as err:
        read(path, timezone)
    assert err.value.file == str(path)
    return err.value.problems[0], str(err.value)


def test_wrong_value_count_on_the_spring_day(tmp_path):
    lines = [header(96), row("M", "2024-03-30", "kwh", np.ones(96)), row("M", "2024-03-31", "kwh", np.ones(96))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (3, "date")
    assert "2024-03-31 has 92 intervals" in message and "96 values" in message
    assert "line 3" in message


def test_autumn_day_needs_100_columns(tmp_path):
    lines = [header(96), row("M", "2024-10-27", "kwh", np.ones(96))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (2, "date")
    assert "100 intervals" in message and "only 96 interval columns" in message


def test_short_row_on_the_autumn_day(tmp_path):
    lines = [header(100), row("M", "2024-10-26", "kwh", np.ones(96)), row("M", "2024-10-27", "kwh", np.ones(96))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (3, "date")
    assert "2024-10-27 has 100 intervals" in message


def test_gap_inside_a_day(tmp_path):
    cells = [repr(1.0)] * 25  # 24 values, as the day needs, but one of them past its end
    cells[10] = ""
    lines = [header(25, unit=False), "M,2024-06-01,kwh," + ",".join(cells)]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (2, "11")


@pytest.mark.parametrize("cell", ["abc", "1,5x", "nan", "inf", "--3"])
def test_non_numeric_cell(tmp_path, cell):
    values = [repr(1.0)] * 24
    values[16] = cell.replace(",", "")
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)),
             "M,2024-06-02,kwh,kWh," + ",".join(values)]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (3, "17")
    assert "not a number" in message


def test_unknown_quantity(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)), row("M", "2024-06-01", "kvah", np.ones(24))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (3, "quantity")
    assert "'kvah'" in message and "kvarh_lag" in message


@pytest.mark.parametrize("quantity,unit", [("kwh", "kW"), ("kwh", "varh"), ("kvarh_lag", "kWh")])
def test_bad_unit(tmp_path, quantity, unit):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)),
             row("M", "2024-06-02", "kwh", np.ones(24)), row("M", "2024-06-02", quantity, np.ones(24), unit)]
    if quantity == "kwh":
        lines.pop(2)
    problem, message = one_problem(write(tmp_path, lines))
    assert problem.column == "unit"
    assert problem.line == len(lines)
    assert repr(unit) in message


def test_missing_timezone(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24))]
    problem, message = one_problem(write(tmp_path, lines), timezone=None)
    assert (problem.line, problem.column) == (2, "date")
    assert "time zone" in message and "--timezone" in problem.cli_hint


def test_unknown_timezone(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24))]
    _, message = one_problem(write(tmp_path, lines), timezone="Europe/Atlantis")
    assert "unknown time zone" in message


def test_bad_date(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)), row("M", "01.06.2024", "kwh", np.ones(24))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (3, "date")
    assert "YYYY-MM-DD" in message


@pytest.mark.parametrize("n", [95, 97, 1, 144])
def test_header_with_no_interval_length(tmp_path, n):
    lines = [header(n), "M,2024-06-01,kwh,kWh,1"]
    problem, message = one_problem(write(tmp_path, lines))
    assert problem.line == 1
    assert f"{n} interval columns" in message


def test_misnumbered_interval_columns(tmp_path):
    lines = ["meter,date,quantity,1,2,4", "M,2024-06-01,kwh,1,1,1"]
    problem, _ = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (1, "4")


def test_wrong_leading_columns(tmp_path):
    lines = ["meter,day,quantity,1", "M,2024-06-01,kwh,1"]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (1, "date")


def test_duplicate_quantity_row(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)), row("M", "2024-06-01", "kvarh_lag", np.ones(24)),
             row("M", "2024-06-01", "kwh", np.ones(24))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (4, "quantity")
    assert "first on line 2" in message


def test_quantity_missing_on_one_day(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)), row("M", "2024-06-01", "kvarh_lag", np.ones(24)),
             row("M", "2024-06-02", "kwh", np.ones(24))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (4, "quantity")
    assert "no kvarh_lag row for 2024-06-02" in message


def test_day_without_kwh(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)), row("M", "2024-06-02", "kvarh_lag", np.ones(24)),
             row("M", "2024-06-01", "kvarh_lag", np.ones(24))]
    problem, message = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (3, "quantity")
    assert "no kwh row for 2024-06-02" in message


def test_empty_meter(tmp_path):
    lines = [header(24), row("", "2024-06-01", "kwh", np.ones(24))]
    problem, _ = one_problem(write(tmp_path, lines))
    assert (problem.line, problem.column) == (2, "meter")


def test_too_many_fields(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(25))]
    problem, message = one_problem(write(tmp_path, lines))
    assert problem.line == 2
    assert "more fields than the 28 columns" in message


def test_trailing_comma_is_harmless(tmp_path):
    lines = [header(24), row("M", "2024-06-01", "kwh", np.ones(24)) + ","]
    _, df = read(write(tmp_path, lines))
    assert_allclose(df["kwh"], 1.0)


# ---------------------------------------------------------------- round trip

# Dates that include the DST changes of both hemispheres and zones.
DAYS = [date(2024, 3, 10), date(2024, 3, 30), date(2024, 4, 6), date(2024, 6, 15), date(2024, 10, 5),
        date(2024, 10, 26), date(2024, 11, 2), date(2024, 12, 31)]
ZONES = [BERLIN, NEW_YORK, "Australia/Sydney", "UTC", "Asia/Kolkata"]
UNITS = {"kwh": {"Wh": 1e-3, "kWh": 1.0, "MWh": 1e3}, "kwh_received": {"Wh": 1e-3, "kWh": 1.0},
         "kvarh_lag": {"varh": 1e-3, "kvarh": 1.0}, "kvarh_lead": {"varh": 1e-3, "kvarh": 1.0, "Mvarh": 1e3}}


@st.composite
def canonical_days(draw):
    zone = draw(st.sampled_from(ZONES))
    minutes = draw(st.sampled_from([15, 30, 60]))
    first = draw(st.sampled_from(DAYS))
    n_days = draw(st.integers(1, 3))
    meters = draw(st.lists(st.from_regex(r"[A-Z][A-Z0-9\-]{0,8}", fullmatch=True), min_size=1, max_size=2, unique=True))
    quantities = ["kwh"] + draw(st.lists(st.sampled_from(["kvarh_lag", "kvarh_lead", "kwh_received"]), unique=True))
    units = {q: draw(st.sampled_from(sorted(UNITS[q]))) for q in quantities}
    days = [(first + timedelta(days=i)).isoformat() for i in range(n_days)]
    rows = []
    for m in meters:
        for d in days:
            starts = expected_starts(d, zone, minutes)
            values = {q: np.array(draw(st.lists(st.floats(0, 1e5, allow_nan=False), min_size=len(starts),
                                                max_size=len(starts)))) for q in quantities}
            rows.append((m, d, starts, values))
    return zone, minutes, units, rows


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                  HealthCheck.too_slow, HealthCheck.data_too_large])
@given(case=canonical_days())
def test_round_trip(tmp_path, case):
    zone, minutes, units, rows = case
    width = 1500 // minutes  # room for a 25-hour day
    lines = [header(width)]
    for m, d, _, values in rows:
        for q, v in values.items():
            lines.append(row(m, d, q, v / UNITS[q][units[q]], units[q]))
    info, df = read(write(tmp_path, lines), timezone=zone)
    assert info.interval_minutes == minutes
    expected = pd.concat([pd.DataFrame({"meter": m, "start": s, **v}) for m, _, s, v in rows])
    expected = expected.sort_values(["meter", "start"], kind="stable").reset_index(drop=True)
    assert_array_equal(df["meter"].to_numpy(dtype=str), expected["meter"].to_numpy(dtype=str))
    assert_array_equal(df["start"].to_numpy(), expected["start"].to_numpy())
    for q in ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received"):
        if q in expected:
            assert_allclose(df[q].to_numpy(), expected[q].to_numpy(), rtol=1e-12, atol=1e-12)
        elif q == "kwh_received":
            assert df[q].isna().all()
        else:
            assert_allclose(df[q].to_numpy(), 0.0)
