"""Exports: CSV, XLSX and the self-contained HTML report, from the service and from the CLI."""
from __future__ import annotations

import csv
import io
import re

import numpy as np
import pandas as pd
import pytest
from conftest import DEMO_SCENARIO

from auditor.correction import CAUTIONS
from auditor.errors import NotFoundError, UsageError
from auditor.services.correction import get_scenario
from auditor.services.demo import DEMO_TARIFF
from auditor.services.meters import load_meter
from auditor.services.report import (
    DISCLAIMER,
    build_report,
    render_csv,
    render_html,
    render_xlsx,
    write_report,
)


def read_csv(data: bytes) -> list[dict]:
    return list(csv.DictReader(io.StringIO(data.decode("utf-8"))))


def monthly_sums(store, meter: str) -> pd.DataFrame:
    """kWh and lagging kvarh per local calendar month, straight from the interval frame with
    pandas (independent of the audit's own period arithmetic)."""
    d = load_meter(store, meter)
    local = d.frame.tz_convert(d.timezone)
    g = local.groupby(local.index.strftime("%Y-%m"))
    return g[["kwh", "kvarh_lag"]].sum()


def test_csv_periods_match_the_interval_data(demo_db):
    rows = read_csv(render_csv(build_report(demo_db, "KQ-MAIN", DEMO_TARIFF, with_profile=False)))
    sums = monthly_sums(demo_db, "KQ-MAIN")
    assert [r["Period"] for r in rows] == list(sums.index)
    np.testing.assert_allclose([float(r["Energy (kWh)"]) for r in rows], sums["kwh"], atol=1e-6)
    np.testing.assert_allclose([float(r["Lagging (kvarh)"]) for r in rows], sums["kvarh_lag"], atol=1e-6)
    # energy PF = kWh / sqrt(kWh² + kvarh²) (IEEE Std 1459-2010, applied to period energies)
    pf = sums["kwh"] / np.hypot(sums["kwh"], sums["kvarh_lag"])
    np.testing.assert_allclose([float(r["Energy PF"]) for r in rows], pf, rtol=1e-6)
    # the charges add up to the total of each row
    charge_cols = [k for k in rows[0] if k.endswith("(EUR)") and k not in ("Reactive charges (EUR)", "Total (EUR)")]
    # headers are words with units, never raw keys
    assert "Reactive daytime (EUR)" in rows[0] and not any("_" in k for k in rows[0])
    for r in rows:
        np.testing.assert_allclose(sum(float(r[k]) for k in charge_cols), float(r["Total (EUR)"]), rtol=1e-9)


def test_csv_gap_shows_as_coverage(demo_db):
    rows = {r["Period"]: r for r in read_csv(render_csv(build_report(demo_db, "KQ-MAIN", DEMO_TARIFF, with_profile=False)))}
    # October 2025 (31 days + the 25-hour DST day = 2980 intervals) lacks one whole day of 96 intervals
    np.testing.assert_allclose(float(rows["2025-10"]["Coverage (%)"]), 100 * (2980 - 96) / 2980, atol=1e-6)  # CSV keeps 6 decimals
    assert float(rows["2025-01"]["Coverage (%)"]) == 100.0


def test_csv_of_a_scenario_is_before_and_after(demo_db):
    saved = get_scenario(demo_db, DEMO_SCENARIO)["result"]
    rows = read_csv(render_csv(build_report(demo_db, "KQ-MAIN", DEMO_TARIFF, DEMO_SCENARIO, with_profile=False)))
    assert len(rows) == len(saved["before"])
    savings = [float(r["Saving (EUR)"]) for r in rows]
    before = [float(r["Total before (EUR)"]) for r in rows]
    after = [float(r["Total after (EUR)"]) for r in rows]
    np.testing.assert_allclose(savings, np.subtract(before, after), atol=1e-6)
    # the scenario's annual saving is the audited saving scaled to 365.25 days
    np.testing.assert_allclose(sum(savings) * 365.25 / saved["audited_days"], saved["annual_savings"], rtol=1e-9)


def test_xlsx_sheets_and_values(demo_db):
    from openpyxl import load_workbook

    report = build_report(demo_db, "KQ-MAIN", DEMO_TARIFF, DEMO_SCENARIO, with_profile=False)
    wb = load_workbook(io.BytesIO(render_xlsx(report)))
    assert wb.sheetnames[:3] == ["Summary", "Periods", "Peak times"]
    for name in ("Before-after", "Savings", "Cash flow", "Screening", "Cautions", "Data warnings"):
        assert name in wb.sheetnames
    ws = wb["Periods"]
    header = [c.value for c in ws[1]]
    assert header[0] == "Period" and "Energy (kWh)" in header
    col = header.index("Energy (kWh)")
    sums = monthly_sums(demo_db, "KQ-MAIN")
    values = [ws.cell(row=i + 2, column=col + 1).value for i in range(len(sums))]
    np.testing.assert_allclose(values, sums["kwh"], rtol=1e-9)
    assert ws.cell(row=2, column=col + 1).number_format == "#,##0"
    cov = header.index("Coverage (%)") + 1
    assert ws.cell(row=2, column=cov).value == 1.0 and ws.cell(row=2, column=cov).number_format == "0.0%"
    assert ws.freeze_panes == "B2"
    cautions = [r[0].value for r in wb["Cautions"].iter_rows(min_row=2)]
    assert cautions == list(CAUTIONS)
    about = {r[0].value: r[1].value for r in wb["Summary"].iter_rows() if r[0].value}
    assert about["Scenario"] == DEMO_SCENARIO and about["Note"] == DISCLAIMER
    cf = wb["Cash flow"]
    saved = get_scenario(demo_db, DEMO_SCENARIO)["result"]
    assert cf.max_row == 1 + len(saved["cash_flow"])
    # the case's audit is the one it was computed on: the scenario's own periods
    assert ws.max_row == 1 + len(saved["before"])


def test_html_report_is_self_contained(demo_db):
    from plotly.offline import get_plotlyjs

    html = render_html(build_report(demo_db, "KQ-MAIN", DEMO_TARIFF, DEMO_SCENARIO))
    assert get_plotlyjs() in html  # plotly.js embedded whole
    page = html.replace(get_plotlyjs(), "")  # (its own source mentions web addresses in strings)
    # nothing to fetch: no external script, stylesheet or image
    assert not re.search(r"<script[^>]+src=", page)
    assert not re.search(r"<link[^>]+href=", page)
    assert not re.search(r"(src|href)=\"https?://", page)
    for fig in ("pf", "reactive", "peaks", "heatmap", "duration", "before_after", "savings", "cashflow"):
        assert f'data-figure="fig-{fig}"' in html
    for c in CAUTIONS:
        assert c in html
    assert DISCLAIMER in html and "does not certify" in html
    assert DEMO_SCENARIO in html


def test_html_audit_report_without_scenario_still_carries_cautions(demo_db):
    html = render_html(build_report(demo_db, "AR-01", DEMO_TARIFF))
    assert "Reactive energy audit" in html
    assert CAUTIONS[0] in html
    assert 'data-figure="fig-before_after"' not in html


def test_scenario_of_another_meter_is_refused(demo_db):
    with pytest.raises(UsageError, match="is for meter KQ-MAIN"):
        build_report(demo_db, "KQ-DOCKS", DEMO_TARIFF, DEMO_SCENARIO)


def test_scenario_under_another_tariff_is_refused(demo_db):
    with pytest.raises(UsageError, match="computed under tariff"):
        build_report(demo_db, "KQ-MAIN", "millbrook_commercial_pf", DEMO_SCENARIO)


def test_unknown_scenario(demo_db):
    with pytest.raises(NotFoundError, match="no saved scenario"):
        build_report(demo_db, "KQ-MAIN", DEMO_TARIFF, "no such scenario")


def test_write_report_picks_the_format_from_the_suffix(demo_db, tmp_path):
    for suffix, magic in ((".csv", b"Period,"), (".xlsx", b"PK"), (".html", b"<!doctype html>")):
        out = write_report(demo_db, "KQ-DOCKS", DEMO_TARIFF, tmp_path / f"r{suffix}")
        assert out.read_bytes().startswith(magic)
    with pytest.raises(UsageError, match=r"must end in \.html, \.pdf, \.xlsx or \.csv"):
        write_report(demo_db, "KQ-DOCKS", DEMO_TARIFF, tmp_path / "r.docx")


# --------------------------------------------------------------------------------------------
# the CLI
# --------------------------------------------------------------------------------------------
def run_cli(args: list[str]) -> int:
    from auditor.cli import main

    with pytest.raises(SystemExit) as exc:
        main(args)
    return exc.value.code


def test_cli_report(demo_db, tmp_path, capsys):
    out = tmp_path / "case.xlsx"
    code = run_cli(["--db", demo_db.url, "report", "--meter", "KQ-MAIN", "--tariff", DEMO_TARIFF,
                    "--scenario", DEMO_SCENARIO, "--out", str(out)])
    assert code == 0
    assert "wrote" in capsys.readouterr().out
    from openpyxl import load_workbook

    assert "Before-after" in load_workbook(out).sheetnames


def test_cli_report_takes_the_scenarios_tariff(demo_db, tmp_path):
    out = tmp_path / "case.csv"
    assert run_cli(["--db", demo_db.url, "report", "--meter", "KQ-MAIN", "--scenario", DEMO_SCENARIO,
                    "--out", str(out)]) == 0
    assert read_csv(out.read_bytes())[0]["Period"] == "2025-01"


def test_cli_report_errors(demo_db, tmp_path, capsys):
    assert run_cli(["--db", demo_db.url, "report", "--meter", "KQ-MAIN", "--out", str(tmp_path / "x.csv")]) == 2
    # without --tariff the meter's own tariff is used; KQ-MAIN has none: the error says how to give one
    err = capsys.readouterr().err
    assert "meter KQ-MAIN has no tariff of its own" in err and "--tariff FILE" in err
    assert run_cli(["--db", demo_db.url, "report", "--meter", "KQ-MAIN", "--tariff", DEMO_TARIFF,
                    "--out", str(tmp_path / "x.docx")]) == 2
    assert "must end in" in capsys.readouterr().err
    assert run_cli(["--db", demo_db.url, "report", "--meter", "NOPE", "--tariff", DEMO_TARIFF,
                    "--out", str(tmp_path / "x.csv")]) == 1
    assert "no meter 'NOPE'" in capsys.readouterr().err


# --------------------------------------------------------------------------------------------
# serve: binding rules
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("host, loopback", [("127.0.0.1", True), ("127.8.0.1", True), ("::1", True),
                                            ("localhost", True), ("0.0.0.0", False), ("192.168.1.20", False),
                                            ("::", False), ("example.org", False)])
def test_is_loopback(host, loopback):
    from auditor.commands.serve import is_loopback

    assert is_loopback(host) is loopback


def test_serve_beyond_loopback_needs_a_token(demo_db, capsys, monkeypatch):
    from auditor.commands.serve import check_binding

    monkeypatch.delenv("AUDITOR_TOKEN", raising=False)
    with pytest.raises(UsageError, match="give --token"):
        check_binding("0.0.0.0", None)
    with pytest.raises(UsageError, match="at least 12"):
        check_binding("0.0.0.0", "short")
    check_binding("0.0.0.0", "long-enough-token")
    check_binding("127.0.0.1", None)
    assert run_cli(["--db", demo_db.url, "serve", "--host", "0.0.0.0", "--port", "0"]) == 2
    assert "give --token" in capsys.readouterr().err


def test_make_server_serves_with_waitress(demo_db, tmp_path):
    import urllib.request

    from tests.test_web_browser import serving

    with serving(demo_db, tmp_path / "i") as base, urllib.request.urlopen(f"{base}/tariffs", timeout=30) as r:
        assert r.status == 200
        assert r.headers["Server"] == "pf-auditor"
        assert b"Harrowgate Industrial TOU" in r.read()
