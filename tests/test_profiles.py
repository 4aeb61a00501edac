"""Mapping profiles: loading and validation, and the profile CSV reader."""
from __future__ import annotations

import copy
import json
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from auditor.errors import InputError, ProfileError
from auditor.ingest.frame import CANONICAL_COLUMNS, ReadOptions
from auditor.ingest.profile import load_profile
from auditor.ingest.readers import profile_csv

ROOT = Path(__file__).resolve().parent.parent
PROFILES = ROOT / "auditor" / "profiles"
DATA = Path(__file__).resolve().parent / "data"


def utc(text: str) -> int:
    return int(pd.Timestamp(text).timestamp())


def to_toml(doc: dict, prefix: str = "") -> str:
    """A small TOML writer for test profiles (JSON strings are valid TOML basic strings)."""
    def value(v):
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return json.dumps(v) if isinstance(v, str) else repr(v)

    plain = [f"{k} = {value(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    text = (f"[{prefix}]\n" if prefix and plain else "") + "".join(line + "\n" for line in plain)
    for k, v in doc.items():
        if isinstance(v, dict):
            text += "\n" + to_toml(v, f"{prefix}.{k}" if prefix else k)
    return text


BASE = {
    "name": "test",
    "file": {"delimiter": ";", "decimal": ","},
    "meter": {"column": "Meter"},
    "time": {"column": "End", "format": "%d.%m.%Y %H:%M", "label": "end", "timezone": "Europe/Berlin",
             "interval_minutes": 15},
    "quantities": {"kwh": {"column": "P", "unit": "Wh"}},
}


def profile_file(tmp_path: Path, doc: dict, name: str = "p.toml") -> Path:
    path = tmp_path / name
    path.write_text(to_toml(doc), encoding="utf-8")
    return path


def edited(changes: dict[str, object]) -> dict:
    """BASE with dotted keys set (a value of None deletes the key)."""
    doc = copy.deepcopy(BASE)
    for dotted, v in changes.items():
        *parents, last = dotted.split(".")
        table = doc
        for p in parents:
            table = table.setdefault(p, {})
        if v is None:
            table.pop(last, None)
        else:
            table[last] = v
    return doc


def read(path: Path, profile, timezone: str | None = None, chunk_rows: int = 250_000):
    out = profile_csv.read(path, ReadOptions(timezone=timezone, profile=profile, chunk_rows=chunk_rows))
    return out.info, pd.concat(list(out.chunks), ignore_index=True)


# ---------------------------------------------------------------- the shipped examples

def test_semicolon_example_profile_loads():
    p = load_profile(PROFILES / "semicolon_wh_end.toml")
    assert (p.delimiter, p.decimal, p.thousands, p.encoding) == (";", ",", ".", "cp1252")
    assert (p.header_line, p.skip_after_header, p.label, p.interval_minutes) == (3, 1, "end", 15)
    assert p.multiplier == 20
    kwh = p.quantity("kwh")
    assert (kwh.unit, kwh.column) == ("Wh", "Active import")
    assert_allclose(kwh.factor, 20 * 1e-3)
    assert p.estimated_values == ("e",)


def test_semicolon_example_reads_the_spring_day():
    p = load_profile(PROFILES / "semicolon_wh_end.toml")
    info, df = read(DATA / "semicolon_wh_end.csv", p)
    assert tuple(df.columns) == CANONICAL_COLUMNS
    assert (info.format, info.label, info.interval_minutes) == ("profile_csv", "start", 15)
    assert info.source_units == {"kwh": "Wh", "kvarh_lag": "varh", "kvarh_lead": "varh"}
    # First label 30.03.2024 23:45 CET ends 22:45 UTC, so the interval starts at 22:30 UTC;
    # "24:00" closes the 30th; after 01:45 CET the next label is 03:00 CEST (= 01:00 UTC), the
    # end of the 00:45-01:00 UTC interval: the grid runs on without a hole or an overlap.
    assert_array_equal(df["start"].to_numpy(), utc("2024-03-30T22:30Z") + 900 * np.arange(12))
    assert_array_equal(df["line"].to_numpy(), np.arange(5, 17))
    # 1.234,5 Wh secondary x CT ratio 20 = 24.69 kWh
    assert_allclose(df["kwh"].to_numpy()[:3], [24.69, 23.96, 23.005])
    assert_allclose(df["kvarh_lag"].iloc[0], 612.0 * 20 / 1000)
    assert_allclose(df["kvarh_lead"].to_numpy()[6:8], [0.25, 0.30])
    assert_array_equal(np.flatnonzero(df["estimated"].to_numpy()), [4])
    assert (df["meter"] == "HM-01").all()
    assert df["kwh_received"].isna().all()


def test_logger_example_reads_the_repeated_autumn_hour():
    p = load_profile(PROFILES / "logger_date_time_varh.toml")
    info, df = read(DATA / "logger_date_time_varh.csv", p)
    # 2024-11-03 in New York: 01:00 and 01:30 occur twice (EDT, then EST), resolved by row order.
    assert_array_equal(df["start"].to_numpy(), utc("2024-11-03T03:00Z") + 1800 * np.arange(10))
    assert info.interval_minutes == 30
    assert info.quantities == ("kwh", "kvarh_lag", "kvarh_lead")
    assert (df["meter"] == "LAKESIDE-PUMPS").all()
    # 0.412 kWh secondary x 1000 (VT 100 x CT 10) = 412 kWh; 215 varh x 1000 = 215 kvarh
    assert_allclose(df["kwh"].iloc[0], 412.0)
    assert_allclose(df["kvarh_lag"].to_numpy()[:4], [215.0, 190.0, 0.0, 0.0])
    assert_allclose(df["kvarh_lead"].to_numpy()[:4], [0.0, 0.0, 40.0, 55.5])
    assert_array_equal(np.flatnonzero(df["estimated"].to_numpy()), [5])


def test_explicit_timezone_overrides_the_profile():
    p = load_profile(PROFILES / "logger_date_time_varh.toml")
    _, df = read(DATA / "logger_date_time_varh.csv", p, timezone="America/Chicago")
    assert df["start"].iloc[0] == utc("2024-11-03T04:00Z")  # 23:00 CDT


# ---------------------------------------------------------------- profile validation

@pytest.mark.parametrize("changes,key,fragment", [
    ({"colour": "blue"}, "colour", "unknown key"),
    ({"time.labels": "end"}, "time.labels", "allowed here"),
    ({"quantities.kwh.scale": 2}, "quantities.kwh.scale", "unknown key"),
    ({"quantities.kvah": {"column": "S", "unit": "kVAh"}}, "quantities.kvah", "unknown key"),
    ({"quantities.kwh.unit": "kW"}, "quantities.kwh.unit", "Wh, kWh, MWh"),
    ({"quantities.kwh.unit": "varh"}, "quantities.kwh.unit", "not a unit of kwh"),
    ({"quantities.kvarh_lag": {"column": "Q", "unit": "kWh"}}, "quantities.kvarh_lag.unit", "varh, kvarh, Mvarh"),
    ({"quantities.kwh.unit": None}, "quantities.kwh.unit", "missing"),
    ({"quantities.kwh.column": None}, "quantities.kwh.column", "missing"),
    ({"quantities.kwh.column": 0}, "quantities.kwh.column", "count from 1"),
    ({"quantities.kwh.multiplier": -20}, "quantities.kwh.multiplier", "> 0"),
    ({"quantities.kwh.invert": "yes"}, "quantities.kwh.invert", "true or false"),
    ({"quantities.kwh": None, "quantities.kvarh_lag": {"column": "Q", "unit": "varh"}}, "quantities.kwh", "missing"),
    ({"quantities.kwh_net": {"column": "N", "unit": "kWh"}}, "quantities.kwh", "one or the other"),
    ({"time.interval_minutes": 10}, "time.interval_minutes", "5, 15, 30, 60"),
    ({"time.interval_minutes": 15.0}, "time.interval_minutes", "5, 15, 30, 60"),
    ({"time.interval_minutes": None}, "time.interval_minutes", "missing"),
    ({"time.label": "middle"}, "time.label", "'start', 'end'"),
    ({"time.timezone": "Mars/Olympus"}, "time.timezone", "IANA"),
    ({"time.format": "%d.%m.%Y"}, "time.format", "full date and time"),
    ({"time.format": "%H:%M"}, "time.format", "full date and time"),
    ({"time.format": "%Y-%m-%d %H:%M%z"}, "time.timezone", "offset"),
    ({"time.timezone": "offset"}, "time.format", "%z"),
    ({"time.column": None}, "time.column", "missing"),
    ({"time.column": None, "time.date_column": "D"}, "time.time_column", "missing"),
    ({"time.date_column": "D", "time.time_column": "T"}, "time.column", "not both"),
    ({"time": None}, "time", "missing"),
    ({"meter": None}, "meter", "missing"),
    ({"meter.id": "M-1"}, "meter.column", "exactly one"),
    ({"meter.column": None, "meter.multiplier": 2}, "meter.column", "exactly one"),
    ({"meter.multiplier": 0}, "meter.multiplier", "> 0"),
    ({"meter.multiplier": "20"}, "meter.multiplier", "> 0"),
    ({"file.delimiter": ";;"}, "file.delimiter", "one character"),
    ({"file.decimal": ";"}, "file.decimal", "'.', ','"),
    ({"file.delimiter": ","}, "file.decimal", "also the delimiter"),
    ({"file.thousands": ","}, "file.thousands", "decimal separator"),
    ({"file.encoding": "klingon-8"}, "file.encoding", "unknown text encoding"),
    ({"file.header_line": -1}, "file.header_line", "≥ 0"),
    ({"file.header_line": 0}, "meter.column", "by position"),
    ({"file": "semicolon"}, "file", "must be a table"),
    ({"estimated": {"column": "S"}}, "estimated.values", "missing"),
    ({"estimated": {"column": "S", "values": []}}, "estimated.values", "non-empty"),
    ({"estimated": {"values": ["E"]}}, "estimated.column", "missing"),
])
def test_bad_profile_names_the_key(tmp_path, changes, key, fragment):
    path = profile_file(tmp_path, edited(changes))
    with pytest.raises(ProfileError) as err:
        load_profile(path)
    assert err.value.key == key
    assert err.value.file == str(path)
    assert fragment in str(err.value)
    assert repr(key) in str(err.value)


def test_bad_toml_syntax(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[time\ninterval_minutes = 15\n", encoding="utf-8")
    with pytest.raises(ProfileError) as err:
        load_profile(path)
    assert err.value.key == "(syntax)"
    assert "line 1" in str(err.value)


def test_missing_profile_file(tmp_path):
    with pytest.raises(ProfileError, match="cannot read"):
        load_profile(tmp_path / "absent.toml")


def test_good_profile_defaults(tmp_path):
    p = load_profile(profile_file(tmp_path, edited({"file": None, "time.format": None, "time.label": None})))
    assert (p.delimiter, p.decimal, p.encoding, p.header_line, p.timestamp_format, p.label) == \
        (",", ".", "utf-8", 1, "iso", "start")
    assert p.quantity("kvarh_lag") is None


# ---------------------------------------------------------------- reading through a profile

def write_csv(tmp_path: Path, text: str, name: str = "data.csv", encoding: str = "utf-8") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding=encoding)
    return path


GOOD = "Meter;End;P\nA;01.06.2024 00:15;1000,0\nA;01.06.2024 00:30;2000,5\n"


def input_problem(path: Path, doc: dict, timezone: str | None = None):
    profile = load_profile(profile_file(path.parent, doc))
    with pytest.raises(InputError) as err:
        read(path, profile, timezone)
    assert err.value.file == str(path)
    return err.value.problems[0], str(err.value)


def test_plain_profile_read(tmp_path):
    info, df = read(write_csv(tmp_path, GOOD), load_profile(profile_file(tmp_path, BASE)))
    assert_array_equal(df["start"].to_numpy(), [utc("2024-05-31T22:00Z"), utc("2024-05-31T22:15Z")])
    assert_allclose(df["kwh"].to_numpy(), [1.0, 2.0005])
    assert_allclose(df["kvarh_lag"].to_numpy(), 0.0)
    assert info.quantities == ("kwh",)
    assert len(info.warnings) == 2


def test_missing_timezone(tmp_path):
    problem, message = input_problem(write_csv(tmp_path, GOOD), edited({"time.timezone": None}))
    assert (problem.line, problem.column) == (2, "End")
    assert "time zone" in message and "--timezone" in problem.cli_hint


def test_timestamp_not_in_the_format(tmp_path):
    text = GOOD + "A;2024-06-01 00:45;3,0\n"
    problem, message = input_problem(write_csv(tmp_path, text), BASE)
    assert (problem.line, problem.column) == (4, "End")
    assert "'%d.%m.%Y %H:%M'" in message


def test_time_that_does_not_exist_locally(tmp_path):
    text = "Meter;End;P\nA;31.03.2024 01:45;1\nA;31.03.2024 02:00;1\nA;31.03.2024 02:15;1\n"
    problem, message = input_problem(write_csv(tmp_path, text), BASE)
    assert (problem.line, problem.column) == (3, "End")
    assert "does not exist" in message


@pytest.mark.parametrize("cell", ["abc", "1,2,3", "", "nan"])
def test_bad_number(tmp_path, cell):
    text = GOOD + f"A;01.06.2024 00:45;{cell}\n"
    problem, _ = input_problem(write_csv(tmp_path, text), BASE)
    assert (problem.line, problem.column) == (4, "P")


def test_column_missing_from_the_header(tmp_path):
    problem, message = input_problem(write_csv(tmp_path, GOOD), edited({"quantities.kvarh_lag": {"column": "Q", "unit": "varh"}}))
    assert (problem.line, problem.column) == (1, "Q")
    assert "quantities.kvarh_lag.column" in message


def test_wrong_encoding(tmp_path):
    path = write_csv(tmp_path, "Meter;End;P\nSüd;01.06.2024 00:15;1\n", encoding="cp1252")
    _, message = input_problem(path, BASE)
    assert "file.encoding" in message


def test_empty_meter(tmp_path):
    problem, _ = input_problem(write_csv(tmp_path, GOOD + ";01.06.2024 00:45;1\n"), BASE)
    assert (problem.line, problem.column) == (4, "Meter")


def test_header_line_zero_positions_and_multipliers(tmp_path):
    doc = {"file": {"header_line": 0}, "meter": {"column": 1, "multiplier": 40},
           "time": {"column": 2, "format": "iso", "timezone": "offset", "interval_minutes": 60, "label": "end"},
           "quantities": {"kwh": {"column": 3, "unit": "MWh", "multiplier": 0.5},
                          "kvarh_net": {"column": 4, "unit": "kvarh", "invert": True}}}
    text = "X,2024-06-01T01:00+02:00,0.002,3\nX,2024-06-01T02:00+02:00,0.004,-2\n"
    info, df = read(write_csv(tmp_path, text), load_profile(profile_file(tmp_path, doc)))
    assert_array_equal(df["start"].to_numpy(), [utc("2024-05-31T22:00Z"), utc("2024-05-31T23:00Z")])
    assert_array_equal(df["line"].to_numpy(), [1, 2])
    assert_allclose(df["kwh"].to_numpy(), [0.002 * 1000 * 40 * 0.5, 0.004 * 1000 * 40 * 0.5])
    # inverted: +3 in the file is leading, -2 lagging
    assert_allclose(df["kvarh_lead"].to_numpy(), [120.0, 0.0])
    assert_allclose(df["kvarh_lag"].to_numpy(), [0.0, 80.0])
    assert df["meter"].iloc[0] == "X"


def test_strptime_with_offsets(tmp_path):
    doc = edited({"time.format": "%Y-%m-%d %H:%M%z", "time.timezone": "offset", "time.label": "start"})
    text = "Meter;End;P\nA;2024-10-27 02:30+0200;1\nA;2024-10-27 02:30+0100;2\n"
    _, df = read(write_csv(tmp_path, text), load_profile(profile_file(tmp_path, doc)))
    assert_array_equal(df["start"].to_numpy(), [utc("2024-10-27T00:30Z"), utc("2024-10-27T01:30Z")])


def test_kwh_net_split(tmp_path):
    doc = edited({"quantities.kwh": None, "quantities.kwh_net": {"column": "P", "unit": "kWh"}})
    text = "Meter;End;P\nA;01.06.2024 00:15;5\nA;01.06.2024 00:30;-1,5\n"
    info, df = read(write_csv(tmp_path, text), load_profile(profile_file(tmp_path, doc)))
    assert_allclose(df["kwh"].to_numpy(), [5.0, 0.0])
    assert_allclose(df["kwh_received"].to_numpy(), [0.0, 1.5])
    assert info.quantities == ("kwh", "kwh_received")


def test_chunks_concatenate_to_the_whole():
    p = load_profile(PROFILES / "semicolon_wh_end.toml")
    _, whole = read(DATA / "semicolon_wh_end.csv", p)
    out = profile_csv.read(DATA / "semicolon_wh_end.csv", ReadOptions(profile=p, chunk_rows=5))
    chunks = list(out.chunks)
    assert [len(c) for c in chunks] == [5, 5, 2]
    pd.testing.assert_frame_equal(pd.concat(chunks, ignore_index=True), whole)


def test_sniff_never_claims_a_file():
    assert not profile_csv.sniff(DATA / "semicolon_wh_end.csv", "Meter;Period end;Active import\n")


# ---------------------------------------------------------------- round trips

DAYS = [date(2024, 3, 30), date(2024, 3, 31), date(2024, 6, 15), date(2024, 10, 26), date(2024, 10, 27),
        date(2024, 11, 2), date(2024, 11, 3), date(2024, 3, 9), date(2024, 3, 10)]


def local_day_starts(first: date, n_days: int, zone: str, minutes: int) -> np.ndarray:
    begin = pd.Timestamp(first.isoformat(), tz=zone)
    end = pd.Timestamp((first + timedelta(days=n_days)).isoformat(), tz=zone)
    return pd.date_range(begin, end, freq=f"{minutes}min", inclusive="left").as_unit("s").asi8


def grouped(n: int) -> str:
    """n thousandths as text with "." grouping and a decimal comma: 1234567 -> "1.234,567"."""
    return f"{n // 1000:,}".replace(",", ".") + "," + f"{n % 1000:03d}"


@st.composite
def semicolon_case(draw):
    meters = draw(st.lists(st.from_regex(r"[A-Z]{2}-[0-9]{2}", fullmatch=True), min_size=1, max_size=3, unique=True))
    first = draw(st.sampled_from(DAYS))
    n_days = draw(st.integers(1, 2))
    starts = local_day_starts(first, n_days, "Europe/Berlin", 15)
    n = len(starts)
    rows = []
    for m in meters:
        ints = [np.array(draw(st.lists(st.integers(0, 10**9), min_size=n, max_size=n))) for _ in range(3)]
        est = np.array(draw(st.lists(st.booleans(), min_size=n, max_size=n)))
        rows.append((m, ints, est))
    return starts, rows, draw(st.booleans())


@settings(max_examples=30, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow, HealthCheck.data_too_large])
@given(case=semicolon_case())
def test_round_trip_semicolon_profile(tmp_path, case):
    starts, rows, use_24 = case
    profile = load_profile(PROFILES / "semicolon_wh_end.toml")
    end = pd.DatetimeIndex(pd.to_datetime(starts + 900, unit="s", utc=True)).tz_convert("Europe/Berlin")
    labels = pd.Series(end.strftime("%d.%m.%Y %H:%M"))
    if use_24:
        midnight = np.asarray(end.hour == 0) & np.asarray(end.minute == 0)
        before = pd.Series((end - pd.Timedelta(minutes=1)).strftime("%d.%m.%Y"))
        labels[midnight] = before[midnight] + " 24:00"
    text = "Export;Werk Süd\r\nCreated;today\r\nMeter;Period end;Active import;Reactive Q1;Reactive Q4;Status\r\n;;Wh;varh;varh;\r\n"
    expected = []
    for m, ints, est in rows:
        cells = [[grouped(int(v)) for v in col] for col in ints]
        status = np.where(est, "E", "OK")
        text += "".join(f"{m};{labels[i]};{cells[0][i]};{cells[1][i]};{cells[2][i]};{status[i]}\r\n"
                        for i in range(len(starts)))
        # canonical: file Wh (thousandths) x 1e-3 (Wh -> kWh) x 20 (CT ratio)
        expected.append(pd.DataFrame({"meter": m, "start": starts, "kwh": ints[0] / 1000 * 20e-3,
                                      "kvarh_lag": ints[1] / 1000 * 20e-3, "kvarh_lead": ints[2] / 1000 * 20e-3,
                                      "estimated": est}))
    path = tmp_path / "rt.csv"
    path.write_bytes(text.encode("cp1252"))
    _, df = read(path, profile, chunk_rows=10_000)
    exp = pd.concat(expected, ignore_index=True)
    assert_array_equal(df["meter"].to_numpy(dtype=str), exp["meter"].to_numpy(dtype=str))
    assert_array_equal(df["start"].to_numpy(), exp["start"].to_numpy())
    for q in ("kwh", "kvarh_lag", "kvarh_lead"):
        assert_allclose(df[q].to_numpy(), exp[q].to_numpy(), rtol=1e-12)
    assert_array_equal(df["estimated"].to_numpy(), exp["estimated"].to_numpy())


@st.composite
def logger_case(draw):
    first = draw(st.sampled_from(DAYS))
    starts = local_day_starts(first, draw(st.integers(1, 3)), "America/New_York", 30)
    n = len(starts)
    kwh = np.array(draw(st.lists(st.integers(0, 10**7), min_size=n, max_size=n)))
    net = np.array(draw(st.lists(st.integers(-10**6, 10**6), min_size=n, max_size=n)))
    est = np.array(draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    return starts, kwh, net, est


@settings(max_examples=30, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(case=logger_case())
def test_round_trip_logger_profile(tmp_path, case):
    starts, kwh_ints, net, est = case
    profile = load_profile(PROFILES / "logger_date_time_varh.toml")
    local = pd.DatetimeIndex(pd.to_datetime(starts, unit="s", utc=True)).tz_convert("America/New_York")
    day, clock = local.strftime("%m/%d/%Y"), local.strftime("%H:%M")
    flag = np.where(est, "SUB", "A")
    text = "Date,Time,kWh,Reactive,Quality\n" + "".join(
        f"{day[i]},{clock[i]},{float(kwh_ints[i]) / 1000!r},{float(net[i]) / 100!r},{flag[i]}\n" for i in range(len(starts)))
    _, df = read(write_csv(tmp_path, text), profile)
    assert_array_equal(df["start"].to_numpy(), starts)
    # kWh x 1000 (VT x CT); varh x 1e-3 x 1000
    assert_allclose(df["kwh"].to_numpy(), kwh_ints / 1000 * 1000, rtol=1e-12)
    assert_allclose(df["kvarh_lag"].to_numpy(), np.maximum(net, 0) / 100, rtol=1e-12)
    assert_allclose(df["kvarh_lead"].to_numpy(), np.maximum(-net, 0) / 100, rtol=1e-12)
    assert_array_equal(df["estimated"].to_numpy(), est)
