"""Batch audit: `auditor audit --all | --site | --meter ... [--json | --csv]`, on SQLite and PostgreSQL.

The figures are checked against the single-meter audit (the batch must not change them) and
against the input file itself: each meter's kWh is the sum of its file rows, and its energy PF
is kWh / |kWh + j·kvarh| computed with ``abs(complex(...))`` (IEEE Std 1459-2010, 3.1.1:
PF = P / |S|, S = P + jQ, applied to period energies).
"""
from __future__ import annotations

import csv
import json
import os
import subprocess
import sys

import pytest

from auditor.ingest.pipeline import import_file
from auditor.services.audit import audit_meter
from auditor.services.batch import audit_meters, same_tariff, select_meters
from auditor.services.meters import set_site
from tests.ingest_helpers import write_csv

TARIFF = "harrowgate_industrial_tou"
METERS = ("BX-01", "BX-02", "BX-03", "BX-04", "BX-05")


def meter_lines(meter: str, k: int, days: int = 10) -> tuple[list[str], float, float]:
    """``days`` of 15-minute rows from 2025-03-28 (across the month end); their kWh and lagging kvarh sums."""
    import pandas as pd

    t0 = pd.Timestamp("2025-03-28T00:00:00+00:00")
    lines, kwh_sum, lag_sum = [], 0.0, 0.0
    for i in range(96 * days):
        kwh = round(10 + k + (i % 96) * 0.05, 3)
        lag = round(kwh * (0.3 + 0.1 * k), 3)
        kwh_sum += kwh
        lag_sum += lag
        lines.append(f"{meter},{(t0 + pd.Timedelta(minutes=15 * i)).isoformat()},{kwh},{lag},0.0")
    return lines, kwh_sum, lag_sum


@pytest.fixture
def fleet(store, tmp_path):
    """Five meters on two sites, and one meter on a third site with no readings (its audit fails)."""
    sums = {}
    lines = []
    for k, m in enumerate(METERS):
        rows, kwh, lag = meter_lines(m, k)
        lines += rows
        sums[m] = (kwh, lag)
    out = import_file(store, write_csv(tmp_path / "fleet.csv", lines))
    assert out.status == "imported", out.message
    set_site(store, "North Works", meters=["BX-01", "BX-02", "BX-03"])
    set_site(store, "South Yard", meters=["BX-04", "BX-05"])
    set_site(store, "Empty Shed", meters=["BX-EMPTY"])
    return store, sums


def test_batch_documents_are_the_single_audits_and_match_the_file(fleet):
    store, sums = fleet
    names = select_meters(store, all_meters=True)
    assert names == ["BX-EMPTY", "BX-01", "BX-02", "BX-03", "BX-04", "BX-05"]  # by site, then meter
    batch = audit_meters(store, names, same_tariff(TARIFF), workers=2)
    doc = batch.to_dict()
    assert set(doc) == {"audits", "failed"}
    assert doc["failed"] == [{"meter": "BX-EMPTY", "error": "meter BX-EMPTY has no readings"}]
    assert [a["meter"] for a in doc["audits"]] == list(METERS)
    for a in doc["audits"]:
        single = audit_meter(store, a["meter"], same_tariff(TARIFF)(a["meter"])).to_dict()
        assert a == single  # the batch changes nothing in a meter's audit document
        kwh, lag = sums[a["meter"]]
        assert a["totals"]["kwh"] == pytest.approx(kwh, rel=1e-12)
        assert a["totals"]["pf"] == pytest.approx(kwh / abs(complex(kwh, lag)), rel=1e-12)
    rows = {r["meter"]: r for r in batch.rows}
    assert rows["BX-EMPTY"]["error"] and rows["BX-EMPTY"]["kwh"] is None
    r = rows["BX-02"]
    assert r["site"] == "North Works" and r["coverage"] == pytest.approx(1.0)
    pfs = {p["start"][:7]: p["pf"] for p in next(a for a in doc["audits"] if a["meter"] == "BX-02")["periods"]}
    assert r["worst_period"] == min(pfs, key=pfs.get) and r["worst_pf"] == pytest.approx(min(pfs.values()))


def test_one_process_and_a_pool_give_the_same_result(fleet):
    store, _ = fleet
    names = select_meters(store, site="North Works")
    assert names == ["BX-01", "BX-02", "BX-03"]
    seen = []
    here = audit_meters(store, names + ["BX-04"], same_tariff(TARIFF), workers=1, progress=lambda i, n: seen.append((i, n)))
    pool = audit_meters(store, names + ["BX-04"], same_tariff(TARIFF), workers=2)
    assert here.to_dict() == pool.to_dict()
    assert seen == [(1, 4), (2, 4), (3, 4), (4, 4)]


def test_a_tariff_per_meter_plugs_in(fleet):
    store, _ = fleet
    from auditor.errors import NotFoundError
    from auditor.services.audit import resolve_tariff

    tou, pf = resolve_tariff(TARIFF), resolve_tariff("millbrook_commercial_pf")

    def tariff_for(meter: str):
        if meter == "BX-05":
            raise NotFoundError("meter BX-05 has no tariff")
        return tou if meter in ("BX-01", "BX-02") else pf

    batch = audit_meters(store, ["BX-01", "BX-03", "BX-05"], tariff_for, workers=1)
    assert [a["tariff"] for a in batch.audits] == [tou.name, pf.name]
    assert batch.failed == [{"meter": "BX-05", "error": "meter BX-05 has no tariff"}]


def test_selection_errors(fleet):
    store, _ = fleet
    from auditor.errors import NotFoundError

    with pytest.raises(NotFoundError, match="no site 'Nowhere'"):
        select_meters(store, site="Nowhere")
    with pytest.raises(NotFoundError, match="no meter 'BX-99'"):
        select_meters(store, meters=["BX-01", "BX-99"])
    assert select_meters(store, meters=["BX-05", "BX-01", "BX-05"]) == ["BX-01", "BX-05"]


# --------------------------------------------------------------------------------------------
# the command line
# --------------------------------------------------------------------------------------------
def cli(url: str, *args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, AUDITOR_DB_URL=url)
    return subprocess.run([sys.executable, "-m", "auditor", *args], capture_output=True, text=True, env=env,
                          timeout=300)


def test_cli_all_json_failed_meter_goes_on_with_exit_1(fleet):
    store, _ = fleet
    r = cli(store.url, "audit", "--all", "--tariff", TARIFF, "--json", "--workers", "2")
    assert r.returncode == 1, r.stderr
    doc = json.loads(r.stdout)
    assert [a["meter"] for a in doc["audits"]] == list(METERS)
    assert doc["failed"] == [{"meter": "BX-EMPTY", "error": "meter BX-EMPTY has no readings"}]
    assert "error: meter BX-EMPTY: meter BX-EMPTY has no readings" in r.stderr
    single = json.loads(cli(store.url, "audit", "--meter", "BX-03", "--tariff", TARIFF, "--json").stdout)
    assert doc["audits"][2] == single


def test_cli_table_and_csv(fleet, tmp_path):
    store, sums = fleet
    out = tmp_path / "fleet.csv"
    r = cli(store.url, "audit", "--site", "South Yard", "--tariff", TARIFF, "--csv", str(out))
    assert r.returncode == 0, r.stderr
    head = r.stdout.splitlines()[0].split()
    assert head[:4] == ["site", "meter", "kWh", "PF"] and "worst" in head
    assert "BX-04" in r.stdout and "BX-05" in r.stdout and "BX-01" not in r.stdout
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert [x["meter"] for x in rows] == ["BX-04", "BX-05"]
    assert float(rows[1]["kwh"]) == pytest.approx(sums["BX-05"][0], rel=1e-12)
    assert rows[0]["site"] == "South Yard" and rows[0]["error"] == ""
    # several --meter, one of them without readings: reported, the rest go on
    r = cli(store.url, "audit", "--meter", "BX-02", "--meter", "BX-EMPTY", "--tariff", TARIFF, "--csv", str(out))
    assert r.returncode == 1
    with open(out, newline="", encoding="utf-8") as fh:
        rows = {x["meter"]: x for x in csv.DictReader(fh)}
    assert rows["BX-EMPTY"]["error"] == "meter BX-EMPTY has no readings" and rows["BX-02"]["error"] == ""


def test_a_command_closes_the_database_when_it_ends(fleet):
    """The command line leaves its last garbage collection to the process's exit, so the store
    is closed when the command ends: an SQLite file's write-ahead log is checkpointed and
    removed by its last connection's close (the SQLite documentation, "Write-Ahead Logging")."""
    store, _ = fleet
    if not store.url.startswith("sqlite"):
        pytest.skip("the write-ahead log is SQLite's")
    path = store.url.removeprefix("sqlite:///")
    store.dispose()  # this test's own connections: none left open beside the command's
    assert not os.path.exists(path + "-wal")
    for args in (("audit", "--meter", "BX-01", "--tariff", TARIFF), ("audit", "--all", "--tariff", TARIFF,
                 "--workers", "1"), ("meters",), ("audit", "--meter", "NO-SUCH", "--tariff", TARIFF)):
        r = cli(store.url, *args)
        assert r.returncode in (0, 1), r.stderr
        assert not os.path.exists(path + "-wal"), args  # closed, whether the command succeeded or not


def test_cli_single_meter_output_is_the_period_table(fleet):
    store, _ = fleet
    r = cli(store.url, "audit", "--meter", "BX-01", "--tariff", TARIFF)
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    assert lines[0] == "Meter BX-01 (North Works) under tariff 'Harrowgate Industrial TOU'; times are local, UTC"
    assert lines[1].split()[:3] == ["period", "kWh", "PF"]
    assert "\n2025-03 " in r.stdout and "Total " in r.stdout


@pytest.mark.parametrize("args", [
    ("--tariff", TARIFF),  # no meter, site or --all
    ("--all", "--site", "North Works", "--tariff", TARIFF),
    ("--all", "--tariff", TARIFF, "--json", "--csv", "x.csv"),
    ("--all", "--tariff", TARIFF, "--workers", "0"),
])
def test_cli_usage_errors_exit_2(fleet, args):
    store, _ = fleet
    r = cli(store.url, "audit", *args)
    assert r.returncode == 2, (r.stdout, r.stderr)


def test_cli_unknown_site_exit_1(fleet):
    store, _ = fleet
    r = cli(store.url, "audit", "--site", "Nowhere", "--tariff", TARIFF)
    assert r.returncode == 1 and "no site 'Nowhere'" in r.stderr


def test_report_for_a_site(fleet, tmp_path):
    store, sums = fleet
    out = tmp_path / "north.html"
    r = cli(store.url, "report", "--site", "North Works", "--tariff", TARIFF, "--out", str(out))
    assert r.returncode == 0, r.stderr
    html = out.read_text(encoding="utf-8")
    assert "Site portfolio — North Works" in html and "3 of 3" in html
    assert all(m in html for m in ("BX-01", "BX-02", "BX-03")) and "BX-04" not in html
    assert f"{sums['BX-02'][0]:,.0f}" in html  # the meter's kWh, from the file
    csv_out = tmp_path / "shed.csv"
    r = cli(store.url, "report", "--site", "Empty Shed", "--tariff", TARIFF, "--out", str(csv_out))
    assert r.returncode == 1 and "meter BX-EMPTY has no readings" in r.stderr
    with open(csv_out, newline="", encoding="utf-8") as fh:
        assert [x["error"] for x in csv.DictReader(fh)] == ["meter BX-EMPTY has no readings"]
    assert cli(store.url, "report", "--site", "North Works", "--meter", "BX-01", "--tariff", TARIFF,
               "--out", str(out)).returncode == 2
    assert cli(store.url, "report", "--site", "North Works", "--tariff", TARIFF,
               "--out", str(tmp_path / "x.xlsx")).returncode == 2
