"""`auditor audit`, `auditor size`, `auditor scenarios` and `auditor demo` as a user runs them."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from auditor.services.demo import load_demo
from auditor.store import open_store

PERIOD_KEYS = {"start", "end", "kwh", "kvarh_lag", "kvarh_lead", "pf", "tan_phi", "peak_kw", "peak_kw_at",
               "peak_kva", "peak_kva_at", "peak_kvar", "pf_at_peak", "load_factor", "coverage", "estimated_intervals", "charges",
               "reactive_total", "total"}


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory):
    db = tmp_path_factory.mktemp("demo") / "demo.sqlite3"
    store = open_store(f"sqlite:///{db}")
    load_demo(store)
    store.dispose()
    return db


def run(db, *args, rc=0):
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
    r = subprocess.run([sys.executable, "-m", "auditor", *args], capture_output=True, text=True, env=env, timeout=300)
    assert r.returncode == rc, (r.returncode, r.stdout[-2000:], r.stderr[-2000:])
    return r


def test_audit_json_contract(demo_db):
    d = json.loads(run(demo_db, "audit", "--meter", "KQ-MAIN", "--tariff", "harrowgate_industrial_tou",
                       "--from", "2025-01-01", "--to", "2025-07-01", "--json").stdout)
    assert {"meter", "tariff", "currency", "periods", "totals", "warnings"} <= set(d)
    assert d["meter"] == "KQ-MAIN" and d["currency"] == "EUR" and len(d["periods"]) == 6
    p = d["periods"][0]
    assert PERIOD_KEYS <= set(p)
    assert p["start"] == "2025-01-01" and p["end"] == "2025-02-01"
    assert {"energy", "demand", "fixed", "reactive_daytime", "leading_kvarh"} <= set(p["charges"])
    assert p["total"] == pytest.approx(sum(p["charges"].values()))
    assert p["pf"] == pytest.approx(p["kwh"] / (p["kwh"] ** 2 + p["kvarh_lag"] ** 2) ** 0.5)
    # June has the planted 90-minute logger outage: never silent
    assert any("2025-06" in w and "coverage" in w for w in d["warnings"])


def test_audit_table_and_errors(demo_db):
    out = run(demo_db, "audit", "--meter", "AR-01", "--tariff", "millbrook_commercial_pf").stdout
    assert "AR-01" in out and "total" in out
    r = run(demo_db, "audit", "--meter", "NOPE", "--tariff", "millbrook_commercial_pf", rc=1)
    assert "no meter 'NOPE'" in r.stderr and "Traceback" not in r.stderr
    r = run(demo_db, "audit", "--meter", "AR-01", "--tariff", "/nonexistent.toml", rc=1)
    assert "Traceback" not in r.stderr


def test_size_fixed_json_contract_and_save(demo_db):
    d = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", "harrowgate_industrial_tou", "--fixed",
                       "150", "--save", "kq-150", "--json").stdout)
    assert {"bank", "before", "after", "annual_savings", "savings_by_charge", "capex", "simple_payback_years",
            "npv", "irr", "cash_flow", "screening", "warnings", "cautions"} <= set(d)
    assert d["bank"]["kind"] == "fixed" and d["bank"]["total_kvar"] == 150
    assert {"resonance_order", "voltage_rise_percent", "leading_intervals"} <= set(d["screening"])
    assert d["annual_savings"] > 0 and d["cautions"]
    listed = json.loads(run(demo_db, "scenarios", "list", "--json").stdout)["scenarios"]
    assert [s["name"] for s in listed] == ["kq-150"]
    assert listed[0]["npv"] == pytest.approx(d["npv"])


def test_size_optimize_has_candidates(demo_db):
    d = json.loads(run(demo_db, "size", "--meter", "KQ-DOCKS", "--tariff", "harrowgate_industrial_tou",
                       "--optimize", "--json").stdout)
    assert len(d["candidates"]) >= 20
    chosen = [c for c in d["candidates"] if c["chosen"]]
    assert len(chosen) == 1 and chosen[0]["total_kvar"] == d["bank"]["total_kvar"]


def test_size_usage_errors(demo_db):
    r = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", "harrowgate_industrial_tou", rc=2)
    assert "exactly one of" in r.stderr
    r = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", "harrowgate_industrial_tou", "--bank", "6xfifty", rc=2)
    assert "Traceback" not in r.stderr


def test_demo_no_serve_json(tmp_path):
    db = tmp_path / "d.sqlite3"
    d = json.loads(run(db, "demo", "--no-serve", "--json").stdout)
    assert {m["meter"] for m in d["meters"]} == {"KQ-MAIN", "KQ-DOCKS", "AR-01"}
    assert [f["status"] for f in d["files"]] == ["imported", "imported", "imported", "revised"]
    assert d["savings_case"]["meters"]["KQ-MAIN"]["annual_savings"] > 0
    again = json.loads(run(db, "demo", "--no-serve", "--json").stdout)
    assert all(f["status"] == "unchanged" for f in again["files"])


def test_size_site_per_meter_and_central(demo_db):
    per = json.loads(run(demo_db, "size", "--site", "Kestrel Quay Cold Store", "--mode", "per-meter", "--tariff",
                         "harrowgate_industrial_tou", "--fixed", "50", "--json").stdout)
    assert per["mode"] == "per_meter" and set(per["scenarios"]) == {"KQ-MAIN", "KQ-DOCKS"}
    assert per["annual_savings"] == pytest.approx(sum(s["annual_savings"] for s in per["scenarios"].values()))
    central = json.loads(run(demo_db, "size", "--site", "Kestrel Quay Cold Store", "--tariff",
                             "harrowgate_industrial_tou", "--fixed", "50", "--json").stdout)
    assert central["mode"] == "central" and list(central["scenarios"]) == ["site"]
    r = run(demo_db, "size", "--meter", "KQ-MAIN", "--site", "X", "--tariff", "harrowgate_industrial_tou",
            "--fixed", "50", rc=2)
    assert "either --meter" in r.stderr


def test_audit_explicit_periods(demo_db, tmp_path):
    periods = tmp_path / "periods.csv"
    periods.write_text("start,end\n2025-01-14,2025-02-13\n2025-02-13,2025-03-15\n")
    d = json.loads(run(demo_db, "audit", "--meter", "KQ-DOCKS", "--tariff", "harrowgate_industrial_tou",
                       "--periods", str(periods), "--json").stdout)
    assert [(p["start"], p["end"]) for p in d["periods"]] == [("2025-01-14", "2025-02-13"), ("2025-02-13", "2025-03-15")]
    bad = tmp_path / "bad.csv"
    bad.write_text("start,end\n2025-01-14,2025-13-01\n")
    r = run(demo_db, "audit", "--meter", "KQ-DOCKS", "--tariff", "harrowgate_industrial_tou", "--periods", str(bad), rc=1)
    assert "line 2, column 'end'" in r.stderr


def test_size_capacitor_voltage_derates_output(demo_db):
    # output scales by (U_site / U_rated)^2: 400 V site, 440 V capacitors -> 0.826 (common practice)
    base = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", "harrowgate_industrial_tou",
                          "--bank", "4x25", "--json").stdout)
    derated = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", "harrowgate_industrial_tou",
                             "--bank", "4x25", "--capacitor-voltage", "440", "--json").stdout)
    assert derated["mean_output_kvar"] < base["mean_output_kvar"]
    assert derated["annual_savings"] < base["annual_savings"]
    leading = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", "harrowgate_industrial_tou",
                             "--bank", "4x25", "--leading-limit", "0.97", "--json").stdout)
    assert leading["request"]["leading_pf_limit"] == 0.97
