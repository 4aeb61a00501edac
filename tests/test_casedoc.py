"""The case document a consultant sends: from the CLI and the dashboard, as PDF (read back with
pypdf), HTML and XLSX (read back with openpyxl), with the summary's figures equal to
``auditor size --json``; the cover; scenarios compared; the finance options through a real
case; formula-like text neutralised in every XLSX and CSV cell, from the web and the CLI."""
from __future__ import annotations

import csv
import io
import json
import os
import re
from html import escape
from pathlib import Path
from urllib.parse import quote

import numpy as np
import numpy_financial as npf
import pytest
from click.testing import CliRunner
from numpy.testing import assert_allclose

from auditor.services.demo import DEMO_TARIFF


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------
def run(args: list[str], env: dict | None = None) -> tuple[int, str, str]:
    """``auditor ARGS`` through :func:`auditor.cli.main`: exit code, stdout, stderr."""
    from auditor.cli import main

    runner = CliRunner()
    old = {k: os.environ.get(k) for k in (env or {})}
    os.environ.update({k: v for k, v in (env or {}).items() if v is not None})
    for k, v in (env or {}).items():
        if v is None:
            os.environ.pop(k, None)
    try:
        with runner.isolation() as (out, err, _):
            try:
                main([str(a) for a in args])
                code = 0
            except SystemExit as exc:
                code = exc.code if isinstance(exc.code, int) else 1
            return code, out.getvalue().decode(), err.getvalue().decode()
    finally:
        for k, v in old.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def need_chromium() -> str:
    """Chromium for the PDF (AUDITOR_CHROMIUM or /usr/bin/chromium), else skip — or fail under
    AUDITOR_REQUIRE_BROWSER=1."""
    path = os.environ.get("AUDITOR_CHROMIUM") or "/usr/bin/chromium"
    if not (Path(path).is_file() and os.access(path, os.X_OK)):
        reason = f"no Chromium at {path} (apt-get install chromium, or set AUDITOR_CHROMIUM)"
        if os.environ.get("AUDITOR_REQUIRE_BROWSER") == "1":
            pytest.fail(reason + " but AUDITOR_REQUIRE_BROWSER=1 demands it")
        pytest.skip(reason)
    return path


def pdf_pages(path: Path) -> list[str]:
    from pypdf import PdfReader

    return [p.extract_text() or "" for p in PdfReader(str(path)).pages]


def flat(text: str) -> str:
    """Text as printed: ligatures (ﬁ) undone, white space collapsed."""
    import unicodedata

    return re.sub(r"\s+", " ", unicodedata.normalize("NFKC", text))


CASE = "case doc 6x25"


@pytest.fixture(scope="module")
def case(demo_db):
    """A saved automatic bank with a cover and the finance items, and its ``size --json``."""
    code, out, err = run(["--db", demo_db.url, "size", "--meter", "KQ-MAIN", "--tariff", DEMO_TARIFF,
                          "--bank", "6x25", "--incentive", "1000", "--replacement-year", "8",
                          "--replacement-cost", "1500", "--tax-rate", "25%", "--depreciation-years", "10",
                          "--discount-rate", "7%", "--save", CASE, "--client", "Kestrel Quay Cold Store Ltd",
                          "--project", "Intake PF correction 2026", "--author", "R. Okafor", "--json"])
    assert code == 0, err
    return json.loads(out)


# --------------------------------------------------------------------------------------------
# the finance items through a real case
# --------------------------------------------------------------------------------------------
def test_case_json_carries_the_finance_items(case):
    assert case["incentive"] == 1000.0 and case["replacement_year"] == 8 and case["tax_rate"] == 0.25
    assert case["discount_rate"] == 0.07  # "7%" on the command line
    flows = np.array([r["net"] for r in case["cash_flow"]])
    # Source: numpy-financial npv and irr over the case's own cash flow rows
    assert_allclose(case["npv"], npf.npv(0.07, flows), rtol=1e-12)
    assert_allclose(case["irr"], npf.irr(flows), rtol=1e-9)
    # hand: year 0 = -capex + incentive; year 8 carries the replacement
    assert_allclose(flows[0], -case["capex"] + 1000.0)
    assert case["cash_flow"][8]["replacement"] == 1500.0
    # the line-loss reduction is shown apart and, by default, not in the flows
    assert case["loss_reduction_kwh_per_year"] > 0 and not case["loss_reduction_counted"]
    assert all(r["loss_reduction"] == 0.0 for r in case["cash_flow"])
    factors = {r["factor"] for r in case["sensitivity"]}
    assert {"load", "prices", "capex", "incentive", "replacement cost", "tax rate", "loss reduction"} <= factors


def test_rates_as_fraction_or_percent_agree_and_a_bare_percent_is_refused(demo_db):
    base = ["--db", demo_db.url, "size", "--meter", "KQ-DOCKS", "--tariff", DEMO_TARIFF, "--fixed", "25", "--json"]
    a = json.loads(run(base + ["--discount-rate", "0.06", "--escalation", "0.02"])[1])
    b = json.loads(run(base + ["--discount-rate", "6%", "--escalation", "2 %"])[1])
    assert a["npv"] == b["npv"] and a["discount_rate"] == 0.06 and b["escalation"] == 0.02
    code, _, err = run(base + ["--discount-rate", "6"])
    assert code == 2 and "write 6%" in err and "Traceback" not in err
    code, _, err = run(base + ["--tax-rate", "abc"])
    assert code == 2 and "not a number" in err
    code, _, err = run(base + ["--client", "X"])  # a cover without --save
    assert code == 2 and "--save" in err


# --------------------------------------------------------------------------------------------
# PDF
# --------------------------------------------------------------------------------------------
@pytest.mark.browser
def test_pdf_from_the_cli_holds_the_summary_of_size_json(demo_db, case, tmp_path):
    need_chromium()
    out = tmp_path / "case.pdf"
    code, _, err = run(["--db", demo_db.url, "report", "--scenario", CASE, "--out", out])
    assert code == 0, err
    from pypdf import PdfReader

    reader = PdfReader(str(out))
    # one section a page at least: cover, summary, specification, audit, charts (2+), finance,
    # screening, data quality, cautions, method
    assert len(reader.pages) >= 10
    assert_allclose([float(reader.pages[0].mediabox.width), float(reader.pages[0].mediabox.height)],
                    [595.28, 841.89], atol=1.5)  # A4 in points (ISO 216: 210 × 297 mm)
    pages = [flat(t) for t in pdf_pages(out)]
    cover, summary = pages[0], pages[1]
    for text in ("Kestrel Quay Cold Store Ltd", "Intake PF correction 2026", "R. Okafor", CASE):
        assert text in cover
    assert "Summary" in summary
    cur = case["currency"]
    # the summary's figures are size --json's, as printed
    assert f"{case['annual_savings']:,.2f} {cur}" in summary
    assert f"{case['capex']:,.2f} {cur}" in summary
    assert f"{case['npv']:,.2f} {cur}" in summary
    assert f"{case['simple_payback_years']:,.1f} years" in summary
    assert f"{100 * case['irr']:,.1f} %" in summary
    assert f"{case['pf_before']:.3f}" in summary and f"{case['pf_after']:.3f}" in summary
    assert f"{case['capacity']['released_kva']:,.1f} kVA" in summary
    verdict = "passed" if case["screening"]["passed"] else "not passed"
    assert f"Screening {verdict}" in summary
    text = " ".join(pages)
    for heading in ("Specification", "Audit by billing period", "Finance", "Screening and harmonics",
                    "Data quality", "Cautions", "Method and sources"):
        assert heading in text
    # peak times in local time with the zone named (the demo site is in Europe/Berlin)
    assert "Peak at (Europe/Berlin)" in text and re.search(r"2025-01-\d\d \d\d:\d\d CET", text)
    assert re.search(r"2025-07-\d\d \d\d:\d\d CEST", text)
    # the charts are on paper: plotly's SVG text (axis titles) is in the PDF
    assert "share of intervals" in text and "Cash flow over the life of the bank" in text


@pytest.mark.browser
def test_pdf_letter_paper(demo_db, case, tmp_path):
    need_chromium()
    out = tmp_path / "case-letter.pdf"
    assert run(["--db", demo_db.url, "report", "--scenario", CASE, "--paper", "letter", "--out", out])[0] == 0
    from pypdf import PdfReader

    box = PdfReader(str(out)).pages[0].mediabox
    assert_allclose([float(box.width), float(box.height)], [612, 792], atol=1.5)  # 8.5 × 11 in


def test_pdf_without_chromium_says_what_to_install(demo_db, case, tmp_path):
    out = tmp_path / "x.pdf"
    code, _, err = run(["--db", demo_db.url, "report", "--scenario", CASE, "--out", out],
                       env={"AUDITOR_CHROMIUM": None, "PATH": str(tmp_path)})
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "apt-get install chromium" in err
    assert not out.exists()
    code, _, err = run(["--db", demo_db.url, "report", "--scenario", CASE, "--out", out],
                       env={"AUDITOR_CHROMIUM": str(tmp_path / "nothing-here")})
    assert code == 2 and "AUDITOR_CHROMIUM" in err and not out.exists()


# --------------------------------------------------------------------------------------------
# XLSX and CSV
# --------------------------------------------------------------------------------------------
def summary_block(ws, title: str) -> dict:
    """{item: (value, unit, cell)} of one titled block of the Summary sheet."""
    rows = list(ws.iter_rows())
    start = next(i for i, r in enumerate(rows) if r[0].value == title)
    out = {}
    for r in rows[start + 2:]:
        if r[0].value is None:
            break
        out[r[0].value] = (r[1].value, r[2].value if len(r) > 2 else None, r[1])
    return out


def test_xlsx_summary_first_with_the_figures_of_size_json(demo_db, case, tmp_path):
    from openpyxl import load_workbook

    out = tmp_path / "case.xlsx"
    assert run(["--db", demo_db.url, "report", "--scenario", CASE, "--out", out])[0] == 0
    wb = load_workbook(out)
    assert wb.sheetnames[0] == "Summary"
    for name in ("Periods", "Peak times", "Before-after", "Savings", "Cash flow", "Sensitivity", "Assumptions",
                 "Screening", "Data quality", "Cautions"):
        assert name in wb.sheetnames
    ws = wb["Summary"]
    assert ws.freeze_panes == "A3"
    figures = summary_block(ws, "Figures")
    cur = case["currency"]
    value, unit, cell = figures["Saving a year (tariff, first year)"]
    assert value == pytest.approx(case["annual_savings"], rel=1e-12) and unit == cur
    assert cell.number_format == f'#,##0.00 "{cur}"'
    assert figures["Capex (installed)"][0] == pytest.approx(case["capex"], rel=1e-12)
    npv_key = next(k for k in figures if k.startswith("NPV"))
    assert figures[npv_key][0] == pytest.approx(case["npv"], rel=1e-12)
    assert figures["IRR"][0] == pytest.approx(case["irr"], rel=1e-9)  # stored as a fraction…
    assert figures["IRR"][2].number_format == "0.0%"  # …shown as percent
    assert figures["Energy PF after"][0] == pytest.approx(case["pf_after"], rel=1e-12)
    assert figures["Simple payback"][0] == pytest.approx(case["simple_payback_years"], rel=1e-12)
    case_block = summary_block(ws, "Case")
    assert case_block["Client"][0] == "Kestrel Quay Cold Store Ltd" and case_block["Author"][0] == "R. Okafor"
    assumptions = summary_block(ws, "Assumptions")
    assert assumptions["Incentive or rebate"][0] == 1000.0
    assert assumptions["Profit tax rate"][0] == pytest.approx(0.25)
    assert assumptions["Discount rate"][0] == pytest.approx(0.07)
    # the screening verdict heads its block; the specification follows with the figures of size --json
    rows = list(ws.iter_rows(values_only=True))
    titles = [r[0] for r in rows if r[0]]
    assert any(str(t).startswith("Screening: ") for t in titles)
    start = next(i for i, r in enumerate(rows) if str(r[0] or "").startswith("Specification"))
    assert rows[start + 1][:5] == ("Section", "Item", "Value", "Unit", "Note")
    spec_rows = case["specification"]["rows"]
    assert spec_rows
    for want, got in zip(spec_rows, rows[start + 2:start + 2 + len(spec_rows)], strict=True):
        assert got[1] == want["label"]
        if isinstance(want["value"], int | float) and not isinstance(want["value"], bool):
            assert got[2] == pytest.approx(want["value"], rel=1e-12)
        else:
            assert got[2] == want["value"]
    # the detail sheets: frozen headers, headers in words with units, lists as rows
    cf = wb["Cash flow"]
    assert cf.freeze_panes in ("A2", "B2")
    header = [c.value for c in cf[1]]
    assert f"Tariff saving ({cur})" in header and f"Replacement ({cur})" in header and f"Tax ({cur})" in header
    assert not any("_" in str(h) for h in header)
    assert cf.max_row == 1 + len(case["cash_flow"])
    net = header.index(f"Net ({cur})") + 1
    assert_allclose([cf.cell(row=i + 2, column=net).value for i in range(len(case["cash_flow"]))],
                    [r["net"] for r in case["cash_flow"]])
    stages = case["screening"].get("resonance_orders_by_stage") or []
    if stages:
        rs = wb["Resonance by stage"]
        assert [rs.cell(row=i + 2, column=2).value for i in range(len(stages))] == pytest.approx(stages)
    widths = [wb["Periods"].column_dimensions[c].width for c in "ABCD"]
    assert all(8 <= w <= 60 for w in widths)


def test_specification_and_rules_render_when_present(demo_db, tmp_path):
    """A case carrying ``screening.rules`` and ``specification.rows`` (the correction's JSON
    contract) shows them in the HTML and the XLSX, rules failing first."""
    from openpyxl import load_workbook

    from auditor.services import report as rp

    base = rp.build_case(demo_db, "demo fixed 150", with_profile=False)
    result = json.loads(json.dumps(base.scenario))
    result["screening"]["rules"] = [
        {"rule": "voltage_rise", "status": "pass", "value": 1.2, "limit": 3.0, "unit": "%", "message": "fine"},
        {"rule": "parallel_resonance", "status": "fail", "value": 5.1, "limit": 4.5, "unit": "h",
         "message": "resonance at 5.1, near the 5th harmonic"},
    ]
    result["screening"]["passed"] = False
    result["specification"] = {"recommended": False, "rows": [
        {"section": "Ratings", "label": "Capacitor rated voltage", "value": 440, "unit": "V", "note": "standard rating"},
        {"section": "Controller", "label": "Switching delay", "value": 30, "unit": "s", "note": "from memory"},
    ]}
    result["harmonics"] = {"source": "measured", "note": "survey of 2026-03", "thd_v_pct_without": 2.1,
                           "thd_v_pct_with": 4.3, "orders": [{"order": 5, "current_a": 12.0}, {"order": 7, "current_a": 6.0}]}
    from dataclasses import replace

    report = replace(base, scenario=result)
    html = rp.render_html(report)
    rules = html[html.index('id="rules"'):]
    assert rules.index("parallel resonance") < rules.index("voltage rise")  # failing first
    assert "Capacitor rated voltage" in html and "Switching delay" in html
    assert "not recommended as it stands" in html and "Do not install" in html
    assert "survey of 2026-03" in html and "current a" in html
    assert "No specification" not in html
    wb = load_workbook(io.BytesIO(rp.render_xlsx(report)))
    spec = [[c.value for c in r] for r in wb["Specification"].iter_rows(min_row=2)]
    assert spec[0] == ["Ratings", "Capacitor rated voltage", 440, "V", "standard rating"]
    summary = [[c.value for c in r] for r in wb["Summary"].iter_rows()]
    flat_cells = [v for r in summary for v in r if v is not None]
    assert "Capacitor rated voltage" in flat_cells and "Screening: not passed — fails parallel resonance" in flat_cells
    assert [r[0].value for r in wb["Screening"].iter_rows(min_row=4)][:2] == ["parallel resonance", "voltage rise"]
    assert [r[0].value for r in wb["Harmonics"].iter_rows(min_row=2)] == [5, 7]


def test_csv_headers_in_words_with_units(demo_db, case, tmp_path):
    out = tmp_path / "case.csv"
    assert run(["--db", demo_db.url, "report", "--scenario", CASE, "--out", out])[0] == 0
    rows = list(csv.reader(io.StringIO(out.read_text(encoding="utf-8"))))
    cur = case["currency"]
    assert rows[0][:3] == ["Period", "PF before", "PF after"] and f"Saving ({cur})" in rows[0]
    assert len(rows) == 1 + len(case["before"])


# --------------------------------------------------------------------------------------------
# HTML and the cover
# --------------------------------------------------------------------------------------------
def test_html_case_document_sections_and_cover(demo_db, case, tmp_path):
    out = tmp_path / "case.html"
    assert run(["--db", demo_db.url, "report", "--scenario", CASE, "--out", out, "--author", "J. Mbeki"])[0] == 0
    html = out.read_text(encoding="utf-8")
    for sid in ("cover", "summary", "specification", "audit", "charts", "finance", "screening", "quality",
                "cautions", "method"):
        assert '<section class="sheet' in html and f'id="{sid}"' in html
    assert "J. Mbeki" in html  # the cover changed from the report command is stored
    from auditor.services.report import scenario_cover

    assert scenario_cover(demo_db, CASE)["author"] == "J. Mbeki"
    # the specification section holds the rows of size --json
    assert "No specification" not in html
    section = html.split('id="specification"', 1)[1].split("</section>", 1)[0]
    for row in case["specification"]["rows"]:
        assert escape(str(row["label"])) in section
    assert "@page { size: A4 portrait" in html
    from auditor.correction import CAUTIONS

    for c in CAUTIONS:
        assert c in html


def test_cover_is_edited_on_the_saved_scenario_page(client, demo_db, case):
    from auditor.services.report import scenario_cover

    page = client.get(f"/scenarios/{quote(CASE)}").get_data(as_text=True)
    assert 'id="cover-form"' in page and "Kestrel Quay Cold Store Ltd" in page
    token = re.search(r'name="csrf_token" type="hidden" value="([^"]+)"', page).group(1)
    r = client.post("/case/cover", data={"csrf_token": token, "name": CASE, "client": "Tern Harbour Foods",
                                         "project": "Intake PF correction 2026", "author": "R. Okafor"})
    assert r.status_code == 302
    assert scenario_cover(demo_db, CASE)["client"] == "Tern Harbour Foods"
    html = client.get(f"/case.html?scenario={quote(CASE)}").get_data(as_text=True)
    assert "Tern Harbour Foods" in html
    r = client.post("/case/cover", data={"csrf_token": token, "name": CASE, "client": "x" * 300})
    assert r.status_code == 302 and scenario_cover(demo_db, CASE)["client"] == "Tern Harbour Foods"


def test_case_downloads_from_the_dashboard(client, case):
    from openpyxl import load_workbook

    r = client.get(f"/case.xlsx?scenario={quote(CASE)}")
    assert r.status_code == 200 and r.headers["Content-Disposition"].endswith('.xlsx"')
    assert load_workbook(io.BytesIO(r.data)).sheetnames[0] == "Summary"
    r = client.get(f"/case.html?scenario={quote(CASE)}&paper=letter")
    assert r.status_code == 200 and "nonce-" in r.headers["Content-Security-Policy"]
    assert "@page { size: letter portrait" in r.get_data(as_text=True)
    assert client.get(f"/case.csv?scenario={quote(CASE)}").status_code == 200
    assert client.get(f"/case.docx?scenario={quote(CASE)}").status_code == 404
    assert client.get(f"/case.html?scenario={quote(CASE)}&paper=a3").status_code == 400
    assert client.get("/case.html?scenario=no-such-case").status_code == 404


@pytest.mark.browser
def test_pdf_button_of_the_dashboard(client, case):
    need_chromium()
    r = client.get(f"/case.pdf?scenario={quote(CASE)}")
    assert r.status_code == 200 and r.mimetype == "application/pdf" and r.data.startswith(b"%PDF")
    from pypdf import PdfReader

    summary = flat(PdfReader(io.BytesIO(r.data)).pages[1].extract_text())
    assert f"{case['annual_savings']:,.2f}" in summary


# --------------------------------------------------------------------------------------------
# scenarios compared
# --------------------------------------------------------------------------------------------
def test_scenarios_compare_cli(demo_db, case, tmp_path):
    from conftest import DEMO_SCENARIO
    from openpyxl import load_workbook

    code, out, err = run(["--db", demo_db.url, "scenarios", "compare", DEMO_SCENARIO, CASE, "--json"])
    assert code == 0, err
    cmp = json.loads(out)
    rows = {r["key"]: r["values"] for r in cmp["rows"]}
    assert rows["npv"][1] == case["npv"] and rows["annual_savings"][1] == case["annual_savings"]
    assert rows["pf_after"][1] == case["pf_after"] and rows["design"][1].startswith("automatic 6x25")
    assert set(cmp["cash_flows"]) == {DEMO_SCENARIO, CASE}
    code, text, _ = run(["--db", demo_db.url, "scenarios", "compare", DEMO_SCENARIO, CASE])
    assert code == 0 and "NPV" in text and CASE in text
    xlsx = tmp_path / "cmp.xlsx"
    assert run(["--db", demo_db.url, "scenarios", "compare", DEMO_SCENARIO, CASE, "--out", xlsx])[0] == 0
    ws = load_workbook(xlsx)["Comparison"]
    assert [c.value for c in ws[1]] == ["Item", "Unit", DEMO_SCENARIO, CASE]
    npv_row = next(r for r in ws.iter_rows(min_row=2) if r[0].value == "NPV")
    assert npv_row[3].value == pytest.approx(case["npv"])
    assert run(["--db", demo_db.url, "scenarios", "compare", CASE])[0] == 2
    assert run(["--db", demo_db.url, "scenarios", "compare", CASE, CASE])[0] == 2
    code, _, err = run(["--db", demo_db.url, "scenarios", "compare", CASE, "no such"])
    assert code == 1 and "no saved scenario" in err


def test_compare_page_and_exports(client, case):
    from conftest import DEMO_SCENARIO

    q = f"scenario={quote(DEMO_SCENARIO)}&scenario={quote(CASE)}"
    r = client.get(f"/compare?{q}")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert 'id="side-by-side"' in html and 'data-figure="fig-cumulative"' in html
    assert f"{case['npv']:,.2f}" in html
    for fmt in ("html", "xlsx", "csv"):
        assert client.get(f"/compare.{fmt}?{q}").status_code == 200
    # one scenario (a scenario page's "Compare with…"): ticked, with a word on what to do next
    one = client.get(f"/compare?scenario={quote(CASE)}")
    assert one.status_code == 200 and "tick one to three more" in one.get_data(as_text=True)
    five = "&".join(f"scenario=s{i}" for i in range(5))
    assert client.get(f"/compare?{five}").status_code == 400
    assert client.get("/compare").status_code == 200


# --------------------------------------------------------------------------------------------
# formula-like text in spreadsheet cells (web and CLI)
# --------------------------------------------------------------------------------------------
EVIL_SCENARIO = "=HYPERLINK(\"http://example.invalid\",\"x\")"


@pytest.fixture(scope="module")
def evil_db(tmp_path_factory):
    """A meter, site, tariff and scenario whose names a spreadsheet would read as formulas."""
    from auditor.services.ingest import import_files  # noqa: F401 - the importer the CLI uses
    from tests.ingest_helpers import day_rows, write_csv

    folder = tmp_path_factory.mktemp("evil")
    db = f"sqlite:///{folder / 'evil.sqlite3'}"
    rows = []
    for d in range(1, 29):
        rows += day_rows(meter="@M1", day=f"2025-02-{d:02d}", kwh=50.0, lag=40.0)
    data = write_csv(folder / "evil.csv", rows)
    tariff = folder / "evil.toml"
    tariff.write_text((Path(__file__).parent.parent / "auditor" / "tariffs" / "examples" / "millbrook_commercial_pf.toml")
                      .read_text(encoding="utf-8").replace('name = "', 'name = "+cmd|', 1), encoding="utf-8")
    assert run(["--db", db, "import", data, "--site", "-Site 2+3", "--timezone", "UTC"])[0] == 0
    code, _, err = run(["--db", db, "size", "--meter", "@M1", "--tariff", tariff, "--fixed", "20", "--save",
                        EVIL_SCENARIO, "--client", "+44 20 7946 0000", "--json"])
    assert code == 0, err
    assert run(["--db", db, "size", "--meter", "@M1", "--tariff", tariff, "--fixed", "30", "--save", "-2+3 second"])[0] == 0
    return db, tariff


def _no_formula_cells(wb) -> list[str]:
    found = []
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for cell in row:
                if cell.data_type == "f":
                    found.append(f"{ws.title}!{cell.coordinate}={cell.value!r}")
    return found


def test_xlsx_from_the_cli_holds_names_as_text(evil_db, tmp_path):
    from openpyxl import load_workbook

    db, tariff = evil_db
    out = tmp_path / "evil.xlsx"
    assert run(["--db", db, "report", "--scenario", EVIL_SCENARIO, "--out", out])[0] == 0
    wb = load_workbook(out)
    assert _no_formula_cells(wb) == []
    cells = {c.value: c for ws in wb.worksheets for r in ws.iter_rows() for c in r if isinstance(c.value, str)}
    for text in (EVIL_SCENARIO, "@M1", "-Site 2+3", "+44 20 7946 0000"):
        assert text in cells, text
        assert cells[text].data_type == "s" and cells[text].quotePrefix
    assert any(v.startswith("+cmd|") for v in cells)
    # the meter report (no scenario) too
    out2 = tmp_path / "audit.xlsx"
    assert run(["--db", db, "report", "--meter", "@M1", "--tariff", tariff, "--out", out2])[0] == 0
    assert _no_formula_cells(load_workbook(out2)) == []
    cmp = tmp_path / "cmp.xlsx"
    assert run(["--db", db, "scenarios", "compare", "--out", cmp, "--", EVIL_SCENARIO, "-2+3 second"])[0] == 0
    assert _no_formula_cells(load_workbook(cmp)) == []


def test_csv_from_the_cli_neutralises_formula_like_text(evil_db, tmp_path):
    db, _ = evil_db
    out = tmp_path / "cmp.csv"
    assert run(["--db", db, "scenarios", "compare", "--out", out, "--", EVIL_SCENARIO, "-2+3 second"])[0] == 0
    rows = list(csv.reader(io.StringIO(out.read_text(encoding="utf-8"), newline="")))
    header = rows[0]
    assert header[2] == "'" + EVIL_SCENARIO and header[3] == "'-2+3 second"
    values = {r[0]: r[2] for r in rows[1:]}
    assert values["Meter"] == "'@M1" and values["Tariff"].startswith("'+cmd|")
    for r in rows:
        for v in r:
            assert not v or v[0] not in "=+-@\t\r" or v.lstrip("-").replace(".", "").isdigit(), v


def test_exports_from_the_web_hold_names_as_text(evil_db, tmp_path):
    from openpyxl import load_workbook

    from auditor.store import open_store
    from auditor.web import create_app

    db, _ = evil_db
    store = open_store(db)
    try:
        app = create_app({"INSTANCE_PATH": str(tmp_path / "i"), "TESTING": True}, store=store)
        c = app.test_client()
        r = c.get(f"/case.xlsx?scenario={quote(EVIL_SCENARIO, safe='')}")
        assert r.status_code == 200
        wb = load_workbook(io.BytesIO(r.data))
        assert _no_formula_cells(wb) == []
        assert EVIL_SCENARIO in {c.value for ws in wb.worksheets for row in ws.iter_rows() for c in row}
        q = f"scenario={quote(EVIL_SCENARIO, safe='')}&scenario={quote('-2+3 second', safe='')}"
        r = c.get(f"/compare.xlsx?{q}")
        assert r.status_code == 200 and _no_formula_cells(load_workbook(io.BytesIO(r.data))) == []
        r = c.get(f"/compare.csv?{q}")
        header = next(csv.reader(io.StringIO(r.get_data(as_text=True), newline="")))
        assert header[2] == "'" + EVIL_SCENARIO
        r = c.get(f"/case.csv?scenario={quote(EVIL_SCENARIO, safe='')}")
        assert r.status_code == 200
    finally:
        store.dispose()
