"""The harmonic spectrum reader: good files, and every bad one rejected naming file, line, column."""
from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from auditor.errors import InputError
from auditor.ingest.harmonics_csv import parse_spectrum, read_spectrum

GOOD = """# Invented measurement at an incomer, drives running
# kw = 300
# pf: 0.80
order,current_pct,voltage_pct
5,25.0,1.2
7,12.0,0.8
11,6,
13,4.0,0.3
"""


def test_good_file_in_percent(tmp_path):
    path = tmp_path / "spectrum.csv"
    path.write_text("\ufeff" + GOOD, encoding="utf-8")
    s = read_spectrum(path)
    assert s.name == "spectrum.csv" and s.orders == (5, 7, 11, 13)
    assert s.current_pct == (25.0, 12.0, 6.0, 4.0) and s.current_a is None
    assert s.voltage_pct == (1.2, 0.8, 0.0, 0.3)
    assert (s.kw, s.pf, s.fundamental_a) == (300.0, 0.8, None)
    assert s.lines == (5, 6, 7, 8)


def test_amperes_with_a_fundamental_row_and_semicolons():
    s = parse_spectrum("order;current_a\n1;420\n5;84\n7;42\n", "amps.csv")
    assert s.orders == (1, 5, 7) and s.current_a == (420.0, 84.0, 42.0) and s.fundamental_a == 420.0
    s = parse_spectrum("# fundamental_a = 433\norder,current_pct\n5,20\n", "f.csv")
    assert s.fundamental_a == 433.0


@pytest.mark.parametrize("text, line, column, words", [
    ("", 1, None, "no header row"),
    ("# kw = 300\n", 1, None, "no header row"),
    ("order,current_pct,colour\n5,20,red\n", 1, "colour", "unknown column"),
    ("order,curent_pct\n5,20\n", 1, "curent_pct", "did you mean 'current_pct'"),
    ("order,current_pct,current_a\n5,20,8\n", 1, "current_a", "exactly one of"),
    ("current_pct\n20\n", 1, "order", "'order' is required"),
    ("order,current_pct,current_pct\n5,20,20\n", 1, "current_pct", "given twice"),
    ("order,current_pct\nfive,20\n", 2, "order", "not a whole harmonic order"),
    ("order,current_pct\n5.5,20\n", 2, "order", "not a whole harmonic order"),
    ("order,current_pct\n51,20\n", 2, "order", "out of range"),
    ("order,current_pct\n5,20\n5,21\n", 3, "order", "given twice (first on line 2)"),
    ("order,current_pct\n5,abc\n", 2, "current_pct", "not a number"),
    ("order,current_pct\n5,-3\n", 2, "current_pct", "out of range"),
    ("order,current_pct\n5,130\n", 2, "current_pct", "out of range"),
    ("order,current_pct\n5,nan\n", 2, "current_pct", "out of range"),
    ("order,current_pct\n1,90\n5,20\n", 2, "current_pct", "100 % of itself"),
    ("order,current_pct,voltage_pct\n5,20,x\n", 2, "voltage_pct", "not a number"),
    ("order,current_pct\n5,20,1\n", 2, None, "3 cells where the header has 2"),
    ("order,current_pct\n1,100\n", 2, None, "no harmonic rows"),  # the last line
    ("# kws = 300\norder,current_pct\n5,20\n", 1, "kws", "did you mean 'kw'"),
    ("# pf = 1.5\norder,current_pct\n5,20\n", 1, "pf", "out of range"),
    ("# kw = 0\norder,current_pct\n5,20\n", 1, "kw", "greater than 0"),
    ("# kw = 300\n# kw = 310\norder,current_pct\n5,20\n", 2, "kw", "given twice"),
    ("# kw = lots\norder,current_pct\n5,20\n", 1, "kw", "not a number"),
])
def test_bad_inputs_are_located(text, line, column, words):
    with pytest.raises(InputError) as err:
        parse_spectrum(text, "meas.csv")
    p = err.value.problems[0]
    assert err.value.file == "meas.csv"
    assert words in p.message, p.message
    assert p.line == line and p.column == column
    assert str(err.value).startswith("meas.csv")


def test_all_problems_of_a_file_are_collected():
    with pytest.raises(InputError) as err:
        parse_spectrum("order,current_pct\nx,1\n7,y\n9,-1\n", "many.csv")
    assert [(p.line, p.column) for p in err.value.problems] == [(2, "order"), (3, "current_pct"), (4, "current_pct")]
    assert "(and 2 more problems)" in str(err.value)


def test_unreadable_files(tmp_path):
    with pytest.raises(InputError, match="cannot read"):
        read_spectrum(tmp_path / "missing.csv")
    latin = tmp_path / "latin.csv"
    latin.write_bytes(b"order,current_pct\n5,20\n# caf\xe9\n")
    with pytest.raises(InputError) as err:
        read_spectrum(latin)
    assert err.value.problems[0].line == 3 and "UTF-8" in err.value.problems[0].message
    big = tmp_path / "big.csv"
    big.write_text("order,current_pct\n" + "5,1\n" * 400_000)
    with pytest.raises(InputError, match="too large"):
        read_spectrum(big)


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet="order,current_pctav#=:;0123456789.-\n xe", max_size=120))
def test_any_text_is_read_or_cleanly_rejected(text):
    try:
        s = parse_spectrum(text, "fuzz.csv")
    except InputError as exc:
        assert str(exc).startswith("fuzz.csv")
    else:
        assert any(h >= 2 for h in s.orders) and len(set(s.orders)) == len(s.orders)
