"""The public holidays the tariffs bill by, kept on disk between runs
(:mod:`auditor.tariffs.holiday_days`): the same days and subdivisions as the ``holidays``
library gives them (the library is the source these tests check against), a file that cannot
be used is never an error, and a later process answers from the file without loading the
library."""
from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import holidays
import numpy as np
import pytest

from auditor.tariffs import holiday_days as hd


@pytest.fixture
def fresh(tmp_path, monkeypatch):
    """An empty cache folder and no answer kept in this process."""
    monkeypatch.setenv("AUDITOR_CACHE_DIR", str(tmp_path))
    hd._loaded.cache_clear()
    hd.holiday_days.cache_clear()
    yield tmp_path
    hd._loaded.cache_clear()
    hd.holiday_days.cache_clear()


def _library_days(country, sub, y0, y1) -> np.ndarray:
    found = holidays.country_holidays(country, subdiv=sub, years=range(y0, y1 + 1))
    return np.array(sorted(found.keys()), dtype="datetime64[D]").astype(np.int64)


CASES = [("DE", "BY"), ("DE", None), ("US", "CA"), ("GB", "SCT"), ("FR", None), ("TH", None), ("MY", "KUL"),
         ("BR", "SP"), ("ES", "MD"), ("PT", None), ("CA", "QC"), ("AU", "NSW"), ("IN", None), ("NZ", None)]


@pytest.mark.parametrize(("country", "sub"), CASES)
def test_days_are_the_librarys_from_the_library_and_from_the_file(fresh, country, sub):
    for y0, y1 in ((2015, 2016), (2024, 2026), (2029, 2029)):
        assert np.array_equal(hd.holiday_days(country, sub, (y0, y1)), _library_days(country, sub, y0, y1))
    hd._loaded.cache_clear()  # as a later process: everything from the file
    hd.holiday_days.cache_clear()
    assert list(fresh.glob("holidays-*.json"))
    for y0, y1 in ((2015, 2016), (2024, 2026), (2025, 2025)):
        got = hd.holiday_days(country, sub, (y0, y1))
        assert np.array_equal(got, _library_days(country, sub, y0, y1))
        assert not got.flags.writeable


def test_subdivisions_are_the_librarys_and_unknown_countries_are_none(fresh):
    supported = holidays.list_supported_countries()
    for country in ("DE", "US", "FR", "TH", "IN", "GB"):
        assert hd.country_subdivisions(country) == list(supported[country])
    assert hd.country_subdivisions("XX") is None
    hd._loaded.cache_clear()
    assert hd.country_subdivisions("DE") == list(supported["DE"])  # from the file
    assert hd.country_subdivisions("XX") is None


def test_a_damaged_file_is_ignored_and_written_again(fresh):
    hd.country_subdivisions("DE")
    (path,) = fresh.glob("holidays-*.json")
    path.write_text("{not json", encoding="utf-8")
    hd._loaded.cache_clear()
    assert np.array_equal(hd.holiday_days("DE", "BY", (2025, 2025)), _library_days("DE", "BY", 2025, 2025))
    assert "DE|BY|2025" in json.loads(path.read_text(encoding="utf-8"))["days"]


def test_a_folder_that_cannot_be_written_is_not_an_error(fresh, monkeypatch):
    blocked = fresh / "a-file-not-a-folder"
    blocked.write_text("x")
    monkeypatch.setenv("AUDITOR_CACHE_DIR", str(blocked))
    hd._loaded.cache_clear()
    assert np.array_equal(hd.holiday_days("FR", None, (2025, 2025)), _library_days("FR", None, 2025, 2025))
    assert hd.country_subdivisions("FR") == list(holidays.list_supported_countries()["FR"])


def test_the_file_is_named_by_the_librarys_version(fresh):
    version = hd.library_version()
    assert version is not None and version.startswith(holidays.__version__ + "-")
    hd.country_subdivisions("DE")
    assert [p.name for p in fresh.glob("holidays-*.json")] == [f"holidays-{version}.json"]


def test_a_later_process_bills_holidays_without_loading_the_library(fresh):
    """The tariff is checked and its holidays found from the file: the library stays unloaded."""
    code = textwrap.dedent("""
        import sys
        from auditor.services.audit import resolve_tariff
        from auditor.tariffs.holiday_days import holiday_days
        t = resolve_tariff("harrowgate_industrial_tou")
        days = holiday_days(t.calendar.country, t.calendar.subdivision, (2025, 2026))
        print(len(days), "holidays" in sys.modules)
    """)
    env = dict(os.environ, AUDITOR_CACHE_DIR=str(fresh))
    first = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    second = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    n = str(len(_library_days("DE", "BY", 2025, 2026)))
    assert first.stdout.split() == [n, "True"]  # the first asks the library
    assert second.stdout.split() == [n, "False"]
