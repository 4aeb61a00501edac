"""CSV profiles with OBIS-coded headers (IEC 62056-61 codes from memory: C = 1 active import,
2 active export, 3/4 reactive import/export, 5–8 reactive quadrants I–IV; D = 29 energy per
load-profile interval, D = 8 cumulative register)."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.ingest import readers
from auditor.ingest.frame import ReadOptions
from auditor.ingest.pipeline import import_file
from auditor.ingest.readers import obis_csv
from tests.ingest_helpers import reading_count, readings

DATA = Path(__file__).parent / "data"


def frame_of(path: Path):
    out = obis_csv.read(path, ReadOptions())
    return out.info, pd.concat(list(out.chunks))


def write(tmp_path: Path, header: str, rows: list[str], name: str = "p.csv") -> Path:
    p = tmp_path / name
    p.write_text(header + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return p


@pytest.mark.parametrize("cell, expected", [
    ("1.29", (1, 29, None)),
    ("1.29.0", (1, 29, None)),
    ("1-0:1.29.0", (1, 29, None)),
    ("1-0:5.29.0*255", (5, 29, None)),
    ("1.0.8.29.0.255", (8, 29, None)),
    ("1-0:1.29.0 [Wh]", (1, 29, "Wh")),
    ("1-1:2.29.0 (kWh)", (2, 29, "kWh")),
    ("1-0:1.8.0", (1, 8, None)),
])
def test_code_spellings(cell, expected):
    assert obis_csv.parse_code(cell) == expected


@pytest.mark.parametrize("cell", ["kwh", "start", "7-0:1.29.0", "1.29x", "meter", "2025-01-01"])
def test_not_codes(cell):
    assert obis_csv.parse_code(cell) is None  # 7-0: A = 7 is gas, not electricity


def test_sample_with_units_and_end_labels():
    info, df = frame_of(DATA / "obis_fenwick_dairy_wh_end.csv")
    assert info.label == "end"
    assert info.quantities == ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received")
    assert info.source_units["kwh"] == "Wh" and info.source_units["kvarh_lag"] == "varh"
    # Wh / 1000 = kWh, exactly as typed
    assert df["kwh"].tolist()[:3] == [3.1, 3.05, 2.98]
    assert df["kvarh_lag"].tolist()[:2] == [1.9, 1.88]
    assert_allclose(df["kvarh_lead"].to_numpy()[-2:], [0.04, 0.06])
    assert df["line"].tolist() == list(range(2, 14))


def test_sample_imports_with_interval_end_shifted(store):
    out = import_file(store, DATA / "obis_fenwick_dairy_wh_end.csv")
    assert out.status == "imported", out.errors
    df = readings(store)
    # first label 00:15+01:00 ends the interval starting 2025-03-29T23:00Z
    assert df["start"].iloc[0] == int(pd.Timestamp("2025-03-29T23:00:00Z").timestamp())
    assert len(df) == 12


def test_short_codes_device_id_and_flags(store):
    out = import_file(store, DATA / "obis_millrace_short_codes.csv")
    assert out.status == "imported", out.errors
    assert out.meters == ["MILL-2"]
    df = readings(store)
    assert_allclose(df["kwh"], 40 + 2.5 * np.arange(8))
    assert df["flags"].tolist() == [0, 0, 0, 0, 0, 1, 0, 0]


def test_detection_by_content(tmp_path):
    p = write(tmp_path, "meter,start,1.29,5.29,8.29", ["M,2025-01-01T00:00:00Z,1,1,0"], name="data.txt")
    assert readers.detect(p) is obis_csv
    plain = write(tmp_path, "meter,start,kwh,kvarh_lag,kvarh_lead", ["M,2025-01-01T00:00:00Z,1,1,0"])
    assert readers.detect(plain).FORMAT == "plain_csv"


def test_reactive_import_export_read_as_q1_q4_with_a_warning(tmp_path):
    p = write(tmp_path, "meter,start,1.29,3.29,4.29", ["M,2025-01-01T00:00:00Z,5,2,0.5",
                                                     "M,2025-01-01T00:15:00Z,6,3,0"])
    info, df = frame_of(p)
    assert_allclose(df["kvarh_lag"], [2, 3])
    assert_allclose(df["kvarh_lead"], [0.5, 0])
    assert sum("only imports active energy" in w.message for w in info.warnings) == 2


def test_quadrant_columns_win_over_import_export(tmp_path):
    p = write(tmp_path, "meter,start,1.29,3.29,5.29,8.29",
              ["M,2025-01-01T00:00:00Z,5,9,2,0.5"])
    info, df = frame_of(p)
    assert_allclose(df["kvarh_lag"], [2])
    assert any("3.29" in (w.column or "") and "skipped" in w.message for w in info.warnings)


def test_unneeded_channels_skipped_with_warning(tmp_path):
    p = write(tmp_path, "meter,start,1.29,5.29,6.29,8.29,9.29",
              ["M,2025-01-01T00:00:00Z,5,2,7,0.5,99", "M,2025-01-01T00:15:00Z,5,2,x,0.5,99"])
    info, df = frame_of(p)
    assert {w.column for w in info.warnings} == {"6.29", "9.29"}
    assert len(df) == 2


def _rejected(store, path):
    out = import_file(store, path)
    assert out.status == "rejected" and out.errors
    assert str(path) in out.message
    assert reading_count(store) == 0
    return out


def test_cumulative_register_refused(store, tmp_path):
    out = _rejected(store, write(tmp_path, "meter,start,1-0:1.8.0,5.29,8.29", ["M,2025-01-01T00:00:00Z,1,1,0"]))
    assert (out.errors[0].line, out.errors[0].column) == (1, "1-0:1.8.0") and "cumulative" in out.errors[0].message


def test_missing_quadrant_named(store, tmp_path):
    out = _rejected(store, write(tmp_path, "meter,start,1.29,5.29", ["M,2025-01-01T00:00:00Z,1,1"]))
    assert "kvarh_lead" in out.errors[0].message and "8.29" in out.errors[0].message


def test_duplicate_quantity_named(store, tmp_path):
    out = _rejected(store, write(tmp_path, "meter,start,1.29,1-0:1.29.0,5.29,8.29",
                                 ["M,2025-01-01T00:00:00Z,1,1,1,0"]))
    assert out.errors[0].column == "1-0:1.29.0"


def test_wrong_unit_named(store, tmp_path):
    out = _rejected(store, write(tmp_path, "meter,start,1.29 [varh],5.29,8.29", ["M,2025-01-01T00:00:00Z,1,1,0"]))
    assert out.errors[0].column == "1.29 [varh]"


def test_bad_cell_named_by_canonical_column_and_line(store, tmp_path):
    out = _rejected(store, write(tmp_path, "meter,start,1.29,5.29,8.29",
                                 ["M,2025-01-01T00:00:00Z,1,1,0", "M,2025-01-01T00:15:00Z,1,abc,0"]))
    assert (out.errors[0].line, out.errors[0].column) == (3, "kvarh_lag")


def test_mwh_scaled_up(tmp_path):
    p = write(tmp_path, "meter,start,1.29 [MWh],5.29 [Mvarh],8.29 [kvarh]", ["M,2025-01-01T00:00:00Z,0.0125,0.004,1"])
    _, df = frame_of(p)
    assert df["kwh"].tolist() == [12.5] and df["kvarh_lag"].tolist() == [4.0] and df["kvarh_lead"].tolist() == [1.0]
