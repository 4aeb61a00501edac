"""The case document and the exports of an audit or a saved scenario: HTML, PDF, XLSX, CSV.

Shared by the dashboard's export routes and ``auditor report``. The figures come from the
audit and correction services — a saved scenario is exported as it was saved, so every figure
of the document equals the one ``auditor size --json`` gave — and this module only arranges
them:

* :func:`build_report` / :func:`build_case` gather a :class:`ReportData`;
* :func:`summary_rows`, :func:`assumption_rows`, :func:`recommendation` and the other
  ``*_rows`` helpers are the document model every format renders from;
* :func:`render_html` writes one self-contained HTML document (styles, plotly.js and every
  chart's data inline; opens offline) with a print stylesheet for A4 and Letter (one section a
  page, tables split to fit the page width); :func:`render_pdf` prints that same document in
  headless Chromium (:mod:`auditor.services.pdf`);
* :func:`render_xlsx` (first sheet ``Summary``) and :func:`render_csv` write through
  :mod:`auditor.services.exports`, the one place that neutralises formula-like text.

Wherever equipment is recommended the document carries the cautions.
"""
from __future__ import annotations

import math
import secrets
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

from auditor.correction import CAUTIONS
from auditor.errors import NotFoundError, UsageError
from auditor.services.audit import resolve_tariff
from auditor.services.correction import get_scenario, scenario_row
from auditor.services.exports import Column, Workbook, column_groups, render_csv_table
from auditor.store import Store
from auditor.tariffs import Tariff, describe_tariff

__all__ = ["Column", "ReportData", "build_report", "build_case", "period_columns", "period_rows", "CSV_TABLES",
           "summary_items", "specification_items",
           "scenario_rows", "render_csv", "render_xlsx", "render_html", "render_pdf", "write_report",
           "write_case", "write_document", "FORMATS", "DOCUMENT_FORMATS", "PAPERS", "DISCLAIMER", "scenario_cover",
           "set_scenario_cover", "summary_rows", "assumption_rows", "recommendation"]

#: Formats of the meter page's exports (kept as they were) and of the case document.
FORMATS = ("html", "csv", "xlsx")
DOCUMENT_FORMATS = ("html", "pdf", "xlsx", "csv")
#: Paper sizes of the print stylesheet and the PDF: CSS page size, and the content width that
#: every table must fit (page width less 2 × 14 mm margins).
PAPERS = {"a4": ("A4", "182mm"), "letter": ("letter", "187.9mm")}
COVER_FIELDS = ("client", "project", "author")
DISCLAIMER = ("This report estimates charges and savings from interval meter data and the tariff as "
              "written in its file. It does not certify a design, an installation or a bill.")
#: At most this many columns in one printed table (wider ones are split, the first column
#: repeated), so that no table runs past an A4 or Letter page in portrait.
PRINT_COLUMNS = 10

SOURCES = (
    ("IEEE Std 1459-2010", "definitions of active, reactive and apparent power and of power factor"),
    ("IEEE Std 1036-2010", "application of shunt power capacitors: sizing Qc = P (tan φ1 − tan φ2), "
                           "parallel resonance h = √(S_sc / Q_c)"),
    ("IEEE Std 18", "shunt power capacitors: continuous limits of voltage, current and kvar"),
    ("IEEE Std 519-2014", "harmonic voltage limits at the point of common coupling"),
    ("IEC 60831-1", "low-voltage shunt capacitors: ratings and discharge"),
    ("Brealey, Myers, Allen, Principles of Corporate Finance", "NPV, IRR, payback, depreciation tax shield"),
    ("numpy-financial", "reference implementation of NPV and IRR"),
)


# --------------------------------------------------------------------------------------------
# table columns (the meter page uses these too)
# --------------------------------------------------------------------------------------------
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
        cols.append(Column(f"{charge_title(k)} ({cur})", lambda p, k=k: p["charges"].get(k), "money"))
    cols.append(Column(f"Reactive charges ({cur})", lambda p: p["reactive_total"], "money"))
    cols.append(Column(f"Total ({cur})", lambda p: p["total"], "money"))
    return cols


def charge_title(key: str) -> str:
    """A charge key in words: ``reactive_daytime`` → ``Reactive daytime``."""
    text = str(key).replace("_", " ").strip()
    return text[:1].upper() + text[1:] if text else text


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
        Column("Peak before (kVA)", lambda r: r["before"]["peak_kva"], "power"),
        Column("Peak after (kVA)", lambda r: r["after"]["peak_kva"], "power"),
        Column(f"Reactive before ({cur})", lambda r: r["before"]["reactive_total"], "money"),
        Column(f"Reactive after ({cur})", lambda r: r["after"]["reactive_total"], "money"),
        Column(f"Total before ({cur})", lambda r: r["before"]["total"], "money"),
        Column(f"Total after ({cur})", lambda r: r["after"]["total"], "money"),
        Column(f"Saving ({cur})", lambda r: r["before"]["total"] - r["after"]["total"], "money"),
    ]


def _pairs(case: dict) -> list[dict]:
    return [{"before": b, "after": a} for b, a in zip(case["before"], case["after"], strict=True)]


def scenario_rows(case: dict) -> tuple[list[Column], list[list]]:
    cols = scenario_columns(case)
    return cols, [[c.get(r) for c in cols] for r in _pairs(case)]


def candidate_columns(cur: str) -> list[Column]:
    """The optimiser's candidates, headline first (design, NPV, payback, screening), as the
    dashboard shows them."""
    return [
        Column("Rank", lambda c: c["rank"], "int"),
        Column("Design", lambda c: c["label"]),
        Column(f"NPV ({cur})", lambda c: c["npv"], "money"),
        Column("Payback (years)", lambda c: c["simple_payback_years"], "power"),
        Column("Screening", lambda c: "passed" if c["passed_screening"] else
               ("fails " + ", ".join(str(r).replace("_", " ") for r in c["failed_rules"])
                if c.get("failed_rules") else "not passed")),
        Column(f"Saving a year ({cur})", lambda c: c["annual_savings"], "money"),
        Column(f"Capex ({cur})", lambda c: c["capex"], "money"),
        Column("Total (kvar)", lambda c: c["total_kvar"], "power"),
        Column("PF after", lambda c: c["pf_after"], "pf"),
        Column("Resonance order h", lambda c: c.get("resonance_order"), "power"),
    ]


def cash_flow_columns(cur: str, case: dict) -> list[Column]:
    """The cash flow by year; the optional items' columns only when they carry something."""
    rows = case.get("cash_flow") or []
    optional = [("loss_reduction", "Loss reduction"), ("replacement", "Replacement"),
                ("incentive", "Incentive"), ("depreciation", "Tax depreciation"), ("tax", "Tax")]
    cols = [Column("Year", lambda r: r["year"], "int"),
            Column(f"Tariff saving ({cur})", lambda r: r["savings"], "money")]
    for key, title in optional[:1]:
        if any(r.get(key) for r in rows):
            cols.append(Column(f"{title} ({cur})", lambda r, k=key: r.get(k), "money"))
    cols += [Column(f"O&M ({cur})", lambda r: _cost(r["om"]), "money"),
             Column(f"Bank losses ({cur})", lambda r: _cost(r["losses"]), "money")]
    for key, title in optional[1:]:
        if any(r.get(key) for r in rows):
            cols.append(Column(f"{title} ({cur})", lambda r, k=key: _cost(r.get(k)) if k in ("replacement", "tax")
                               else r.get(k), "money"))
    cols += [Column(f"Capex ({cur})", lambda r: _cost(r["capex"]), "money"),
             Column(f"Net ({cur})", lambda r: r["net"], "money"),
             Column(f"Cumulative ({cur})", lambda r: r["cumulative"], "money"),
             Column(f"Discounted cumulative ({cur})", lambda r: r["discounted_cumulative"], "money")]
    return cols


def _cost(x):
    """A cost shown negative in the cash flow (0 stays 0, never −0)."""
    return None if x is None else (-x if x else 0.0)


def sensitivity_columns(cur: str) -> list[Column]:
    return [
        Column("Factor", lambda r: r["factor"]),
        Column("Change", lambda r: r.get("setting") or f"{100 * r['change']:+.0f} %"),
        Column(f"Saving a year ({cur})", lambda r: r["annual_savings"], "money"),
        Column(f"NPV ({cur})", lambda r: r["npv"], "money"),
        Column("IRR (%)", lambda r: _pct(r.get("irr")), "percent"),
        Column("Simple payback (years)", lambda r: r["simple_payback_years"], "power"),
    ]


def savings_columns(cur: str) -> list[Column]:
    return [Column("Charge", lambda r: r[0]), Column(f"Saving a year ({cur})", lambda r: r[1], "money")]


# --------------------------------------------------------------------------------------------
# what a report holds
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ReportData:
    meter: str
    site: str
    timezone: str
    tariff: Tariff
    audit: dict  # MeterAudit.to_dict(), or for a case the periods the case was computed on
    charge_keys: tuple[str, ...]
    reactive_keys: tuple[str, ...]
    thresholds: list[dict]
    profile: object | None = None  # meter_charts.MeterChartData (heat map in the HTML report)
    scenario_name: str | None = None
    scenario: dict | None = None  # a saved scenario's result (the JSON of auditor size)
    cover: dict = field(default_factory=dict)  # client, project, author
    quality: dict | None = None  # the meter's data-quality findings by kind
    generated_at: str = field(default_factory=lambda: datetime.now(UTC).isoformat(timespec="seconds"))

    @property
    def cautions(self) -> list[str]:
        if self.scenario and self.scenario.get("cautions"):
            return list(self.scenario["cautions"])
        return list(CAUTIONS)

    @property
    def currency(self) -> str:
        return (self.scenario or {}).get("currency") or self.audit.get("currency") or self.tariff.currency or ""

    @property
    def title(self) -> str:
        if self.scenario:
            return "Power factor correction case"
        return "Reactive energy audit"


def _tariff_from_text(text: str, name: str) -> Tariff | None:
    """The tariff as it was used, from the TOML text stored with a scenario."""
    import tomllib

    from auditor.tariffs import tariff_from_dict

    if not text.strip():
        return None
    try:
        return tariff_from_dict(tomllib.loads(text), source=None)
    except (tomllib.TOMLDecodeError, ValueError):
        return None
    except Exception as exc:  # a TariffError: the stored text no longer validates
        from auditor.errors import TariffError

        if isinstance(exc, TariffError):
            return None
        raise


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
        return build_case(store, scenario, t, with_profile=with_profile, saved=saved)
    ma = cached_audit(store, meter, t)
    d = ma.to_dict()
    return ReportData(
        meter=ma.data.meter, site=ma.data.site, timezone=ma.data.timezone, tariff=t, audit=d,
        charge_keys=tuple(ma.result.charge_keys), reactive_keys=tuple(ma.result.reactive_keys),
        thresholds=tariff_threshold_pf(t),
        profile=meter_chart_data(store, meter, 0.95) if with_profile else None,
        quality=meter_quality(store, meter),
    )


def build_case(store: Store, scenario: str, tariff: str | Path | Tariff | None = None, *,
               with_profile: bool = True, saved: dict | None = None) -> ReportData:
    """Gather a saved scenario — the case — for its document.

    The audit by period is the one the case was computed on (its ``before`` periods), so the
    document's figures are the scenario's own. The tariff is the one stored with the scenario
    (its TOML text as used); ``tariff``, when given, must carry the same name.
    """
    from auditor.services.meter_charts import meter_chart_data
    from auditor.services.portfolio import tariff_threshold_pf

    saved = saved or get_scenario(store, scenario)
    result = saved["result"]
    if tariff is not None:
        t = resolve_tariff(tariff)
        if t.name != saved["tariff"]:
            raise UsageError(f"scenario {scenario!r} was computed under tariff {saved['tariff']!r}, "
                             f"not {t.name!r}; give that tariff")
    else:
        t = _tariff_from_text(saved.get("tariff_source") or "", saved["tariff"])
        if t is None:
            t = resolve_tariff(saved["request"].get("tariff") or saved["tariff"])
    meter = saved["meter"]
    info = _meter_site(store, meter)
    if info is None:
        raise NotFoundError(f"scenario {scenario!r} is for meter {meter}, which is no longer in the database")
    periods = result.get("before") or []
    audit = {"meter": meter, "tariff": saved["tariff"], "currency": result.get("currency") or t.currency,
             "periods": periods, "totals": _totals(periods), "warnings": coverage_warnings(periods),
             "site": result.get("site") or info.get("site"), "timezone": info.get("timezone")}
    target = result.get("target_pf", 0.95)
    return ReportData(
        meter=meter, site=info.get("site") or "", timezone=info.get("timezone") or "UTC", tariff=t, audit=audit,
        charge_keys=tuple(periods[0]["charges"]) if periods else tuple(t.charge_keys),
        reactive_keys=tuple(t.reactive_keys), thresholds=tariff_threshold_pf(t),
        profile=meter_chart_data(store, meter, target) if with_profile else None,
        scenario_name=saved["name"], scenario=result, cover=scenario_cover(store, saved["name"]),
        quality=meter_quality(store, meter),
    )


def _meter_site(store: Store, meter: str) -> dict | None:
    """The site name and time zone of one meter (one query, whatever the number of meters)."""
    from sqlalchemy import select

    from auditor.store.models import Meter, Site

    with store.session() as s:
        row = s.execute(select(Site.name, Site.timezone).join(Meter, Meter.site_id == Site.id)
                        .where(Meter.external_id == meter)).first()
    return None if row is None else {"site": row[0], "timezone": row[1]}


def _totals(periods: list[dict]) -> dict:
    def total(key):
        vals = [p[key] for p in periods if p.get(key) is not None and math.isfinite(p[key])]
        return sum(vals) if vals else None

    kwh, lag = total("kwh"), total("kvarh_lag")
    pf = kwh / math.hypot(kwh, lag) if kwh and lag is not None else None
    return {"kwh": kwh, "kvarh_lag": lag, "kvarh_lead": total("kvarh_lead"), "pf": pf,
            "reactive_total": total("reactive_total"), "total": total("total")}


def coverage_warnings(periods: list[dict]) -> list[str]:
    out = []
    for p in periods:
        cov = p.get("coverage")
        if cov is not None and cov < 1.0:
            out.append(f"{_label(p)}: coverage {100 * cov:.1f} % of the intervals expected")
        if p.get("estimated_intervals"):
            out.append(f"{_label(p)}: {p['estimated_intervals']} estimated intervals")
    return out


def meter_quality(store: Store, meter: str) -> dict:
    """The meter's data-quality findings (VEE flags) counted by kind: findings and intervals."""
    from sqlalchemy import func, select

    from auditor.store.models import Meter, QualityFlag

    with store.session() as s:
        rows = s.execute(select(QualityFlag.kind, func.count(), func.coalesce(func.sum(QualityFlag.intervals), 0))
                         .join(Meter, Meter.id == QualityFlag.meter_id)
                         .where(Meter.external_id == meter).group_by(QualityFlag.kind)
                         .order_by(QualityFlag.kind)).all()
    return {kind: {"findings": int(n), "intervals": int(k)} for kind, n, k in rows}


# --------------------------------------------------------------------------------------------
# the cover (client, project, author) of a saved scenario
# --------------------------------------------------------------------------------------------
def _clean_cover(values: dict) -> dict:
    out = {}
    for key in COVER_FIELDS:
        if key not in values or values[key] is None:
            continue
        text = " ".join(str(values[key]).split())
        if len(text) > 200:
            raise UsageError(f"the {key} on a case's cover is at most 200 characters, got {len(text)}")
        out[key] = text or None
    return out


def scenario_cover(store: Store, name: str) -> dict:
    """``{"client": ..., "project": ..., "author": ...}`` of a saved scenario (None where not given)."""
    with store.session() as s:
        row = scenario_row(s, name)
        return {k: getattr(row, k) for k in COVER_FIELDS}


def set_scenario_cover(store: Store, name: str, **values) -> dict:
    """Set the cover fields given (an empty text clears one); returns the whole cover."""
    unknown = set(values) - set(COVER_FIELDS)
    if unknown:
        raise UsageError(f"a cover has {', '.join(COVER_FIELDS)}; not {', '.join(sorted(unknown))}")
    clean = _clean_cover(values)
    with store.session() as s:
        row = scenario_row(s, name)
        for k, v in clean.items():
            setattr(row, k, v)
        s.flush()
        return {k: getattr(row, k) for k in COVER_FIELDS}


# --------------------------------------------------------------------------------------------
# the document model
# --------------------------------------------------------------------------------------------
def local_time(iso: str | None, tz: str) -> str:
    """``2025-01-03 13:15 CET``: a timestamp in the site's local time with the zone's
    abbreviation."""
    if not iso:
        return "–"
    from zoneinfo import ZoneInfo

    try:
        dt = datetime.fromisoformat(iso)
        if dt.tzinfo is None:
            dt = dt.replace(tzinfo=UTC)
        loc = dt.astimezone(ZoneInfo(tz))
    except (ValueError, KeyError):
        return str(iso)
    return f"{loc:%Y-%m-%d %H:%M} {loc.tzname()}"


def screening_rules(case: dict) -> list[dict]:
    """The screening rules, failing first then cautions then passes (``screening.rules``); a
    case saved before rules existed gets its findings as rules."""
    s = case.get("screening") or {}
    rules = s.get("rules")
    if rules:
        order = {"fail": 0, "caution": 1, "warn": 1, "not_checked": 2, "pass": 3}
        return sorted(rules, key=lambda r: order.get(str(r.get("status")), 2))
    out = []
    near = s.get("resonance_near_harmonic")
    if s.get("resonance_checked", s.get("resonance_order") is not None):
        out.append({"rule": "parallel resonance", "status": "fail" if near else "pass",
                    "value": s.get("resonance_order"), "limit": None, "unit": "h",
                    "message": (f"resonance near harmonic {near}" if near else "clear of the 5th, 7th, 11th and 13th")})
    else:
        out.append({"rule": "parallel resonance", "status": "not_checked", "value": None, "limit": None,
                    "unit": "", "message": "not checked: the site's transformer rating and impedance are not known"})
    if s.get("voltage_rise_percent") is not None:
        out.append({"rule": "voltage rise at light load", "status": "pass" if s.get("voltage_rise_percent") <= 3 else "fail",
                    "value": s.get("voltage_rise_percent"), "limit": 3.0, "unit": "%", "message": ""})
    out.append({"rule": "intervals driven leading", "status": "pass" if not s.get("leading_intervals") else "caution",
                "value": s.get("leading_intervals"), "limit": None, "unit": "", "message": ""})
    return sorted(out, key=lambda r: {"fail": 0, "caution": 1}.get(r["status"], 2))


def screening_verdict(case: dict) -> str:
    s = case.get("screening") or {}
    status = s.get("status")
    if status is None:
        status = "pass" if s.get("passed") else "fail"
    failing = [r for r in screening_rules(case) if r.get("status") == "fail"]
    if status == "fail" or not s.get("passed", True):
        names = ", ".join(str(r["rule"]).replace("_", " ") for r in failing)
        return "not passed" + (f" — fails {names}" if names else "")
    if status in ("caution", "warn"):
        return "passed with cautions"
    return "passed"


def _design_words(bank: dict) -> str:
    label = bank.get("label") or bank.get("kind") or "design"
    if "detuned" in label:
        return label
    det = bank.get("detuning")
    if isinstance(det, dict) and det.get("reactor_percent"):
        label += f", detuned {det['reactor_percent']:g} %"
    elif isinstance(det, int | float) and det:
        label += f", detuned {det:g} %"
    return label


def recommendation(report: ReportData) -> str:
    """The case in one sentence."""
    c = report.scenario
    if not c:
        t = report.audit.get("totals") or {}
        return (f"Meter {report.meter} paid {_money(t.get('reactive_total'), report.currency)} in reactive "
                f"charges over the audited periods at an energy power factor of {_num(t.get('pf'), 3)}.")
    cur = report.currency
    design = _design_words(c["bank"])
    recommended = c.get("recommended", (c.get("screening") or {}).get("passed", True))
    if not recommended:
        alt = c.get("alternative")
        text = f"Do not install {design} as it stands: it fails screening ({screening_verdict(c)})."
        if alt:
            text += f" The nearest design that passes is {alt.get('label')}."
        return text
    if c.get("annual_savings", 0) <= 0:
        return f"{design[:1].upper() + design[1:]} saves nothing under this tariff: no bank is recommended on these figures."
    pb = c.get("simple_payback_years")
    pays = f"paying back in {_num(pb, 1)} years" if pb is not None else "without paying back"
    return (f"Install {design} on meter {report.meter}: it saves {_money(c['annual_savings'], cur)} a year "
            f"for {_money(c['capex'], cur)} installed, {pays}, with an NPV of {_money(c['npv'], cur)} "
            f"over {c.get('life_years')} years; screening {screening_verdict(c)}.")


def _num(v, digits: int = 2) -> str:
    from auditor.presentation import num

    return num(v, digits)


def _money(v, cur: str) -> str:
    return f"{_num(v, 2)} {cur}".strip()


def summary_rows(report: ReportData) -> list[dict]:
    """The summary's figures: ``{key, label, value, unit, kind}`` (the value as the scenario
    holds it; ``kind`` says how to show it)."""
    c = report.scenario
    cur = report.currency
    if not c:
        t = report.audit.get("totals") or {}
        return [
            {"key": "kwh", "label": "Energy", "value": t.get("kwh"), "unit": "kWh", "kind": "energy"},
            {"key": "pf", "label": "Energy power factor", "value": t.get("pf"), "unit": "", "kind": "pf"},
            {"key": "reactive_total", "label": "Reactive charges", "value": t.get("reactive_total"), "unit": cur,
             "kind": "money"},
            {"key": "total", "label": "All charges", "value": t.get("total"), "unit": cur, "kind": "money"},
        ]
    bank = c["bank"]
    cap = c.get("capacity") or {}
    irr = c.get("irr")
    return [
        {"key": "design", "label": "Design", "value": _design_words(bank), "unit": "", "kind": "text"},
        {"key": "total_kvar", "label": "Rated output", "value": bank.get("total_kvar"), "unit": "kvar", "kind": "kvar"},
        {"key": "steps", "label": "Steps", "value": ", ".join(f"{s:g}" for s in bank.get("steps_kvar") or []),
         "unit": "kvar", "kind": "text"},
        {"key": "annual_savings", "label": "Saving a year (tariff, first year)", "value": c["annual_savings"],
         "unit": cur, "kind": "money"},
        {"key": "capex", "label": "Capex (installed)", "value": c["capex"], "unit": cur, "kind": "money"},
        {"key": "simple_payback_years", "label": "Simple payback", "value": c.get("simple_payback_years"),
         "unit": "years", "kind": "years"},
        {"key": "discounted_payback_years", "label": "Discounted payback", "value": c.get("discounted_payback_years"),
         "unit": "years", "kind": "years"},
        {"key": "npv", "label": f"NPV ({c.get('life_years')} years at {100 * c.get('discount_rate', 0):.1f} % a year)",
         "value": c["npv"], "unit": cur, "kind": "money"},
        {"key": "irr", "label": "IRR", "value": None if irr is None else 100 * irr, "unit": "%", "kind": "percent"},
        {"key": "pf_before", "label": "Energy PF before", "value": c.get("pf_before"), "unit": "", "kind": "pf"},
        {"key": "pf_after", "label": "Energy PF after", "value": c.get("pf_after"), "unit": "", "kind": "pf"},
        {"key": "released_kva", "label": "Released capacity at the peak", "value": cap.get("released_kva"),
         "unit": "kVA", "kind": "kvar"},
        {"key": "screening", "label": "Screening", "value": screening_verdict(c), "unit": "", "kind": "text"},
    ]


def assumption_rows(report: ReportData) -> list[dict]:
    """Every assumption the finance rests on: ``{label, value, unit, kind, note}``."""
    from auditor.finance import CostInputs

    c = report.scenario or {}
    given = dict((c.get("request") or {}).get("costs") or {})
    stored = c.get("cost_inputs")
    ci = dict(stored) if stored else {**CostInputs().to_dict(), **given}
    cur = report.currency
    demo = "demonstration assumption — use quotations"

    def note(key, default_note=demo):
        return "as given" if key in given else default_note

    price = ci.get("energy_price_per_kwh")
    rows = [
        {"label": "Fixed installed cost", "value": ci.get("capex_fixed"), "unit": cur, "kind": "money", "note": note("capex_fixed")},
        {"label": "Installed cost per kvar", "value": ci.get("capex_per_kvar"), "unit": f"{cur}/kvar", "kind": "money",
         "note": note("capex_per_kvar")},
        {"label": "Automatic bank premium", "value": ci.get("automatic_premium"), "unit": cur, "kind": "money",
         "note": note("automatic_premium")},
        {"label": "Detuning premium per kvar", "value": ci.get("detuning_premium_per_kvar"), "unit": f"{cur}/kvar",
         "kind": "money", "note": note("detuning_premium_per_kvar")},
        ({"label": "O&M a year", "value": ci.get("om_per_year"), "unit": cur, "kind": "money", "note": note("om_per_year")}
         if ci.get("om_per_year") is not None else
         {"label": "O&M a year, share of capex", "value": ci.get("om_percent_of_capex"), "unit": "%", "kind": "percent",
          "note": note("om_percent_of_capex")}),
        {"label": "Bank losses, plain", "value": ci.get("loss_w_per_kvar"), "unit": "W/kvar", "kind": "power",
         "note": note("loss_w_per_kvar", "from memory: 0.2–0.5 W/kvar for LV capacitors")},
        {"label": "Bank losses, detuned", "value": ci.get("loss_w_per_kvar_detuned"), "unit": "W/kvar", "kind": "power",
         "note": note("loss_w_per_kvar_detuned", "from memory: several W/kvar with reactors")},
        {"label": "Energy price valuing losses", "value": price if price is not None else report.tariff.energy.price_per_kwh,
         "unit": f"{cur}/kWh", "kind": "price", "note": "as given" if price is not None else "the tariff's base energy price"},
        {"label": "Life", "value": ci.get("life_years"), "unit": "years", "kind": "int", "note": note("life_years", "common practice: 10–20 years for LV banks")},
        {"label": "Discount rate", "value": None if ci.get("discount_rate") is None else 100 * ci["discount_rate"],
         "unit": "% a year", "kind": "percent", "note": note("discount_rate")},
        {"label": "Escalation of tariff prices", "value": None if ci.get("escalation") is None else 100 * ci["escalation"],
         "unit": "% a year", "kind": "percent", "note": note("escalation")},
        {"label": "Incentive or rebate", "value": ci.get("incentive", 0.0), "unit": cur, "kind": "money",
         "note": (f"received in year {ci.get('incentive_year', 0)}" if ci.get("incentive") else "none")},
        {"label": "Replacement of cells or contactors",
         "value": ci.get("replacement_cost", 0.0), "unit": cur, "kind": "money",
         "note": (f"in year {ci.get('replacement_year')}" if ci.get("replacement_year") else "none")},
        {"label": "Profit tax rate", "value": 100 * (ci.get("tax_rate") or 0.0), "unit": "%", "kind": "percent",
         "note": ((f"straight-line depreciation over {ci.get('depreciation_years') or ci.get('life_years')} years "
                   "of capex less incentive") if ci.get("tax_rate") else "no tax")},
        {"label": "Network losses between meter and bank", "value": ci.get("network_loss_percent"), "unit": "% of energy",
         "kind": "percent", "note": note("network_loss_percent", "demonstration assumption (from memory: a few percent)")},
        {"label": "Loss reduction counted in the payback", "value": "yes" if ci.get("count_loss_reduction") else "no",
         "unit": "", "kind": "text", "note": "off by default: an indication, shown apart"},
    ]
    if c.get("loss_reduction_kwh_per_year") is not None:
        rows.append({"label": "Line-loss reduction (indicative)", "value": c.get("loss_reduction_kwh_per_year"),
                     "unit": "kWh a year", "kind": "energy",
                     "note": f"worth {_money(c.get('loss_reduction_value_per_year'), cur)} a year; "
                             f"1 − (PF₁/PF₂)² = {_num(100 * (c.get('line_loss_reduction') or 0), 1)} % of the network losses"})
    return rows


def specification(case: dict | None) -> dict | None:
    """The specification rows (``specification.rows``), or None when the case has none."""
    spec = (case or {}).get("specification")
    if not spec or not spec.get("rows"):
        return None
    return {"recommended": spec.get("recommended", True), "rows": list(spec["rows"])}


def harmonics_view(case: dict | None) -> dict | None:
    """The harmonic study for display: its summary pairs and, when it has them, the table of
    orders (every key of each order row, as it comes)."""
    h = (case or {}).get("harmonics")
    if not h:
        return None
    summary = []
    for key, value in h.items():
        if isinstance(value, dict):
            for k2, v2 in value.items():
                if not isinstance(v2, list | dict):
                    summary.append((f"{charge_title(key)}: {k2.replace('_', ' ')}", v2))
        elif not isinstance(value, list) and value is not None:
            summary.append((charge_title(key), value))
    orders = h.get("orders") or []
    keys = list(orders[0]) if orders and isinstance(orders[0], dict) else []
    return {"summary": summary, "order_keys": keys, "orders": orders if keys else []}


def quality_rows(report: ReportData) -> list[dict]:
    return [{"kind": k.replace("_", " "), **v} for k, v in (report.quality or {}).items()]


def _audit_tables(report: ReportData) -> list[tuple[str, list[Column], list[list]]]:
    """The audit by period as tables that fit a printed page: energy and PF, peaks (with
    their local times), charges."""
    a = report.audit
    cur = a.get("currency") or report.currency
    tz = report.timezone
    first = Column("Period", _label)
    energy = [first, Column("Energy (kWh)", lambda p: p["kwh"], "energy"),
              Column("Lagging (kvarh)", lambda p: p["kvarh_lag"], "energy"),
              Column("Leading (kvarh)", lambda p: p["kvarh_lead"], "energy"),
              Column("Energy PF", lambda p: p["pf"], "pf"), Column("tan φ", lambda p: p["tan_phi"], "pf"),
              Column("Load factor (%)", lambda p: _pct(p["load_factor"]), "percent"),
              Column("Coverage (%)", lambda p: _pct(p["coverage"]), "percent"),
              Column("Estimated intervals", lambda p: p["estimated_intervals"], "int")]
    peaks = [first, Column("Peak (kW)", lambda p: p["peak_kw"], "power"),
             Column(f"Peak at ({tz})", lambda p: local_time(p.get("peak_kw_at"), tz)),
             Column("PF at kW peak", lambda p: p["pf_at_peak"], "pf"),
             Column("Peak (kVA)", lambda p: p["peak_kva"], "power"),
             Column("Peak lagging (kvar)", lambda p: p["peak_kvar"], "power")]
    charges = [first] + [Column(f"{charge_title(k)} ({cur})", lambda p, k=k: p["charges"].get(k), "money")
                         for k in report.charge_keys]
    charges += [Column(f"Reactive charges ({cur})", lambda p: p["reactive_total"], "money"),
                Column(f"Total ({cur})", lambda p: p["total"], "money")]
    out = []
    for title, cols in (("Energy and power factor", energy), ("Peaks", peaks), ("Charges", charges)):
        groups = column_groups(cols, PRINT_COLUMNS)
        for i, g in enumerate(groups):
            name = title if len(groups) == 1 else f"{title} ({i + 1} of {len(groups)})"
            out.append((name, g, [[c.get(p) for c in g] for p in a["periods"]]))
    return out


def _split(cols: list[Column], items: list) -> list[tuple[list[Column], list[list]]]:
    return [(g, [[c.get(x) for c in g] for x in items]) for g in column_groups(cols, PRINT_COLUMNS)]


# --------------------------------------------------------------------------------------------
# HTML and PDF
# --------------------------------------------------------------------------------------------
def report_charts(report: ReportData) -> list[tuple[str, str, str]]:
    """(id, title, figure JSON) of every chart of the document."""
    from auditor import charts

    out = [("pf", "Power factor by period against the tariff's thresholds",
            charts.pf_by_period(report.audit, report.thresholds)),
           ("reactive", "Reactive charges by period", charts.reactive_by_period(report.audit, list(report.reactive_keys))),
           ("peaks", "Peaks by period", charts.peaks_by_period(report.audit))]
    if report.profile is not None:
        out.append(("heatmap", "Power factor by day and time of day", charts.pf_heatmap(report.profile)))
        out.append(("duration", "Duration curve of the kvar needed", charts.duration_curve(report.profile)))
    if report.scenario:
        out += [("before_after", "Before and after correction", charts.before_after(report.scenario)),
                ("savings", "Saving by charge", charts.savings_by_charge(report.scenario)),
                ("cashflow", "Cash flow", charts.cash_flow(report.scenario))]
        fig = charts.frequency_scan(report.scenario)
        if fig is not None:
            out.append(("scan", "Frequency scan", fig))
    return [(k, title, charts.figure_json(_printable(f))) for k, title, f in out]


def _printable(fig: dict) -> dict:
    """A figure sized for a printed page: fixed height, legend below."""
    layout = dict(fig.get("layout") or {})
    layout.setdefault("height", 330)
    xaxis = layout.get("xaxis") or {}
    if (xaxis.get("title") or {}).get("text") and isinstance(layout.get("legend"), dict):
        # a legend below an axis title: room for both
        layout["legend"] = {**layout["legend"], "y": -0.3}
        layout["margin"] = {**(layout.get("margin") or {}), "b": 72}
    return {**fig, "layout": layout}


def document_css(paper: str = "a4") -> str:
    from auditor.presentation import web_folder

    size, width = PAPERS[paper]
    css = (web_folder() / "templates" / "documents" / "case.css").read_text(encoding="utf-8")
    return css.replace("__PAGE_SIZE__", size).replace("__PAGE_WIDTH__", width)


def _check_paper(paper: str) -> str:
    p = (paper or "a4").lower()
    if p not in PAPERS:
        raise UsageError(f"paper {paper!r}: use one of {', '.join(PAPERS)}")
    return p


def render_html(report: ReportData, nonce: str | None = None, paper: str = "a4") -> str:
    """One HTML document: styles, plotly.js, chart data and tables inline; opens offline and
    prints one section a page on ``paper`` (``a4`` or ``letter``)."""
    from plotly.offline import get_plotlyjs

    from auditor.presentation import document_environment

    paper = _check_paper(paper)
    nonce = nonce or secrets.token_urlsafe(16)
    c = report.scenario
    cur = report.currency
    ctx = dict(
        r=report, case=c, audit=report.audit, cur=cur, paper=paper, css=document_css(paper),
        plotly_js=get_plotlyjs(), nonce=nonce, disclaimer=DISCLAIMER, cautions=report.cautions,
        charts=report_charts(report), clauses=describe_tariff(report.tariff), summary=summary_rows(report),
        sentence=recommendation(report), audit_tables=_audit_tables(report), quality=quality_rows(report),
        sources=SOURCES, local_generated=local_time(report.generated_at, report.timezone),
    )
    if c:
        ctx.update(
            assumptions=assumption_rows(report), spec=specification(c), harmonics=harmonics_view(c),
            rules=screening_rules(c), verdict=screening_verdict(c),
            before_after=_split(scenario_columns(c), _pairs(c)),
            savings=(savings_columns(cur), [[charge_title(k), v] for k, v in c["savings_by_charge"].items()]),
            cash_flow=_split(cash_flow_columns(cur, c), c.get("cash_flow") or []),
            sensitivity=(sensitivity_columns(cur), [[col.get(r) for col in sensitivity_columns(cur)]
                                                    for r in c.get("sensitivity") or []]),
            candidates=_split(candidate_columns(cur), (c.get("candidates") or [])[:15]),
            resonance_stages=list((c.get("screening") or {}).get("resonance_orders_by_stage") or []),
        )
    return document_environment().get_template("documents/case.html").render(**ctx)


def render_pdf(report: ReportData, paper: str = "a4") -> bytes:
    """The HTML document printed by headless Chromium (:mod:`auditor.services.pdf`)."""
    from auditor.services.pdf import html_to_pdf

    paper = _check_paper(paper)
    return html_to_pdf(render_html(report, paper=paper), paper=paper)


# --------------------------------------------------------------------------------------------
# CSV and XLSX
# --------------------------------------------------------------------------------------------
#: The tables a CSV of a report can hold, one a file (a CSV is one table: one header row that
#: every reader, and a spreadsheet's import, takes as the column names).
CSV_TABLES = ("periods", "summary", "specification")
#: The columns of the summary and specification CSVs (and of the specification read back).
ITEM_COLUMNS = ("Section", "Item", "Value", "Unit", "Note")


def summary_items(report: ReportData) -> list[dict]:
    """The summary as rows of ``{section, label, value, unit, note}``: the case and its cover,
    the recommendation, the figures, and for a scenario every assumption and screening rule —
    what the XLSX's Summary sheet holds, as one table."""
    cover = report.cover or {}
    rows = [{"section": "Case", "label": label, "value": value, "unit": "", "note": ""} for label, value in (
        ("Client", cover.get("client") or ""), ("Project", cover.get("project") or ""),
        ("Author", cover.get("author") or ""), ("Meter", report.meter), ("Site", report.site),
        ("Time zone", report.timezone), ("Tariff", report.tariff.name), ("Currency", report.currency),
        ("Scenario", report.scenario_name or ""), ("Generated (UTC)", report.generated_at))]
    rows.append({"section": "Recommendation", "label": "Recommendation", "value": recommendation(report),
                 "unit": "", "note": DISCLAIMER})
    rows += [{"section": "Figures", "label": x["label"], "value": x["value"], "unit": x["unit"], "note": ""}
             for x in summary_rows(report)]
    c = report.scenario
    if c:
        rows += [{"section": "Assumptions", "label": a["label"], "value": a["value"], "unit": a["unit"],
                  "note": a["note"]} for a in assumption_rows(report)]
        for r in screening_rules(c):
            limit = "" if r.get("limit") is None else f", limit {_num(r['limit'], 2)} {r.get('unit') or ''}".rstrip()
            rows.append({"section": "Screening", "label": str(r.get("rule")).replace("_", " "),
                         "value": r.get("value"), "unit": r.get("unit") or "",
                         "note": f"{r.get('status')}{limit}: {r.get('message') or ''}".rstrip(": ")})
    return rows


def specification_items(report: ReportData) -> list[dict]:
    """The specification's rows as the case holds them (``specification.rows``), or one row
    saying there is none."""
    if not report.scenario:
        raise UsageError("a specification belongs to a correction case: export a saved scenario")
    spec = specification(report.scenario)
    if spec is None:
        return [{"section": "Specification", "label": "none", "value": "", "unit": "",
                 "note": "this case was saved without a specification; compute the scenario again"}]
    return spec["rows"]


def _item_columns() -> list[Column]:
    return [Column(h, lambda r, k=k: r.get(k)) for h, k in zip(ITEM_COLUMNS, ("section", "label", "value", "unit",
                                                                              "note"), strict=True)]


def render_csv(report: ReportData, table: str = "periods") -> bytes:
    """One table of the report as CSV (UTF-8, comma, header row in words with units):

    * ``periods`` (default): the audit by period, or with a scenario its before/after table;
    * ``summary``: Section, Item, Value, Unit, Note — the case, recommendation, figures,
      assumptions and screening rules;
    * ``specification``: the same columns, the specification's rows as ``auditor size --json``
      gives them."""
    if table == "summary":
        return render_csv_table(_item_columns(), summary_items(report))
    if table == "specification":
        return render_csv_table(_item_columns(), specification_items(report))
    if table != "periods":
        raise UsageError(f"unknown CSV table {table!r}; use one of {', '.join(CSV_TABLES)}")
    if report.scenario:
        return render_csv_table(scenario_columns(report.scenario), _pairs(report.scenario))
    return render_csv_table(period_columns(report.audit, list(report.charge_keys)), report.audit["periods"])


def _kind_for_xlsx(kind: str) -> str:
    return {"years": "years", "kvar": "kvar", "price": "number"}.get(kind, kind)


def render_xlsx(report: ReportData) -> bytes:
    """A workbook: ``Summary`` first (the case, the recommendation, design, money,
    assumptions, screening verdict and rules, specification), then the detail sheets."""
    cur = report.currency
    book = Workbook(cur)
    c = report.scenario
    cover = report.cover or {}
    case_rows = [
        [("Client", "text"), (cover.get("client") or "–", "text")],
        [("Project", "text"), (cover.get("project") or "–", "text")],
        [("Author", "text"), (cover.get("author") or "–", "text")],
        [("Meter", "text"), (report.meter, "text")],
        [("Site", "text"), (report.site, "text")],
        [("Time zone", "text"), (report.timezone, "text")],
        [("Tariff", "text"), (report.tariff.name, "text")],
        [("Currency", "text"), (cur, "text")],
        [("Scenario", "text"), (report.scenario_name or "–", "text")],
        [("Generated (UTC)", "text"), (report.generated_at, "text")],
        [("Note", "text"), (DISCLAIMER, "text")],
    ]
    blocks = [("Case", ["Item", "Value"], case_rows),
              ("Recommendation", [], [[(recommendation(report), "text")]]),
              ("Figures", ["Item", "Value", "Unit"],
               [[(s["label"], "text"), (s["value"], _kind_for_xlsx(s["kind"])), (s["unit"], "text")]
                for s in summary_rows(report)])]
    if c:
        blocks.append(("Assumptions", ["Assumption", "Value", "Unit", "Source or note"],
                       [[(a["label"], "text"), (a["value"], _kind_for_xlsx(a["kind"])), (a["unit"], "text"),
                         (a["note"], "text")] for a in assumption_rows(report)]))
        blocks.append(("Screening: " + screening_verdict(c), ["Rule", "Status", "Value", "Limit", "Unit", "Finding"],
                       [[(str(r.get("rule")).replace("_", " "), "text"), (r.get("status"), "text"),
                         (r.get("value"), "number"), (r.get("limit"), "number"), (r.get("unit") or "", "text"),
                         (r.get("message") or "", "text")] for r in screening_rules(c)]))
        spec = specification(c)
        if spec:
            blocks.append(("Specification" + ("" if spec["recommended"] else " (not recommended as it stands)"),
                           ["Section", "Item", "Value", "Unit", "Note"],
                           [[(x.get("section"), "text"), (x.get("label"), "text"), (x.get("value"), "number"),
                             (x.get("unit"), "text"), (x.get("note"), "text")] for x in spec["rows"]]))
        else:
            blocks.append(("Specification", [], [[("No specification: this case was saved without one.", "text")]]))
    title = (f"{report.title} — {report.scenario_name}" if c else f"{report.title} — {report.meter}")
    book.sections("Summary", blocks, heading=title)

    book.table("Periods", period_columns(report.audit, list(report.charge_keys)), report.audit["periods"])
    tz = report.timezone
    book.table("Peak times", [Column("Period", _label), Column("Peak (kW)", lambda p: p["peak_kw"], "power"),
                              Column(f"Peak at ({tz})", lambda p: local_time(p.get("peak_kw_at"), tz)),
                              Column("Peak at (ISO 8601)", lambda p: p.get("peak_kw_at"))], report.audit["periods"])
    if c:
        book.table("Before-after", scenario_columns(c), _pairs(c))
        book.table("Savings", savings_columns(cur),
                   [[charge_title(k), v] for k, v in c["savings_by_charge"].items()] + [["Total", c["annual_savings"]]])
        book.table("Cash flow", cash_flow_columns(cur, c), c.get("cash_flow") or [])
        if c.get("sensitivity"):
            book.table("Sensitivity", sensitivity_columns(cur), c["sensitivity"])
        book.table("Assumptions", [Column("Assumption", lambda a: a["label"]),
                                   Column("Value", lambda a: a["value"], "number"),
                                   Column("Unit", lambda a: a["unit"]), Column("Source or note", lambda a: a["note"])],
                   assumption_rows(report))
        s = c.get("screening") or {}
        book.table("Screening", [Column("Rule", lambda r: str(r.get("rule")).replace("_", " ")),
                                 Column("Status", lambda r: r.get("status")),
                                 Column("Value", lambda r: r.get("value"), "number"),
                                 Column("Limit", lambda r: r.get("limit"), "number"),
                                 Column("Unit", lambda r: r.get("unit") or ""),
                                 Column("Finding", lambda r: r.get("message") or "")], screening_rules(c),
                   note=f"Screening {screening_verdict(c)}")
        stages = s.get("resonance_orders_by_stage") or []
        if stages:
            book.table("Resonance by stage", [Column("Stage", lambda r: r[0], "int"),
                                              Column("Resonance order h", lambda r: r[1], "power")],
                       [[i + 1, h] for i, h in enumerate(stages)])
        spec = specification(c)
        if spec:
            book.table("Specification", [Column(h.capitalize(), lambda r, h=h: r.get(h),
                                                "number" if h == "value" else "text")
                                         for h in ("section", "label", "value", "unit", "note")], spec["rows"])
        hv = harmonics_view(c)
        if hv and hv["orders"]:
            book.table("Harmonics", [Column(charge_title(k), lambda r, k=k: r.get(k), "number")
                                     for k in hv["order_keys"]], hv["orders"])
        if c.get("candidates"):
            book.table("Candidates", candidate_columns(cur), c["candidates"])
        if c.get("warnings"):
            book.table("Warnings", [Column("Warning", lambda w: w)], c["warnings"])
    q = quality_rows(report)
    book.table("Data quality", [Column("Finding", lambda r: r["kind"]), Column("Findings", lambda r: r["findings"], "int"),
                                Column("Intervals", lambda r: r["intervals"], "int")], q,
               note="VEE findings of the meter's imports" if q else "No data-quality findings in the imports")
    if report.audit.get("warnings"):
        book.table("Data warnings", [Column("Warning", lambda w: w)], report.audit["warnings"])
    book.table("Cautions", [Column("Caution", lambda x: x)], report.cautions)
    return book.save()


# --------------------------------------------------------------------------------------------
# writing files
# --------------------------------------------------------------------------------------------
def render(report: ReportData, fmt: str, paper: str = "a4", table: str = "periods") -> bytes:
    """The report in ``fmt``; ``table`` chooses the table of a CSV (:data:`CSV_TABLES`)."""
    if table != "periods" and fmt != "csv":
        raise UsageError("choosing a table works for a CSV file only (the other formats hold every table)")
    if fmt == "html":
        return render_html(report, paper=paper).encode("utf-8")
    if fmt == "pdf":
        return render_pdf(report, paper)
    if fmt == "csv":
        return render_csv(report, table)
    if fmt == "xlsx":
        return render_xlsx(report)
    raise UsageError(f"unknown export format {fmt!r}; use one of {', '.join(DOCUMENT_FORMATS)}")


def format_of(out: str | Path) -> str:
    fmt = Path(out).suffix.lower().lstrip(".")
    if fmt == "htm":
        fmt = "html"
    if fmt not in DOCUMENT_FORMATS:
        raise UsageError(f"{Path(out).name}: a report file name must end in .html, .pdf, .xlsx or .csv")
    return fmt


def _write(out: Path, data: bytes) -> Path:
    """Write whole or not at all: a temporary file beside the target, then a rename."""
    import os
    import tempfile

    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=".part", dir=out.parent)
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
            os.replace(tmp, out)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
    except OSError as exc:
        raise UsageError(f"cannot write {out} ({exc.strerror})") from None
    return out


def write_document(report: ReportData, out: str | Path, *, paper: str = "a4", table: str = "periods") -> Path:
    """Write an already gathered report in the format ``out``'s suffix names (``table``: which
    table a CSV holds)."""
    out = Path(out)
    return _write(out, render(report, format_of(out), _check_paper(paper), table))


def write_report(store: Store, meter: str, tariff: str | Path | Tariff, out: str | Path,
                 scenario: str | None = None, *, paper: str = "a4") -> Path:
    """Write the export named by ``out``'s suffix (.html, .pdf, .xlsx, .csv) and return its path."""
    out = Path(out)
    fmt = format_of(out)
    paper = _check_paper(paper)
    report = build_report(store, meter, tariff, scenario, with_profile=fmt in ("html", "pdf"))
    return _write(out, render(report, fmt, paper))


def write_case(store: Store, scenario: str, out: str | Path, *, tariff: str | Path | Tariff | None = None,
               paper: str = "a4") -> Path:
    """Write the case document of a saved scenario in the format ``out``'s suffix names."""
    out = Path(out)
    fmt = format_of(out)
    paper = _check_paper(paper)
    report = build_case(store, scenario, tariff, with_profile=fmt in ("html", "pdf"))
    return _write(out, render(report, fmt, paper))
