"""Exports of an audit and of a saved scenario: one self-contained HTML report, CSV, XLSX.

Shared by the dashboard's export routes and ``auditor report``. The figures come from the
audit and correction services (a saved scenario is exported as it was saved); this module only
arranges them. The HTML report embeds plotly.js from the plotly package and every chart's data,
so it opens offline; wherever a bank is recommended it carries the cautions.
"""
from __future__ import annotations

import csv
import io
import math
import secrets
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

from auditor.correction import CAUTIONS
from auditor.errors import UsageError
from auditor.services.audit import resolve_tariff
from auditor.services.correction import get_scenario
from auditor.store import Store
from auditor.tariffs import Tariff, describe_tariff

__all__ = ["Column", "ReportData", "build_report", "period_columns", "period_rows", "scenario_rows",
           "render_csv", "render_xlsx", "render_html", "write_report", "FORMATS", "DISCLAIMER"]

FORMATS = ("html", "csv", "xlsx")
DISCLAIMER = ("This report estimates charges and savings from interval meter data and the tariff as "
              "written in its file. It does not certify a design, an installation or a bill.")


@dataclass(frozen=True)
class Column:
    """One column of a period table: header (with its unit), value getter and number kind
    (``text``, ``int``, ``energy`` (0 decimals), ``power`` (1), ``pf`` (3), ``percent`` (1),
    ``money`` (2))."""

    header: str
    get: Callable[[dict], object]
    kind: str = "text"

    @property
    def numeric(self) -> bool:
        return self.kind != "text"


def _pct(x):
    return None if x is None else 100.0 * x


def _label(p: dict) -> str:
    from auditor.charts import period_label

    return period_label(p)


def period_columns(audit: dict, charge_keys: list[str] | None = None) -> list[Column]:
    """The columns of the audit table by period, units in the headers."""
    cur = audit.get("currency") or ""
    keys = charge_keys or (list(audit["periods"][0]["charges"]) if audit["periods"] else [])
    cols = [
        Column("Period", _label),
        Column("Start", lambda p: p["start"]),
        Column("End (excl.)", lambda p: p["end"]),
        Column("Energy (kWh)", lambda p: p["kwh"], "energy"),
        Column("Lagging (kvarh)", lambda p: p["kvarh_lag"], "energy"),
        Column("Leading (kvarh)", lambda p: p["kvarh_lead"], "energy"),
        Column("Energy PF", lambda p: p["pf"], "pf"),
        Column("tan φ", lambda p: p["tan_phi"], "pf"),
        Column("Peak (kW)", lambda p: p["peak_kw"], "power"),
        Column("Peak (kVA)", lambda p: p["peak_kva"], "power"),
        Column("Peak lagging (kvar)", lambda p: p["peak_kvar"], "power"),
        Column("PF at kW peak", lambda p: p["pf_at_peak"], "pf"),
        Column("Load factor (%)", lambda p: _pct(p["load_factor"]), "percent"),
        Column("Coverage (%)", lambda p: _pct(p["coverage"]), "percent"),
        Column("Estimated intervals", lambda p: p["estimated_intervals"], "int"),
    ]
    for k in keys:
        cols.append(Column(f"{k} ({cur})", lambda p, k=k: p["charges"].get(k), "money"))
    cols.append(Column(f"Reactive charges ({cur})", lambda p: p["reactive_total"], "money"))
    cols.append(Column(f"Total ({cur})", lambda p: p["total"], "money"))
    return cols


def period_rows(audit: dict, columns: list[Column] | None = None) -> tuple[list[Column], list[list]]:
    cols = columns or period_columns(audit)
    return cols, [[c.get(p) for c in cols] for p in audit["periods"]]


def scenario_columns(case: dict) -> list[Column]:
    """Before/after by period: PF, reactive and total charges, saving."""
    cur = case.get("currency") or ""
    return [
        Column("Period", lambda r: _label(r["before"])),
        Column("PF before", lambda r: r["before"]["pf"], "pf"),
        Column("PF after", lambda r: r["after"]["pf"], "pf"),
        Column("Peak kVA before", lambda r: r["before"]["peak_kva"], "power"),
        Column("Peak kVA after", lambda r: r["after"]["peak_kva"], "power"),
        Column(f"Reactive before ({cur})", lambda r: r["before"]["reactive_total"], "money"),
        Column(f"Reactive after ({cur})", lambda r: r["after"]["reactive_total"], "money"),
        Column(f"Total before ({cur})", lambda r: r["before"]["total"], "money"),
        Column(f"Total after ({cur})", lambda r: r["after"]["total"], "money"),
        Column(f"Saving ({cur})", lambda r: r["before"]["total"] - r["after"]["total"], "money"),
    ]


def scenario_rows(case: dict) -> tuple[list[Column], list[list]]:
    cols = scenario_columns(case)
    pairs = [{"before": b, "after": a} for b, a in zip(case["before"], case["after"], strict=True)]
    return cols, [[c.get(r) for c in cols] for r in pairs]


# --------------------------------------------------------------------------------------------
# what a report holds
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ReportData:
    meter: str
    site: str
    timezone: str
    tariff: Tariff
    audit: dict  # MeterAudit.to_dict()
    charge_keys: tuple[str, ...]
    reactive_keys: tuple[str, ...]
    thresholds: list[dict]
    profile: object | None = None  # meter_charts.MeterChartData (heat map in the HTML report)
    scenario_name: str | None = None
    scenario: dict | None = None  # a saved MeterScenario.to_dict()
    generated_at: str = field(default_factory=lambda: datetime.now(UTC).isoformat(timespec="seconds"))

    @property
    def cautions(self) -> list[str]:
        if self.scenario and self.scenario.get("cautions"):
            return list(self.scenario["cautions"])
        return list(CAUTIONS)


def build_report(store: Store, meter: str, tariff: str | Path | Tariff, scenario: str | None = None,
                 *, with_profile: bool = True) -> ReportData:
    """Gather an audit (and a saved scenario) of ``meter`` for export.

    The scenario must belong to ``meter`` and have been computed under the same tariff (by
    name); otherwise the report would set two different bills side by side.
    """
    from auditor.services.cache import cached_audit
    from auditor.services.meter_charts import meter_chart_data
    from auditor.services.portfolio import tariff_threshold_pf

    t = resolve_tariff(tariff)
    saved = None
    if scenario:
        saved = get_scenario(store, scenario)
        if saved["meter"] != meter:
            raise UsageError(f"scenario {scenario!r} is for meter {saved['meter']}, not {meter}")
        if saved["tariff"] != t.name:
            raise UsageError(f"scenario {scenario!r} was computed under tariff {saved['tariff']!r}, "
                             f"not {t.name!r}; give that tariff")
    ma = cached_audit(store, meter, t)
    d = ma.to_dict()
    target = (saved or {}).get("result", {}).get("target_pf", 0.95) if saved else 0.95
    return ReportData(
        meter=ma.data.meter, site=ma.data.site, timezone=ma.data.timezone, tariff=t, audit=d,
        charge_keys=tuple(ma.result.charge_keys), reactive_keys=tuple(ma.result.reactive_keys),
        thresholds=tariff_threshold_pf(t),
        profile=meter_chart_data(store, meter, target) if with_profile else None,
        scenario_name=saved["name"] if saved else None, scenario=saved["result"] if saved else None,
    )


# --------------------------------------------------------------------------------------------
# CSV and XLSX
# --------------------------------------------------------------------------------------------
def _csv_value(v):
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, float):
        return repr(round(v, 6))
    return v


def render_csv(report: ReportData) -> bytes:
    """The period table as CSV (UTF-8, comma, header row): the audit, or with a scenario the
    before/after table of the scenario."""
    if report.scenario:
        cols, rows = scenario_rows(report.scenario)
    else:
        cols, rows = period_rows(report.audit, period_columns(report.audit, list(report.charge_keys)))
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([c.header for c in cols])
    for r in rows:
        w.writerow([_csv_value(v) for v in r])
    return buf.getvalue().encode("utf-8")


_XLSX_FORMATS = {"int": "0", "energy": "#,##0", "power": "#,##0.0", "pf": "0.000", "percent": "0.0",
                 "money": "#,##0.00"}


def _sheet(wb, title: str, cols: list[Column], rows: list[list]):
    from openpyxl.styles import Alignment, Font, PatternFill
    from openpyxl.utils import get_column_letter

    ws = wb.create_sheet(title)
    ws.append([c.header for c in cols])
    for cell in ws[1]:
        cell.font = Font(bold=True, color="FFFFFF")
        cell.fill = PatternFill("solid", fgColor="1F4E5A")
        cell.alignment = Alignment(wrap_text=True, vertical="top")
    for r in rows:
        ws.append([None if isinstance(v, float) and not math.isfinite(v) else v for v in r])
    for j, c in enumerate(cols, start=1):
        letter = get_column_letter(j)
        ws.column_dimensions[letter].width = max(10, min(28, len(c.header) + 2))
        fmt = _XLSX_FORMATS.get(c.kind)
        if fmt:
            for (cell,) in ws.iter_rows(min_row=2, min_col=j, max_col=j):
                cell.number_format = fmt
    ws.freeze_panes = "B2"
    return ws


def _kv_sheet(wb, title: str, pairs: list[tuple[str, object]]):
    from openpyxl.styles import Font

    ws = wb.create_sheet(title)
    for k, v in pairs:
        ws.append([k, v])
    for (cell,) in ws.iter_rows(min_col=1, max_col=1):
        cell.font = Font(bold=True)
    ws.column_dimensions["A"].width = 34
    ws.column_dimensions["B"].width = 100
    return ws


def render_xlsx(report: ReportData) -> bytes:
    """A workbook: About, Periods (the audit); with a scenario also Before-after, Savings,
    Cash flow, Candidates, Screening, Cautions."""
    from openpyxl import Workbook

    wb = Workbook()
    wb.remove(wb.active)
    about = [("Meter", report.meter), ("Site", report.site), ("Time zone", report.timezone),
             ("Tariff", report.tariff.name), ("Currency", report.audit.get("currency")),
             ("Scenario", report.scenario_name or "-"), ("Generated (UTC)", report.generated_at),
             ("Note", DISCLAIMER)]
    _kv_sheet(wb, "About", about)
    cols, rows = period_rows(report.audit, period_columns(report.audit, list(report.charge_keys)))
    _sheet(wb, "Periods", cols, rows)
    if report.audit.get("warnings"):
        _kv_sheet(wb, "Data warnings", [(str(i + 1), w) for i, w in enumerate(report.audit["warnings"])])
    s = report.scenario
    if s:
        cur = s.get("currency") or ""
        cols, rows = scenario_rows(s)
        _sheet(wb, "Before-after", cols, rows)
        _sheet(wb, "Savings", [Column("Charge", lambda r: r[0]), Column(f"Saving a year ({cur})", lambda r: r[1], "money")],
               [[k, v] for k, v in s["savings_by_charge"].items()] + [["total", s["annual_savings"]]])
        cf_cols = [Column("Year", lambda r: r["year"], "int")] + [
            Column(f"{k} ({cur})", lambda r, k=k: r[k], "money")
            for k in ("savings", "om", "losses", "capex", "net", "cumulative", "discounted_cumulative")]
        _sheet(wb, "Cash flow", cf_cols, [[c.get(r) for c in cf_cols] for r in s["cash_flow"]])
        if s.get("candidates"):
            cc = candidate_columns(cur)
            _sheet(wb, "Candidates", cc, [[c.get(r) for c in cc] for r in s["candidates"]])
        sc = s["screening"]
        if s.get("specification"):
            spec_cols = [Column(h.capitalize(), lambda r, h=h: r[h]) for h in ("section", "label", "value", "unit", "note")]
            _sheet(wb, "Specification", spec_cols, [[c.get(r) for c in spec_cols] for r in s["specification"]["rows"]])
        rules = sc.get("rules") or []
        _kv_sheet(wb, "Screening", [(k, v if not isinstance(v, list | dict) else str(v)) for k, v in sc.items()
                                    if k != "rules"]
                  + [(f"{r['rule']} ({r['status']})", r["message"]) for r in rules]
                  + [("warning", w) for w in s.get("warnings", [])])
        _kv_sheet(wb, "Cautions", [(str(i + 1), c) for i, c in enumerate(report.cautions)])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def candidate_columns(cur: str) -> list[Column]:
    return [
        Column("Rank", lambda c: c["rank"], "int"),
        Column("Design", lambda c: c["label"]),
        Column("Total (kvar)", lambda c: c["total_kvar"], "power"),
        Column(f"Capex ({cur})", lambda c: c["capex"], "money"),
        Column(f"Saving a year ({cur})", lambda c: c["annual_savings"], "money"),
        Column(f"NPV ({cur})", lambda c: c["npv"], "money"),
        Column("Payback (years)", lambda c: c["simple_payback_years"], "power"),
        Column("PF after", lambda c: c["pf_after"], "pf"),
        Column("Resonance order h", lambda c: c.get("resonance_order"), "power"),
        Column("Screening", lambda c: "passed" if c["passed_screening"] else
               "fails " + ", ".join(c.get("failed_rules") or []) if c.get("failed_rules") else "not passed"),
    ]


# --------------------------------------------------------------------------------------------
# HTML
# --------------------------------------------------------------------------------------------
def report_charts(report: ReportData) -> list[tuple[str, str]]:
    """(id, figure JSON) of every chart of the report."""
    from auditor import charts

    out = [("pf", charts.pf_by_period(report.audit, report.thresholds)),
           ("reactive", charts.reactive_by_period(report.audit, list(report.reactive_keys))),
           ("peaks", charts.peaks_by_period(report.audit))]
    if report.profile is not None:
        out.append(("heatmap", charts.pf_heatmap(report.profile)))
        out.append(("duration", charts.duration_curve(report.profile)))
    if report.scenario:
        out += [("before_after", charts.before_after(report.scenario)),
                ("savings", charts.savings_by_charge(report.scenario)),
                ("cashflow", charts.cash_flow(report.scenario))]
        scan = charts.frequency_scan(report.scenario)
        if scan is not None:
            out.append(("scan", scan))
    return [(k, charts.figure_json(f)) for k, f in out]


def render_html(report: ReportData, nonce: str | None = None) -> str:
    """One HTML file: styles, plotly.js, chart data and tables inline; opens offline."""
    from plotly.offline import get_plotlyjs

    from auditor.presentation import document_environment, stylesheet

    nonce = nonce or secrets.token_urlsafe(16)
    css = stylesheet()
    cols, rows = period_rows(report.audit, period_columns(report.audit, list(report.charge_keys)))
    ctx = dict(r=report, audit=report.audit, columns=cols, rows=rows, charts=report_charts(report),
               clauses=describe_tariff(report.tariff), css=css, plotly_js=get_plotlyjs(), nonce=nonce,
               disclaimer=DISCLAIMER, cautions=report.cautions)
    if report.scenario:
        ctx["scenario_columns"], ctx["scenario_rows"] = scenario_rows(report.scenario)
        ctx["candidate_columns"] = candidate_columns(report.scenario.get("currency") or "")
    return document_environment().get_template("report.html").render(**ctx)


def render(report: ReportData, fmt: str) -> bytes:
    if fmt == "html":
        return render_html(report).encode("utf-8")
    if fmt == "csv":
        return render_csv(report)
    if fmt == "xlsx":
        return render_xlsx(report)
    raise UsageError(f"unknown export format {fmt!r}; use one of {', '.join(FORMATS)}")


def write_report(store: Store, meter: str, tariff: str | Path | Tariff, out: str | Path,
                 scenario: str | None = None) -> Path:
    """Write the export named by ``out``'s suffix (.html, .csv, .xlsx) and return its path."""
    out = Path(out)
    fmt = out.suffix.lower().lstrip(".")
    if fmt == "htm":
        fmt = "html"
    if fmt not in FORMATS:
        raise UsageError(f"{out.name}: a report file name must end in .html, .csv or .xlsx")
    report = build_report(store, meter, tariff, scenario, with_profile=(fmt == "html"))
    data = render(report, fmt)
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        out.write_bytes(data)
    except OSError as exc:
        raise UsageError(f"cannot write {out} ({exc.strerror})") from None
    return out

