"""Saved scenarios side by side: design, money, screening and PF, and their cumulative cash
flows on one chart; as text, JSON, HTML (offline), PDF, XLSX and CSV.

Every figure is the saved scenario's own (the JSON ``auditor size`` gave), so a comparison
never recomputes a case. Scenarios of different meters or tariffs may be compared (a site's
options are often on several meters); scenarios in different currencies get a warning.
"""
from __future__ import annotations

import secrets
from datetime import UTC, datetime
from pathlib import Path

from auditor.correction import CAUTIONS
from auditor.errors import UsageError
from auditor.services.correction import get_scenario
from auditor.services.exports import Column, Workbook, render_csv_table
from auditor.services.report import (
    DISCLAIMER,
    PAPERS,
    _check_paper,
    _design_words,
    _write,
    document_css,
    scenario_cover,
    screening_rules,
    screening_verdict,
)
from auditor.store import Store

__all__ = ["compare_scenarios", "render_text", "render_comparison", "write_comparison", "COMPARE_FORMATS"]

COMPARE_FORMATS = ("html", "pdf", "xlsx", "csv")


def _pct100(x):
    return None if x is None else 100.0 * x


#: (key, label, unit, kind, getter over the saved scenario's result)
METRICS = (
    ("meter", "Meter", "", "text", lambda s, r: s["meter"]),
    ("tariff", "Tariff", "", "text", lambda s, r: s["tariff"]),
    ("design", "Design", "", "text", lambda s, r: _design_words(r["bank"])),
    ("total_kvar", "Rated output", "kvar", "power", lambda s, r: r["bank"].get("total_kvar")),
    ("steps", "Steps", "kvar", "text", lambda s, r: ", ".join(f"{x:g}" for x in r["bank"].get("steps_kvar") or [])),
    ("target_pf", "Target PF", "", "pf", lambda s, r: r.get("target_pf")),
    ("annual_savings", "Saving a year", "CUR", "money", lambda s, r: r.get("annual_savings")),
    ("capex", "Capex", "CUR", "money", lambda s, r: r.get("capex")),
    ("simple_payback_years", "Simple payback", "years", "power", lambda s, r: r.get("simple_payback_years")),
    ("discounted_payback_years", "Discounted payback", "years", "power", lambda s, r: r.get("discounted_payback_years")),
    ("npv", "NPV", "CUR", "money", lambda s, r: r.get("npv")),
    ("irr", "IRR", "%", "percent", lambda s, r: _pct100(r.get("irr"))),
    ("life_years", "Life", "years", "int", lambda s, r: r.get("life_years")),
    ("discount_rate", "Discount rate", "% a year", "percent", lambda s, r: _pct100(r.get("discount_rate"))),
    ("loss_reduction_value_per_year", "Loss reduction (indicative, a year)", "CUR", "money",
     lambda s, r: r.get("loss_reduction_value_per_year")),
    ("pf_before", "Energy PF before", "", "pf", lambda s, r: r.get("pf_before")),
    ("pf_after", "Energy PF after", "", "pf", lambda s, r: r.get("pf_after")),
    ("released_kva", "Released capacity", "kVA", "power", lambda s, r: (r.get("capacity") or {}).get("released_kva")),
    ("screening", "Screening", "", "text", lambda s, r: screening_verdict(r)),
    ("failing_rules", "Failing rules", "", "text",
     lambda s, r: ", ".join(str(x["rule"]).replace("_", " ") for x in screening_rules(r) if x.get("status") == "fail")
     or "none"),
)


def specification_side_by_side(results: list[dict]) -> list[dict]:
    """The specifications of several cases as rows ``{section, label, unit, values}``: every
    (section, item) of any of them, in the order the cases give them, a value per case (None
    where a case has no such row — a plain bank has no tuning order). The unit is the row's
    own when the cases agree on it; otherwise each value carries its unit. The cautions, the
    same for every case, are left to the document's cautions."""
    order: list[tuple[str, str]] = []
    per_case: list[dict] = []
    for r in results:
        rows = [x for x in ((r.get("specification") or {}).get("rows") or []) if x.get("section") != "Cautions"]
        at = -1
        for x in rows:
            key = (x.get("section"), x.get("label"))
            if key in order:
                at = order.index(key)
            else:
                at += 1
                order.insert(at, key)
        per_case.append({(x.get("section"), x.get("label")): x for x in rows})
    out = []
    for key in order:
        cells = [case.get(key) for case in per_case]
        units = {c.get("unit") or "" for c in cells if c is not None}
        common = units.pop() if len(units) == 1 else None
        values = [None if c is None else (c.get("value") if common is not None
                                          else f"{c.get('value')} {c.get('unit') or ''}".strip()) for c in cells]
        out.append({"section": key[0], "label": key[1], "unit": common or "", "values": values})
    return out


def compare_scenarios(store: Store, names: list[str]) -> dict:
    """The comparison document: scenarios, metric rows (one value per scenario), cash flows."""
    if not 2 <= len(names) <= 4:
        raise UsageError(f"compare two to four saved scenarios, not {len(names)}")
    saved = [get_scenario(store, n) for n in names]
    currencies = sorted({s["result"].get("currency") or "" for s in saved})
    cur = currencies[0] if len(currencies) == 1 else ""
    warnings = []
    if len(currencies) > 1:
        warnings.append(f"the scenarios are in different currencies ({', '.join(currencies)}): money is not comparable")
    rows = []
    for key, label, unit, kind, get in METRICS:
        rows.append({"key": key, "label": label, "unit": cur if unit == "CUR" else unit, "kind": kind,
                     "values": [get(s, s["result"]) for s in saved]})
    passing = [i for i, s in enumerate(saved) if (s["result"].get("screening") or {}).get("passed", True)
               and s["result"].get("recommended", True)]
    best = max(passing, key=lambda i: saved[i]["result"].get("npv") or float("-inf")) if passing else None
    if best is None:
        warnings.append("none of these scenarios passes screening")
    return {
        "scenarios": [{"name": s["name"], "meter": s["meter"], "tariff": s["tariff"],
                       "currency": s["result"].get("currency"), "cover": scenario_cover(store, s["name"]),
                       "saved_at": s.get("created_at")} for s in saved],
        "currency": cur,
        "rows": rows,
        "best": saved[best]["name"] if best is not None else None,
        "cash_flows": {s["name"]: [{"year": r["year"], "net": r["net"], "cumulative": r["cumulative"],
                                    "discounted_cumulative": r["discounted_cumulative"]}
                                   for r in s["result"].get("cash_flow") or []] for s in saved},
        "specification": specification_side_by_side([s["result"] for s in saved]),
        "cautions": list(dict.fromkeys(c for s in saved for c in (s["result"].get("cautions") or CAUTIONS))),
        "warnings": warnings,
        "generated_at": datetime.now(UTC).isoformat(timespec="seconds"),
    }


def _show(v, kind: str) -> str:
    from auditor.presentation import cell

    return cell(v, kind)


def render_text(cmp: dict) -> str:
    from auditor.render import wrap, wrapped_table

    names = [s["name"] for s in cmp["scenarios"]]
    body = [[f"{r['label']}" + (f" ({r['unit']})" if r["unit"] else "")] + [_show(v, r["kind"]) for v in r["values"]]
            for r in cmp["rows"]]
    lines = [wrapped_table(["", *names], body, {i: 12 for i in range(len(names) + 1)})]
    if cmp["best"]:
        lines.append(f"\nBest NPV among those that pass screening: {cmp['best']}")
    lines += [wrap(f"warning: {w}") for w in cmp["warnings"]]
    spec = cmp.get("specification") or []
    if spec:
        lines += ["", "Specification:",
                  wrapped_table(["section", "item", "unit", *names],
                                [[r["section"], r["label"], r["unit"], *("–" if v is None else v for v in r["values"])]
                                 for r in spec], {1: 16, 2: 6, **{3 + i: 10 for i in range(len(names))}})]
    if cmp.get("cautions"):
        lines += ["", "Cautions:"] + [wrap(f"- {c}", "  ") for c in cmp["cautions"]]
    return "\n".join(lines)


def spec_item(row: dict) -> str:
    """A specification row's item in the comparison's one-table exports (CSV, XLSX):
    ``Specification — Capacitors: rated voltage``."""
    return f"{SPEC_PREFIX}{row['section']}: {row['label']}"


#: What starts the item of a specification row in the comparison's CSV and XLSX.
SPEC_PREFIX = "Specification — "


# --------------------------------------------------------------------------------------------
# files
# --------------------------------------------------------------------------------------------
def render_html(cmp: dict, paper: str = "a4", nonce: str | None = None) -> str:
    from plotly.offline import get_plotlyjs

    from auditor import charts
    from auditor.presentation import document_environment

    paper = _check_paper(paper)
    nonce = nonce or secrets.token_urlsafe(16)
    figure = charts.cumulative_cash_flows(cmp)
    # room below the plot for the year axis and a legend of two lines a scenario
    figure["layout"].update(height=300 + 30 * len(cmp["scenarios"]),
                            legend={"orientation": "h", "y": -0.22 - 0.05 * len(cmp["scenarios"])})
    figure["layout"]["margin"] = {**figure["layout"].get("margin", {}), "b": 60 + 28 * len(cmp["scenarios"])}
    fig = charts.figure_json(figure)
    return document_environment().get_template("documents/comparison.html").render(
        cmp=cmp, css=document_css(paper), paper=paper, nonce=nonce, plotly_js=get_plotlyjs(), chart=fig,
        disclaimer=DISCLAIMER)


def render_xlsx(cmp: dict) -> bytes:
    book = Workbook(cmp["currency"])
    ws = book.wb.create_sheet("Comparison")
    book._header(ws, 1, ["Item", "Unit", *[s["name"] for s in cmp["scenarios"]]])
    for r_i, row in enumerate(cmp["rows"], start=2):
        book.put(ws, r_i, 1, row["label"])
        book.put(ws, r_i, 2, row["unit"])
        for j, v in enumerate(row["values"], start=3):
            book.put(ws, r_i, j, v, row["kind"])
    r_i = len(cmp["rows"]) + 1
    for row in cmp.get("specification") or []:
        r_i += 1
        book.put(ws, r_i, 1, spec_item(row))
        book.put(ws, r_i, 2, row["unit"])
        for j, v in enumerate(row["values"], start=3):
            book.put(ws, r_i, j, v)
    book.fit(ws, ["Item", "Unit", *[s["name"] for s in cmp["scenarios"]]])
    ws.freeze_panes = "C2"
    years = sorted({r["year"] for rows in cmp["cash_flows"].values() for r in rows})
    cols = [Column("Year", lambda y: y, "int")]
    for name, rows in cmp["cash_flows"].items():
        by_year = {r["year"]: r for r in rows}
        cols.append(Column(f"{name}: cumulative ({cmp['currency']})",
                           lambda y, b=by_year: (b.get(y) or {}).get("cumulative"), "money"))
        cols.append(Column(f"{name}: discounted cumulative ({cmp['currency']})",
                           lambda y, b=by_year: (b.get(y) or {}).get("discounted_cumulative"), "money"))
    book.table("Cash flows", cols, years)
    book.table("Scenarios", [Column("Scenario", lambda s: s["name"]), Column("Meter", lambda s: s["meter"]),
                             Column("Tariff", lambda s: s["tariff"]),
                             Column("Client", lambda s: s["cover"].get("client")),
                             Column("Project", lambda s: s["cover"].get("project")),
                             Column("Author", lambda s: s["cover"].get("author"))], cmp["scenarios"])
    if cmp["warnings"]:
        book.table("Warnings", [Column("Warning", lambda w: w)], cmp["warnings"])
    if cmp.get("cautions"):
        book.table("Cautions", [Column("Caution", lambda x: x)], cmp["cautions"])
    return book.save()


def render_csv(cmp: dict) -> bytes:
    cols = [Column("Item", lambda r: r["label"]), Column("Unit", lambda r: r["unit"])]
    for i, s in enumerate(cmp["scenarios"]):
        cols.append(Column(s["name"], lambda r, i=i: r["values"][i]))
    spec = [{"label": spec_item(r), "unit": r["unit"], "values": r["values"]} for r in cmp.get("specification") or []]
    return render_csv_table(cols, list(cmp["rows"]) + spec)


def render_comparison(cmp: dict, fmt: str, paper: str = "a4") -> bytes:
    if fmt == "html":
        return render_html(cmp, paper).encode("utf-8")
    if fmt == "pdf":
        from auditor.services.pdf import html_to_pdf

        return html_to_pdf(render_html(cmp, paper), paper=paper)
    if fmt == "xlsx":
        return render_xlsx(cmp)
    if fmt == "csv":
        return render_csv(cmp)
    raise UsageError(f"unknown comparison format {fmt!r}; use one of {', '.join(COMPARE_FORMATS)}")


def write_comparison(cmp: dict, out: str | Path, *, paper: str = "a4") -> Path:
    out = Path(out)
    fmt = out.suffix.lower().lstrip(".")
    fmt = "html" if fmt == "htm" else fmt
    if fmt not in COMPARE_FORMATS:
        raise UsageError(f"{out.name}: a comparison file name must end in .html, .pdf, .xlsx or .csv")
    if paper not in PAPERS:
        raise UsageError(f"paper {paper!r}: use one of {', '.join(PAPERS)}")
    return _write(out, render_comparison(cmp, fmt, paper))
