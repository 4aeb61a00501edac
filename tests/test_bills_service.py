"""Bills through the store and the command line: import rules, manual entry, the check's JSON
contract, the dispute summary, and the demo's two planted errors."""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner
from numpy.testing import assert_allclose

from auditor.errors import InputError, NotFoundError, UsageError
from auditor.ingest.pipeline import ImportOptions
from auditor.services.bills import add_bill, check_bills, dispute_summary, import_bills, list_bills
from auditor.services.ingest import import_files
from tests.audit_helpers import TZ, tariff

HEADER = "meter,period_start,period_end,kwh,kvarh,peak_kw,peak_kva,pf,reactive_charge,total"
TARIFF = tariff([{"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.02}])


def _meter_csv(path: Path) -> Path:
    """June and July 2025, hourly, 100 kWh and 60 kvarh lagging every hour (meter M1)."""
    idx = pd.date_range("2025-06-01", "2025-08-01", freq="60min", tz=TZ, inclusive="left")
    df = pd.DataFrame({"meter": "M1", "start": [t.isoformat() for t in idx], "kwh": 100.0, "kvarh_lag": 60.0,
                       "kvarh_lead": 0.0})
    df.to_csv(path, index=False)
    return path


@pytest.fixture
def loaded(store, tmp_path):
    import_files(store, [_meter_csv(tmp_path / "m1.csv")], ImportOptions(site="Test site", timezone=TZ))
    return store


def _bills(tmp_path, *rows, name="bills.csv") -> Path:
    p = tmp_path / name
    p.write_text("\n".join([HEADER, *rows]) + "\n", encoding="utf-8")
    return p


# June by hand (common practice arithmetic): 72,000 kWh, 43,200 kvarh, PF 0.86, reactive 288,
# total 8,488. July: 744 hours, 74,400 kWh, 44,640 kvarh, reactive (44,640 - 29,760) x 0.02 = 297.6,
# total 7,440 + 1,000 + 297.6 = 8,737.6.
JUNE = "M1,2025-06-01,2025-07-01,72000,43200,100,116.62,0.86,288.00,8488.00"
JULY = "M1,2025-07-01,2025-08-01,74400,44640,100,116.62,0.86,297.60,8737.60"


def test_import_then_reimport_changes_nothing(loaded, tmp_path):
    p = _bills(tmp_path, JUNE, JULY)
    first = import_bills(loaded, p)
    assert (first["status"], first["inserted"], first["unchanged"]) == ("imported", 2, 0)
    again = import_bills(loaded, p)
    assert again["status"] == "unchanged" and "nothing changed" in again["message"]
    assert len(list_bills(loaded)) == 2
    # another file with the same bills: nothing changes either, and it says so
    same = import_bills(loaded, _bills(tmp_path, JULY, JUNE, name="copy.csv"))
    assert (same["status"], same["inserted"], same["unchanged"]) == ("unchanged", 0, 2)
    assert "nothing changed" in same["message"]


def test_newer_file_updates_the_same_period_and_says_so(loaded, tmp_path):
    import_bills(loaded, _bills(tmp_path, JUNE, JULY))
    res = import_bills(loaded, _bills(tmp_path, JUNE.replace("8488.00", "8600.00"), name="reissue.csv"))
    assert res["status"] == "updated" and res["inserted"] == 0
    (u,) = res["updated"]
    assert u["period_start"] == "2025-06-01" and u["changes"] == {"total": {"was": 8488.0, "now": 8600.0}}
    assert "replaced by this newer file" in res["message"]
    june = [b for b in list_bills(loaded, "M1") if b["period_start"] == "2025-06-01"][0]
    assert june["total"] == 8600.0 and june["source"] == "reissue.csv" and june["line"] == 2


def test_unknown_meter_is_an_error_naming_line_and_column(loaded, tmp_path):
    with pytest.raises(InputError) as exc:
        import_bills(loaded, _bills(tmp_path, JUNE, "NOPE,2025-06-01,2025-07-01,1,,,,,,"))
    assert [(p.line, p.column) for p in exc.value.problems] == [(3, "meter")]
    assert "M1" in exc.value.message  # the known meters are listed
    assert list_bills(loaded) == []  # nothing of the file was stored


def test_manual_entry(loaded):
    res = add_bill(loaded, "M1", "2025-06-01", "2025-07-01", kwh=72000, total=8488)
    assert res["status"] == "imported"
    assert list_bills(loaded)[0]["source"] == "manual entry"
    assert add_bill(loaded, "M1", "2025-06-01", "2025-07-01", kwh=72000, total=8500)["status"] == "updated"
    with pytest.raises(InputError) as exc:
        add_bill(loaded, "M1", "2025-06-01", "2025-05-01")
    assert exc.value.problems[0].column == "period_end"


def test_check_contract_and_findings(loaded, tmp_path):
    wrong = "M1,2025-07-01,2025-08-01,93000,55800,125,145.78,0.86,372.00,10922.00"  # 1.25 x July
    import_bills(loaded, _bills(tmp_path, JUNE, wrong))
    d = check_bills(loaded, "M1", TARIFF)
    assert set(d) >= {"meter", "tariff", "currency", "bills", "findings", "total_disputable", "warnings"}
    assert [b["status"] for b in d["bills"]] == ["ok", "findings"]
    assert_allclose(d["bills"][1]["expected"]["total"], 8737.6)
    assert {f["cause"] for f in d["findings"]} == {"multiplier"}
    for f in d["findings"]:
        assert set(f) >= {"period_start", "field", "billed", "expected", "difference", "severity", "cause", "money"}
    assert_allclose(d["total_disputable"], 10922.0 - 8737.6, atol=0.01)
    with pytest.raises(NotFoundError, match="M2"):
        check_bills(loaded, "M2", TARIFF)


def test_check_without_bills_is_a_usage_error(loaded):
    with pytest.raises(UsageError, match="no bills"):
        check_bills(loaded, "M1", TARIFF)


def test_dispute_summary_text_and_escaped_html(loaded, tmp_path):
    import_bills(loaded, _bills(tmp_path, JUNE.replace("288.00", "400.00").replace("8488.00", "8600.00")))
    d = check_bills(loaded, "M1", TARIFF)
    text = dispute_summary(d, "text")
    assert "BILLING QUERY" in text and "112.00 EUR" in text and "reactive charge" in text
    d["tariff"] = "<script>alert(1)</script>"
    page = dispute_summary(d, "html")
    assert "<script>alert" not in page and "&lt;script&gt;" in page
    assert page.count("<tr class=") == len(d["findings"])
    with pytest.raises(UsageError):
        dispute_summary(d, "pdf")


def test_cli_import_check_list_dispute(tmp_path):
    db = f"sqlite:///{tmp_path / 'cli.sqlite3'}"
    from auditor.cli import _load_commands, group
    from auditor.store import open_store

    store = open_store(db)
    import_files(store, [_meter_csv(tmp_path / "m1.csv")], ImportOptions(site="Test site", timezone=TZ))
    store.engine.dispose()
    tfile = tmp_path / "t.toml"
    tfile.write_text('name = "T"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = 0.10\n[demand]\nprice_per_kw = 10.0\n'
                     '[[reactive]]\nkind = "kvarh_excess"\ntan_phi_limit = 0.4\nprice_per_kvarh = 0.02\n')
    _load_commands()
    r = CliRunner()
    bills = _bills(tmp_path, JUNE.replace("8488.00", "9000.00"))
    out = r.invoke(group, ["--db", db, "bills", "import", str(bills), "--json"])
    assert out.exit_code == 0, out.output
    assert json.loads(out.output)["inserted"] == 1
    out = r.invoke(group, ["--db", db, "bills", "check", "--meter", "M1", "--tariff", str(tfile), "--json"])
    assert out.exit_code == 0, out.output  # findings do not make the command fail
    d = json.loads(out.output)
    assert [f["field"] for f in d["findings"]] == ["total"] and d["total_disputable"] == 512.0
    out = r.invoke(group, ["--db", db, "bills", "check", "--meter", "M1", "--tariff", str(tfile),
                           "--tolerance-charge", "10", "--json"])
    assert json.loads(out.output)["findings"] == []
    out = r.invoke(group, ["--db", db, "bills", "list"])
    assert out.exit_code == 0 and "2025-06-01" in out.output
    html_out = tmp_path / "q.html"
    out = r.invoke(group, ["--db", db, "bills", "dispute", "--meter", "M1", "--tariff", str(tfile), "--out", str(html_out)])
    assert out.exit_code == 0 and html_out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    out = r.invoke(group, ["--db", db, "bills", "dispute", "--meter", "M1", "--tariff", str(tfile), "--out",
                           str(tmp_path / "q.pdf")])
    assert out.exit_code != 0


@pytest.mark.slow
def test_demo_finds_the_two_planted_errors_and_the_file_is_reproducible(tmp_path):
    from auditor.demo_data import make_bills
    from auditor.services.bills import demo_bill_check, demo_bills_path
    from auditor.services.demo import load_demo
    from auditor.store import open_store

    store = open_store(f"sqlite:///{tmp_path / 'demo.sqlite3'}")
    load_demo(store)
    out = demo_bill_check(store)
    checks = out["data"]["checks"]
    flagged = {(m, b["period_start"]): tuple(b["causes"]) for m, c in checks.items() for b in c["bills"]
               if b["status"] == "findings"}
    assert flagged == {("KQ-MAIN", "2025-08-05"): ("multiplier",),
                       ("AR-01", "2025-06-16"): ("reactive_above_threshold",)}
    assert_allclose(checks["KQ-MAIN"]["bills"][7]["cause_details"]["multiplier"], 1.25, rtol=1e-3)
    # the bills over the gaps in the demo data are compared with a warning, not a finding
    assert any("2025-10-06" in w and "missing" in w for w in checks["KQ-MAIN"]["warnings"])
    # the summary names each cause as the findings do
    assert "wrong meter multiplier" in out["text"] and "reactive charge above the PF threshold" in out["text"]
    assert [f["cause_label"] for f in checks["AR-01"]["findings"]] == ["reactive charge above the PF threshold"] * 2
    assert checks["AR-01"]["bills"][5]["cause_labels"] == ["reactive charge above the PF threshold"]
    # the numbers the utility printed travel with each bill
    assert checks["KQ-MAIN"]["bills"][7]["account"] == "HG-300418-01"
    assert checks["KQ-MAIN"]["bills"][7]["invoice"] == "HGI-2509-3004181"
    again = demo_bill_check(store)
    assert again["data"]["import"]["status"] == "unchanged"
    rebuilt = tmp_path / "bills.csv"
    make_bills.write(make_bills.build(store), rebuilt)
    assert rebuilt.read_text(encoding="utf-8") == demo_bills_path().read_text(encoding="utf-8")
