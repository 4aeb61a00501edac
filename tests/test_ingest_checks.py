"""Plausibility checks, site assignment and quiet imports.

Values: a 15-minute interval's energy E (kWh) is an average power of E × 60 / 15 kW; the default
bound is 2,000,000 kW (validate.DEFAULT_MAX_KW), i.e. 500,000 kWh a quarter hour or 2,000,000
kWh an hour; a meter's own bound (--max-kw) replaces it and is kept for later imports.
Timestamps: 1990-01-01 to one day after the import (frame.plausible_window).
"""
from __future__ import annotations

import subprocess
import sys
import warnings

import pandas as pd
import pytest

from auditor.ingest.frame import plausible_window
from auditor.ingest.pipeline import ImportOptions, import_file
from auditor.ingest.validate import DEFAULT_MAX_KW
from auditor.store.models import Meter, Site
from tests.espi_helpers import feed
from tests.ingest_helpers import day_rows, reading_count, write_csv


def one_value(tmp_path, kwh: str, minutes: int = 15, name: str = "a.csv"):
    t0 = pd.Timestamp("2025-01-06T00:00:00+00:00")
    rows = [f"PV-1,{(t0 + pd.Timedelta(minutes=minutes * i)).isoformat()},1,0,0" for i in range(4)]
    rows[1] = rows[1].replace(",1,0,0", f",{kwh},0,0")
    return write_csv(tmp_path / name, rows)


@pytest.mark.parametrize("minutes,limit", [(15, 500_000), (30, 1_000_000), (60, 2_000_000)])
def test_the_default_bound_scales_with_the_interval(store, tmp_path, minutes, limit):
    assert DEFAULT_MAX_KW * minutes / 60 == limit
    assert import_file(store, one_value(tmp_path, str(limit), minutes)).status == "imported"
    out = import_file(store, one_value(tmp_path, str(limit + 1), minutes, "b.csv"))
    assert out.status == "rejected"
    p = out.errors[0]
    assert p.line == 3 and p.column == "kwh" and f"{limit:,}" in p.message and "own bound" in p.message
    assert "--max-kw" in p.cli_hint and "--" not in p.message


@pytest.mark.parametrize("value", ["1e300", "1e23", "5e5000"])
def test_absurd_values_are_rejected_with_their_line(store, tmp_path, value):
    out = import_file(store, one_value(tmp_path, value))
    assert out.status == "rejected" and out.errors[0].line == 3
    assert reading_count(store) == 0


def test_a_meters_own_bound_is_kept_and_used(store, tmp_path):
    # a small site: nothing above 400 kW, so 150 kWh in a quarter hour (600 kW) is a stray value
    import_file(store, write_csv(tmp_path / "a.csv", day_rows(meter="PV-1", n=4)), ImportOptions(max_kw=400))
    with store.session() as s:
        assert s.query(Meter).one().max_kw == 400
    out = import_file(store, one_value(tmp_path, "150", name="b.csv"))
    assert out.status == "rejected" and "100 kWh" in out.errors[0].message and "its own bound" in out.errors[0].message
    assert import_file(store, one_value(tmp_path, "99", name="c.csv")).status in ("imported", "revised")
    # a bigger bound given again replaces it
    assert import_file(store, one_value(tmp_path, "150", name="b.csv"), ImportOptions(max_kw=1000)).status == "revised"


def test_max_kw_must_be_positive_and_sane(store, tmp_path):
    from auditor.errors import UsageError

    for bad in (0, -5, 1e12):
        with pytest.raises(UsageError):
            import_file(store, one_value(tmp_path, "1"), ImportOptions(max_kw=bad))


def test_the_time_window(store, tmp_path):
    lo, hi = plausible_window(now=pd.Timestamp("2026-01-01T00:00Z").timestamp())
    assert lo == pd.Timestamp("1990-01-01T00:00Z").timestamp()
    assert hi == pd.Timestamp("2026-01-02T00:00Z").timestamp()
    win = (lo, hi)
    first = write_csv(tmp_path / "first.csv", ["W-1,1990-01-01T00:00:00Z,1,0,0", "W-1,1990-01-01T00:15:00Z,1,0,0"])
    last = write_csv(tmp_path / "last.csv", ["W-0,2026-01-01T23:30:00Z,1,0,0", "W-0,2026-01-02T00:00:00Z,1,0,0"])
    assert import_file(store, first, ImportOptions(window=win)).status == "imported"
    assert import_file(store, last, ImportOptions(window=win)).status == "imported"
    for i, stamp in enumerate(["1989-12-31T23:45:00Z", "2026-01-02T00:15:00Z", "1677-09-22T00:00:00Z",
                               "1900-01-01T00:00:00Z", "0001-01-01T00:00:00Z", "9999-12-31T00:00:00Z"]):
        f = write_csv(tmp_path / f"bad{i}.csv", ["W-2,2025-01-01T00:00:00Z,1,0,0", f"W-2,{stamp},1,0,0"])
        out = import_file(store, f, ImportOptions(window=win))
        assert out.status == "rejected", stamp
        assert out.errors[0].line == 3 and "outside the plausible range 1990-01-01 to 2026-01-02" in out.errors[0].message


def test_full_width_digits_are_rejected_with_the_line(store, tmp_path):
    f = write_csv(tmp_path / "a.csv", ["FW-1,2025-01-06T00:00:00Z,1,0,0", "FW-1,2025-01-06T00:15:00Z,１２,0,0"])
    out = import_file(store, f)
    assert out.status == "rejected" and (out.errors[0].line, out.errors[0].column) == (3, "kwh")
    prof = tmp_path / "p.toml"
    prof.write_text('[meter]\nid = "FW-2"\n[time]\ncolumn = "t"\nformat = "%d.%m.%Y %H:%M"\ntimezone = "UTC"\n'
                    'interval_minutes = 15\n[quantities.kwh]\ncolumn = "e"\nunit = "kWh"\n')
    g = tmp_path / "b.csv"
    g.write_text("t,e\n06.01.2025 00:00,1\n06.01.２０２５ 00:15,1\n", encoding="utf-8")
    out = import_file(store, g, ImportOptions(profile_path=str(prof)))
    assert out.status == "rejected" and out.errors[0].line == 3 and "ASCII" in out.errors[0].message


def test_espi_import_prints_no_numpy_warning(store, tmp_path):
    # a feed with only active energy: the reactive channels are absent (NaN) in every interval
    f = tmp_path / "a.xml"
    f.write_text(feed([(72, 1, 0, list(range(1000, 1100)))]))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        out = import_file(store, f)
    assert out.status == "imported", out.errors


def test_espi_import_is_quiet_on_stderr(tmp_path):
    f = tmp_path / "a.xml"
    f.write_text(feed([(72, 1, 0, list(range(1000, 1100)))]))
    env = {"AUDITOR_DB_URL": f"sqlite:///{tmp_path / 'q.sqlite3'}", "PATH": "/usr/bin:/bin"}
    r = subprocess.run([sys.executable, "-m", "auditor", "--quiet", "import", str(f)], capture_output=True, text=True,
                       env=env, timeout=120)
    assert r.returncode == 0 and r.stderr == "", r.stderr


def _site_of(store, meter: str) -> tuple[str, str]:
    with store.session() as s:
        m = s.query(Meter).filter_by(external_id=meter).one()
        return m.site.name, m.site.timezone


def test_meter_on_another_site_is_warned_and_moved_only_when_asked(store, tmp_path):
    a = write_csv(tmp_path / "a.csv", day_rows(meter="ST-1", n=4))
    out = import_file(store, a, ImportOptions(site="Harbour", timezone="Europe/Berlin"))
    assert out.status == "imported" and not [w for w in out.warnings if "site" in w.message]
    b = write_csv(tmp_path / "b.csv", day_rows(meter="ST-1", day="2025-01-07", n=4))
    out = import_file(store, b, ImportOptions(site="Quarry", timezone="Europe/Berlin"))
    assert out.status == "imported"
    warned = [w for w in out.warnings if "ST-1" in w.message]
    assert warned and "on site 'Harbour', not 'Quarry'" in warned[0].message and "--move" in warned[0].cli_hint
    assert _site_of(store, "ST-1")[0] == "Harbour"
    c = write_csv(tmp_path / "c.csv", day_rows(meter="ST-1", day="2025-01-08", n=4))
    out = import_file(store, c, ImportOptions(site="Quarry", timezone="Europe/Berlin", move=True))
    assert any("moved from site 'Harbour' to 'Quarry'" in w.message for w in out.warnings)
    assert _site_of(store, "ST-1") == ("Quarry", "Europe/Berlin")


def test_move_needs_a_site(store, tmp_path):
    from auditor.errors import UsageError

    with pytest.raises(UsageError, match="the site to move them to") as err:
        import_file(store, write_csv(tmp_path / "a.csv", day_rows(n=4)), ImportOptions(move=True))
    assert "--site" in err.value.cli_hint


def test_new_site_without_timezone_is_warned(store, tmp_path):
    f = write_csv(tmp_path / "a.csv", day_rows(meter="TZ-1", n=4, tz="+01:00"))
    out = import_file(store, f, ImportOptions(site="Dockside"))
    msg = [w for w in out.warnings if "Dockside" in w.message]
    assert msg and "UTC" in msg[0].message and "time zone" in msg[0].message and "--" not in msg[0].message
    assert "--timezone" in msg[0].cli_hint and "sites set Dockside --timezone" in msg[0].cli_hint
    assert _site_of(store, "TZ-1") == ("Dockside", "UTC")
    # a second file for the same site says nothing more
    g = write_csv(tmp_path / "b.csv", day_rows(meter="TZ-2", n=4, tz="+01:00"))
    assert not [w for w in import_file(store, g, ImportOptions(site="Dockside")).warnings if "UTC" in w.message]
    # given a zone, no warning
    h = write_csv(tmp_path / "c.csv", day_rows(meter="TZ-3", n=4, tz="+01:00"))
    out = import_file(store, h, ImportOptions(site="Kiln Yard", timezone="Europe/Paris"))
    assert not [w for w in out.warnings if "UTC" in w.message]
    with store.session() as s:
        assert s.query(Site).filter_by(name="Kiln Yard").one().timezone == "Europe/Paris"


def test_cli_import_options(tmp_path):
    import os

    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{tmp_path / 'c.sqlite3'}")
    f = write_csv(tmp_path / "a.csv", day_rows(meter="CL-1", n=4))
    run = [sys.executable, "-m", "auditor", "import"]
    r = subprocess.run(run + [str(f), "--site", "North Yard"], env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and "billed in UTC" in r.stdout
    g = write_csv(tmp_path / "b.csv", day_rows(meter="CL-1", day="2025-01-07", n=4))
    r = subprocess.run(run + [str(g), "--site", "South Yard", "--move", "--timezone", "UTC", "--max-kw", "50"],
                       env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and "moved from site 'North Yard' to 'South Yard'" in r.stdout
    r = subprocess.run(run + [str(g), "--move"], env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and "--site" in r.stderr
    h = write_csv(tmp_path / "c.csv", [r.replace(",10.", ",99.", 1) for r in day_rows(meter="CL-1", day="2025-01-08",
                                                                                      n=4)])
    r = subprocess.run(run + [str(h)], env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 1 and "12 kWh" in r.stderr  # 50 kW × 15 min, kept on the meter


def test_bill_periods_are_plausible_in_files_and_manual_entry(store, tmp_path):
    from auditor.errors import InputError
    from auditor.ingest.bills_csv import MAX_BILL_DAYS
    from auditor.services.bills import add_bill, import_bills

    import_file(store, write_csv(tmp_path / "m.csv", day_rows(meter="BL-1", n=4)))
    header = "meter,period_start,period_end,kwh"
    f = tmp_path / "bills.csv"
    f.write_text(f"{header}\nBL-1,2025-01-01,2025-02-01,1000\nBL-1,0001-01-01,9999-12-31,5\n"
                 f"BL-1,2024-01-01,2025-01-01,12000\nBL-1,2023-01-01,2024-03-01,9\n")
    with pytest.raises(InputError) as exc:
        import_bills(store, f)
    located = {(p.line, p.column) for p in exc.value.problems}
    assert (3, "period_start") in located and (3, "period_end") in located  # outside 1990 .. today + 400 days
    assert (5, "period_end") in located  # 425 days
    assert not any(p.line in (2, 4) for p in exc.value.problems)  # a month, and a year of 366 days, are fine
    assert any(f"at most {MAX_BILL_DAYS} days" in p.message for p in exc.value.problems)
    with pytest.raises(InputError, match="at most 400 days"):
        add_bill(store, "BL-1", "2025-01-01", "2026-03-01", kwh=1)
    with pytest.raises(InputError, match="plausible range"):
        add_bill(store, "BL-1", "0001-01-01", "9999-12-31", kwh=1)
    with pytest.raises(InputError, match="not a number"):
        add_bill(store, "BL-1", "2025-01-01", "2025-02-01", kwh="１０００")
    assert add_bill(store, "BL-1", "2025-01-01", "2025-02-01", kwh=1000)["status"] == "imported"


def test_a_header_of_two_million_columns_names_the_first_unknown_one(tmp_path):
    from tests.ingest_helpers import new_store

    store = new_store(tmp_path)  # about the reader only: SQLite is enough
    f = tmp_path / "wide.csv"
    with open(f, "w") as fh:
        fh.write("meter,start,kwh,kvarh_lag,kvarh_lead," + ",".join(f"c{i}" for i in range(2_000_000)) + "\n")
        fh.write("H-1,2025-01-06T00:00:00Z,1,0,0\n")
    out = import_file(store, f)
    assert out.status == "rejected"
    first = out.errors[0]
    assert (first.line, first.column) == (1, "c0") and "unknown column 'c0'" in first.message
    assert "1,999,999 more unknown column(s)" in out.errors[1].message and len(out.errors) == 2
    # the same with the known columns at the end, past the first 16 KiB that detection reads first
    g = tmp_path / "junk-first.csv"
    with open(g, "w") as fh:
        fh.write(",".join(f"j{i}" for i in range(2_000_000)) + ",meter,start,kwh,kvarh_lag,kvarh_lead\n")
        fh.write("H-1,2025-01-06T00:00:00Z,1,0,0\n")
    out = import_file(store, g)
    assert out.status == "rejected" and out.errors[0].line == 1
