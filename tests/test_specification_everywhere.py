"""The specification of a design wherever the design appears, read back from every format and
compared with ``auditor size --json``: the command line's table, the saved-scenario page, the
case document (HTML, PDF, XLSX), the case's CSV (``--table specification``), and the comparison
(page, text, JSON, HTML, PDF, XLSX, CSV). Two designs on the demo: a fixed 150 kvar bank that
fails screening (a "FAILS" row first) and the optimiser's choice (a detuned automatic bank, with
its reactor and controller rows).
"""
from __future__ import annotations

import csv
import io
import json
import re
import unicodedata
from html.parser import HTMLParser
from urllib.parse import quote

import pytest

from tests.test_cli_grammar import invoke

TARIFF = "harrowgate_industrial_tou"
FAILING, OPTIMISED = "spec: fixed 150 kvar", "spec: optimiser's choice"
DESIGNS = {FAILING: ("--fixed", "150"), OPTIMISED: ("--optimise",)}
FIELDS = ("section", "label", "value", "unit", "note")


def json_rows(case: dict) -> list[tuple]:
    """The reference: ``specification.rows`` of ``size --json`` (cautions are their own section
    everywhere else, so they are left out of the tables compared)."""
    return [tuple(str(r[k]) for k in FIELDS) for r in case["specification"]["rows"] if r["section"] != "Cautions"]


@pytest.fixture(scope="module")
def cases(demo_db) -> dict[str, dict]:
    """Each design computed and saved by ``auditor size --save NAME --json``: the JSON printed."""
    out = {}
    for name, design in DESIGNS.items():
        r = invoke("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, *design, "--save", name, "--json", db=demo_db.url)
        assert r.exit_code == 0, r.output
        out[name] = json.loads(r.output)
        assert out[name]["saved_as"] == name and json_rows(out[name])
    assert json_rows(out[FAILING])[0][1].startswith("FAILS ")
    assert any(row[0] == "Detuning" and row[1] == "tuning order" for row in json_rows(out[OPTIMISED]))
    return out


@pytest.fixture(scope="module")
def client(demo_db, tmp_path_factory):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path_factory.mktemp("spec-instance")), "TESTING": True},
                     store=demo_db)
    return app.test_client()


def collapse(text: str) -> str:
    return re.sub(r"\s+", " ", str(text)).strip()


def flat(text: str) -> str:
    """Text as a PDF gives it back: compatibility forms folded (ligatures, superscripts)."""
    return collapse(unicodedata.normalize("NFKC", str(text)))


class Tables(HTMLParser):
    """Every table of a page by id: rows of (tag, text, colspan) cells."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tables: dict[str, list[list[tuple[str, str, int]]]] = {}
        self._stack: list[str] = []
        self._cell: list | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "table":
            self._stack.append(a.get("id") or f"table-{len(self.tables)}")
            self.tables.setdefault(self._stack[-1], [])
        elif tag == "tr" and self._stack:
            self.tables[self._stack[-1]].append([])
        elif tag in ("td", "th") and self._stack:
            self._cell = [tag, "", int(a.get("colspan") or 1)]

    def handle_endtag(self, tag):
        if tag == "table" and self._stack:
            self._stack.pop()
        elif tag in ("td", "th") and self._cell is not None and self._stack:
            self.tables[self._stack[-1]][-1].append((self._cell[0], collapse(self._cell[1]), self._cell[2]))
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell[1] += data


def tables_of(page: str) -> dict:
    p = Tables()
    p.feed(page)
    return p.tables


def rows_with_section_rows(rows: list[list[tuple]], width: int) -> list[list[str]]:
    """Rows of a table whose sections are rows of their own (one cell spanning the table):
    each data row prefixed with its section."""
    out, section = [], None
    for cells in rows:
        if len(cells) == 1 and cells[0][2] > 1:
            section = cells[0][1]
        elif cells and cells[0][0] == "td":
            out.append([section] + [c[1] for c in cells][:width])
    return out


# --------------------------------------------------------------------------------------------
# the command line
# --------------------------------------------------------------------------------------------
def cli_specification(text: str) -> list[tuple]:
    """The "Specification" table of ``auditor size`` read back: columns from the dashes line,
    a line with no section continuing the cells of the row above."""
    lines = text.splitlines()
    start = next(i for i, x in enumerate(lines) if x.startswith("Specification"))
    dashes = lines[start + 2]
    spans = [(m.start(), m.end()) for m in re.finditer(r"-+", dashes)]
    rows: list[list[str]] = []
    for line in lines[start + 3:]:
        if not line.strip() or line.startswith(("warning:", "Harmonics", "Optimiser", "Best ", "Cautions")):
            break
        cells = [line[a:b + 2 if k < len(spans) - 1 else None].strip() if a < len(line) else ""
                 for k, (a, b) in enumerate(spans)]
        if cells[0]:
            rows.append(cells)
        else:
            rows[-1] = [f"{old} {new}".strip() for old, new in zip(rows[-1], cells, strict=True)]
    return [tuple(r) for r in rows]


@pytest.mark.parametrize("name", list(DESIGNS))
def test_the_command_line_table_shows_every_row_uncut(demo_db, cases, name):
    r = invoke("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, *DESIGNS[name], db=demo_db.url)
    assert r.exit_code == 0
    assert cli_specification(r.output) == json_rows(cases[name])
    wide = invoke("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, *DESIGNS[name], "--wide", db=demo_db.url)
    assert cli_specification(wide.output) == json_rows(cases[name])


# --------------------------------------------------------------------------------------------
# the dashboard's saved-scenario page
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", list(DESIGNS))
def test_the_scenario_page(client, cases, name):
    from flask import url_for

    with client.application.test_request_context():
        url = url_for("scenarios.show", name=name)
    page = client.get(url)
    assert page.status_code == 200
    table = tables_of(page.get_data(as_text=True))["specification"]
    got, section = [], None
    for cells in table[1:]:
        texts = [c[1] for c in cells]
        section = texts[0] or section  # the page names a section once
        got.append((section, *texts[1:]))
    assert got == json_rows(cases[name])


# --------------------------------------------------------------------------------------------
# the case document: HTML, PDF, XLSX, CSV
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", list(DESIGNS))
def test_the_case_document_html_xlsx_and_csv(demo_db, cases, name, tmp_path):
    want = json_rows(cases[name])
    html_out, xlsx_out, csv_out = tmp_path / "case.html", tmp_path / "case.xlsx", tmp_path / "spec.csv"
    for out, extra in ((html_out, ()), (xlsx_out, ()), (csv_out, ("--table", "specification"))):
        r = invoke("report", "--scenario", name, "--out", out, *extra, db=demo_db.url)
        assert r.exit_code == 0, r.output
    # HTML: the specification section's table, its sections as rows of their own
    html_rows = rows_with_section_rows(tables_of(html_out.read_text(encoding="utf-8"))["spec-table"], 4)
    assert [tuple(r) for r in html_rows if r[0] != "Cautions"] == want
    # XLSX: the Specification sheet, and the Summary sheet's specification block
    from openpyxl import load_workbook

    book = load_workbook(xlsx_out)
    sheet = [tuple("" if v is None else str(v) for v in r) for r in book["Specification"].iter_rows(min_row=2,
                                                                                                  values_only=True)]
    assert [r for r in sheet if r[0] != "Cautions"] == want
    summary = list(book["Summary"].iter_rows(values_only=True))
    start = next(i for i, r in enumerate(summary) if str(r[0] or "").startswith("Specification"))
    block = [tuple("" if v is None else str(v) for v in r[:5]) for r in summary[start + 2:start + 2 + len(sheet)]]
    assert block == sheet
    # CSV: one table, header in words, the rows as they are
    rows = list(csv.DictReader(io.StringIO(csv_out.read_text(encoding="utf-8"))))
    assert [tuple(r[h] for h in ("Section", "Item", "Value", "Unit", "Note")) for r in rows
            if r["Section"] != "Cautions"] == want


def test_the_case_csv_from_the_dashboard_and_its_summary(client, cases):
    name = OPTIMISED
    r = client.get(f"/case.csv?scenario={quote(name, safe='')}&table=specification")
    assert r.status_code == 200 and "_specification.csv" in r.headers["Content-Disposition"]
    rows = list(csv.DictReader(io.StringIO(r.get_data(as_text=True))))
    assert [tuple(x[h] for h in ("Section", "Item", "Value", "Unit", "Note")) for x in rows
            if x["Section"] != "Cautions"] == json_rows(cases[name])
    summary = list(csv.DictReader(io.StringIO(client.get(
        f"/case.csv?scenario={quote(name, safe='')}&table=summary").get_data(as_text=True))))
    figures = {x["Item"]: x for x in summary if x["Section"] == "Figures"}
    c = cases[name]
    assert float(figures["Saving a year (tariff, first year)"]["Value"]) == pytest.approx(c["annual_savings"], rel=1e-6)
    assert float(figures["Capex (installed)"]["Value"]) == pytest.approx(c["capex"], rel=1e-6)
    assert figures["Design"]["Value"] == "automatic 7x25 kvar, 7 % detuned" == c["bank"]["label"]
    assert {x["Section"] for x in summary} >= {"Case", "Recommendation", "Figures", "Assumptions", "Screening"}
    rules = [x["Item"] for x in summary if x["Section"] == "Screening"]
    assert len(rules) == len(c["screening"]["rules"])
    # the period table stays the default, one header row
    periods = list(csv.DictReader(io.StringIO(client.get(
        f"/case.csv?scenario={quote(name, safe='')}").get_data(as_text=True))))
    assert len(periods) == len(c["before"]) and periods[0]["Period"] == "2025-01"
    assert client.get(f"/case.csv?scenario={quote(name, safe='')}&table=nope").status_code == 400


def test_a_table_is_chosen_for_a_csv_only(demo_db, cases, tmp_path):
    r = invoke("report", "--scenario", OPTIMISED, "--out", tmp_path / "x.xlsx", "--table", "summary", db=demo_db.url)
    assert r.exit_code == 2 and "--table" in r.output


@pytest.mark.browser
def test_the_printed_case_document(demo_db, cases, tmp_path):
    """The PDF, read back with pypdf: every row's item and value in the specification's pages,
    in order."""
    from tests.test_casedoc import need_chromium, pdf_pages

    need_chromium()
    name = FAILING
    out = tmp_path / "case.pdf"
    r = invoke("report", "--scenario", name, "--out", out, db=demo_db.url)
    assert r.exit_code == 0, r.output
    text = " ".join(p for p in map(flat, pdf_pages(out)) if "Specification" in p)
    at = text.index("Specification")
    for _section, label, value, _unit, _note in json_rows(cases[name]):
        for part in (flat(label), flat(value)):
            found = text.find(part, at)
            assert found >= 0, (label, value, part)
        at = text.find(flat(label), at)


# --------------------------------------------------------------------------------------------
# the comparison: JSON, text, page, HTML, PDF, XLSX, CSV
# --------------------------------------------------------------------------------------------
def per_scenario(spec: list[dict], k: int) -> list[tuple]:
    """Scenario k's rows of a side-by-side specification: (section, item, value with its unit)."""
    out = []
    for r in spec:
        v = r["values"][k]
        if v is not None and v != "–":
            out.append((r["section"], r["label"], f"{v} {r['unit']}".strip()))
    return out


def json_value_rows(case: dict) -> list[tuple]:
    return [(s, label, f"{v} {u}".strip()) for s, label, v, u, _ in json_rows(case)]


def test_the_comparison_in_every_format(demo_db, cases, client, tmp_path):
    names = [FAILING, OPTIMISED]
    want = [json_value_rows(cases[n]) for n in names]
    r = invoke("scenarios", "compare", *names, "--json", db=demo_db.url)
    assert r.exit_code == 0, r.output
    spec = json.loads(r.output)["specification"]
    assert [per_scenario(spec, k) for k in range(2)] == want
    # the text: the side-by-side specification read back like size's
    text = invoke("scenarios", "compare", *names, db=demo_db.url).output
    rows = cli_specification(text[text.index("Specification:"):])
    got = [[(s, label, f"{v} {u}".strip()) for s, label, u, *vals in rows for v in [vals[k]] if v != "–"]
           for k in range(2)]
    assert got == want
    assert "Cautions:" in text
    # the page and the HTML document: sections as rows, then item, unit, one value a scenario
    query = "&".join(f"scenario={quote(n, safe='')}" for n in names)
    page = client.get(f"/compare?{query}")
    assert page.status_code == 200
    out = tmp_path / "cmp.html"
    assert invoke("scenarios", "compare", *names, "--out", out, db=demo_db.url).exit_code == 0
    for html in (page.get_data(as_text=True), out.read_text(encoding="utf-8")):
        rows = rows_with_section_rows(tables_of(html)["specification-side-by-side"], 4)
        side = [{"section": r[0], "label": r[1], "unit": r[2], "values": r[3:]} for r in rows]
        assert [per_scenario(side, k) for k in range(2)] == want
        assert "Before anyone buys or installs a bank" in html or "Cautions" in html
    # CSV and XLSX: one table of items, the specification's as "Specification — Section: item"
    from auditor.services.compare import SPEC_PREFIX

    def from_items(items: list[list[str]]) -> list[list[tuple]]:
        side = []
        for item, unit, *values in items:
            if str(item).startswith(SPEC_PREFIX):
                section, label = str(item)[len(SPEC_PREFIX):].split(": ", 1)
                side.append({"section": section, "label": label, "unit": unit or "",
                             "values": [None if v in (None, "") else str(v) for v in values]})
        return [per_scenario(side, k) for k in range(2)]

    csv_out, xlsx_out = tmp_path / "cmp.csv", tmp_path / "cmp.xlsx"
    for out in (csv_out, xlsx_out):
        assert invoke("scenarios", "compare", *names, "--out", out, db=demo_db.url).exit_code == 0
    assert from_items(list(csv.reader(io.StringIO(csv_out.read_text(encoding="utf-8"))))[1:]) == want
    web_csv = client.get(f"/compare.csv?{query}").get_data(as_text=True)
    assert from_items(list(csv.reader(io.StringIO(web_csv)))[1:]) == want
    from openpyxl import load_workbook

    sheet = load_workbook(xlsx_out)["Comparison"]
    assert from_items([list(r) for r in sheet.iter_rows(min_row=2, values_only=True)]) == want


@pytest.mark.browser
def test_the_printed_comparison(demo_db, cases, tmp_path):
    from tests.test_casedoc import need_chromium, pdf_pages

    need_chromium()
    out = tmp_path / "cmp.pdf"
    assert invoke("scenarios", "compare", FAILING, OPTIMISED, "--out", out, db=demo_db.url).exit_code == 0
    text = flat(" ".join(pdf_pages(out)))
    at = text.index("Specification")
    for _section, label, value in json_value_rows(cases[OPTIMISED]):
        assert text.find(flat(label), at) >= 0, label
        assert text.find(flat(value.split(" ")[0]), at) >= 0, value
