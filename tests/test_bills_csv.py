"""Bills CSV contract and bill profiles: values, and every bad input located by file, line, column."""
from __future__ import annotations

from datetime import date
from pathlib import Path

import pytest
from numpy.testing import assert_allclose

from auditor.errors import InputError, ProfileError
from auditor.ingest.bills_csv import load_bill_profile, read_bills, validate_bill

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).resolve().parent / "data"
PROFILE = ROOT / "auditor" / "profiles" / "bills_semicolon_statement.toml"
HEADER = "meter,period_start,period_end,kwh,kvarh,peak_kw,peak_kva,pf,reactive_charge,total"


def write(tmp_path, *rows, header=HEADER, name="bills.csv") -> Path:
    p = tmp_path / name
    p.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")
    return p


def problems(exc: pytest.ExceptionInfo) -> list[tuple]:
    return [(p.line, p.column) for p in exc.value.problems]


def test_contract_with_optional_cells(tmp_path):
    p = write(tmp_path, "M1,2025-06-01,2025-07-01,72000,43200,100,116.6,0.86,288,8488",
              "M1,2025-07-01,2025-08-01,,,,,,,", "", "M2,2025-06-01,2025-06-16,10.5,,,,,-3.5,")
    r = read_bills(p)
    assert r.format == "bills_csv" and len(r.records) == 3
    a, b, c = r.records
    assert (a.meter, a.period_start, a.period_end, a.line) == ("M1", date(2025, 6, 1), date(2025, 7, 1), 2)
    assert_allclose([a.kwh, a.kvarh, a.peak_kw, a.peak_kva, a.pf, a.reactive_charge, a.total],
                    [72000, 43200, 100, 116.6, 0.86, 288, 8488])
    assert b.kwh is None and b.total is None
    assert c.line == 5 and c.reactive_charge == -3.5  # a credit


def test_only_the_three_required_columns(tmp_path):
    r = read_bills(write(tmp_path, "M1,2025-06-01,2025-07-01", header="meter,period_start,period_end"))
    assert r.records[0].kwh is None


@pytest.mark.parametrize(("row", "where", "text"), [
    ("M1,2025-06-31,2025-07-01,1,,,,,,", (2, "period_start"), "not a date"),
    ("M1,01.06.2025,2025-07-01,1,,,,,,", (2, "period_start"), "YYYY-MM-DD"),
    ("M1,2025-06-01,2025-06-01,1,,,,,,", (2, "period_end"), "not after"),
    ("M1,2025-06-01,2025-05-01,1,,,,,,", (2, "period_end"), "not after"),
    ("M1,2025-06-01,2025-07-01,12a,,,,,,", (2, "kwh"), "not a number"),
    ("M1,2025-06-01,2025-07-01,nan,,,,,,", (2, "kwh"), "not a number"),
    ("M1,2025-06-01,2025-07-01,-5,,,,,,", (2, "kwh"), "negative"),
    ("M1,2025-06-01,2025-07-01,,,,,1.2,,", (2, "pf"), "power factor"),
    ("M1,2025-06-01,2025-07-01,,,,,0,,", (2, "pf"), "power factor"),
    (",2025-06-01,2025-07-01,,,,,,,", (2, "meter"), "empty meter"),
    ("M1,,2025-07-01,,,,,,,", (2, "period_start"), "empty period start"),
])
def test_bad_cells_name_line_and_column(tmp_path, row, where, text):
    p = write(tmp_path, row)
    with pytest.raises(InputError) as exc:
        read_bills(p)
    assert problems(exc)[0] == where
    assert text in exc.value.problems[0].message
    assert str(p) in exc.value.message and f"line {where[0]}" in exc.value.message


def test_every_problem_of_a_file_is_collected(tmp_path):
    p = write(tmp_path, "M1,2025-06-01,2025-07-01,x,,,,,,", "M1,2025-07-01,2025-08-01,,y,,,,,",
              "M1,2025-08-01,2025-08-01,,,,,,,")
    with pytest.raises(InputError) as exc:
        read_bills(p)
    assert problems(exc) == [(2, "kwh"), (3, "kvarh"), (4, "period_end")]


def test_unknown_repeated_and_missing_columns(tmp_path):
    with pytest.raises(InputError) as exc:
        read_bills(write(tmp_path, "M1,2025-06-01,2025-07-01,1", header="meter,period_start,period_end,kwhs"))
    assert problems(exc) == [(1, "kwhs")] and "unknown column" in exc.value.problems[0].message
    with pytest.raises(InputError) as exc:
        read_bills(write(tmp_path, "M1,2025-06-01,1", header="meter,period_start,kwh"))
    assert problems(exc) == [(1, "period_end")]
    with pytest.raises(InputError) as exc:
        read_bills(write(tmp_path, "M1,2025-06-01,2025-07-01,1,2", header="meter,period_start,period_end,kwh,kwh"))
    assert problems(exc) == [(1, "kwh")]


def test_duplicate_and_overlapping_bills(tmp_path):
    with pytest.raises(InputError) as exc:
        read_bills(write(tmp_path, "M1,2025-06-01,2025-07-01,,,,,,,", "M1,2025-06-01,2025-07-01,,,,,,,"))
    assert problems(exc) == [(3, "period_start")] and "first on line 2" in exc.value.problems[0].message
    with pytest.raises(InputError) as exc:
        read_bills(write(tmp_path, "M1,2025-06-01,2025-07-01,,,,,,,", "M1,2025-06-20,2025-07-20,,,,,,,",
                         "M2,2025-06-20,2025-07-20,,,,,,,"))
    assert problems(exc) == [(3, "period_start")] and "overlaps" in exc.value.problems[0].message


def test_too_many_fields_and_empty_file(tmp_path):
    with pytest.raises(InputError) as exc:
        read_bills(write(tmp_path, "M1,2025-06-01,2025-07-01,1,2", header="meter,period_start,period_end,kwh"))
    assert problems(exc) == [(2, None)]
    with pytest.raises(InputError, match="no bills"):
        read_bills(write(tmp_path))


def test_shipped_bill_profile_and_its_sample():
    prof = load_bill_profile(PROFILE)
    assert (prof.delimiter, prof.decimal, prof.thousands, prof.header_line, prof.end_inclusive) == (";", ",", ".", 2, True)
    r = read_bills(DATA / "bills_semicolon_statement.csv", prof)
    assert r.format == "bills_profile:semicolon statement"
    a, b = r.records
    # inclusive last days 30.06 and 31.07 become exclusive ends 1 July and 1 August
    assert (a.period_start, a.period_end, b.period_end) == (date(2025, 6, 1), date(2025, 7, 1), date(2025, 8, 1))
    assert_allclose([a.kwh, a.kvarh, a.peak_kw, a.pf, a.reactive_charge, a.total],
                    [72_000, 43_200, 100.0, 0.86, 288.0, 8_488.0])  # MWh, Mvarh and % converted
    assert b.kvarh is None and b.pf is None and (a.line, b.line) == (3, 4)
    assert any("Remarks" in w.message for w in r.warnings)  # an unmapped column is named


def _profile(tmp_path, text: str) -> Path:
    p = tmp_path / "p.toml"
    p.write_text(text, encoding="utf-8")
    return p


BASE = """
[meter]
column = "m"
[period]
start_column = "a"
end_column = "b"
[fields.kwh]
column = "e"
"""


@pytest.mark.parametrize(("extra", "key"), [
    ("colour = 1\n", "colour"),
    ("[file]\nseparator = ';'\n", "file.separator"),
    ("[fields.kwhh]\ncolumn = 'x'\n", "fields.kwhh"),
    ("[fields.kvarh]\ncolumn = 'x'\nunit = 'kWh'\n", "fields.kvarh.unit"),
    ("[fields.pf]\ncolumn = 'x'\nscale = 2\n", "fields.pf.scale"),
    ("[file]\ndecimal = ';'\n", "file.decimal"),
    ("[file]\nencoding = 'klingon'\n", "file.encoding"),
    ("[file]\nheader_line = 0\n", "file.header_line"),
])
def test_profile_errors_name_the_key(tmp_path, extra, key):
    with pytest.raises(ProfileError) as exc:
        load_bill_profile(_profile(tmp_path, extra + BASE if not extra.startswith("[") else BASE + extra))
    assert exc.value.key == key


def test_profile_structure_errors(tmp_path):
    with pytest.raises(ProfileError) as exc:
        load_bill_profile(_profile(tmp_path, BASE.replace('column = "m"', 'column = "m"\nid = "X"')))
    assert exc.value.key == "meter"
    with pytest.raises(ProfileError) as exc:
        load_bill_profile(_profile(tmp_path, BASE.replace('start_column = "a"\n', "")))
    assert exc.value.key == "period.start_column"
    with pytest.raises(ProfileError) as exc:
        load_bill_profile(_profile(tmp_path, BASE.replace('[period]', '[period]\nformat = "%Y"')))
    assert exc.value.key == "period.format"
    with pytest.raises(ProfileError) as exc:
        load_bill_profile(_profile(tmp_path, BASE.replace('column = "e"', 'column = "a"')))
    assert "mapped twice" in exc.value.message
    with pytest.raises(ProfileError) as exc:
        load_bill_profile(_profile(tmp_path, "name = 'x'\n[meter\n"))
    assert "TOML" in exc.value.message


def test_profile_column_missing_from_the_file(tmp_path):
    prof = load_bill_profile(PROFILE)
    p = tmp_path / "s.csv"
    p.write_text("title\nSupply point;From;To\nM1;01.06.2025;30.06.2025\n", encoding="utf-8")
    with pytest.raises(InputError) as exc:
        read_bills(p, prof)
    assert (2, "Active MWh") in problems(exc)


def test_manual_entry_is_validated_like_a_row():
    b = validate_bill("M1", "2025-06-01", date(2025, 7, 1), kwh="72000", pf=0.86, total=None)
    assert (b.kwh, b.pf, b.total, b.source) == (72000.0, 0.86, None, "manual entry")
    with pytest.raises(InputError) as exc:
        validate_bill("M1", "2025-06-01", "2025-06-01", pf=1.5)
    assert [p.column for p in exc.value.problems] == ["period_end", "pf"]
    with pytest.raises(InputError) as exc:
        validate_bill("M1", "2025-06-01", "2025-07-01", kwhs=1)
    assert exc.value.problems[0].column == "kwhs"
