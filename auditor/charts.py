"""Chart figures (plotly JSON: ``{"data": [...], "layout": {...}}``) from service results.

Shared by the dashboard (:mod:`auditor.web`) and the exported reports
(:mod:`auditor.services.report`), so it lives below both: it imports neither Flask nor the store.

Plain dicts rather than ``plotly.graph_objects``: the figures are serialised once per page,
and building validated graph objects for a meter-year costs more than the page budget. The
browser draws them with the plotly.js bundled in the plotly package (served locally; reports
embed it), so nothing is fetched from the network. No WebGL traces: the P–Q scatter is
thinned on the server instead, which keeps the Content-Security-Policy free of 'unsafe-eval'.
"""
from __future__ import annotations

import json
import math
from datetime import date

import numpy as np

from auditor.render import _clean, local_time

# palette of the dashboard (also in static/style.css)
INK = "#1d2a33"
GRID = "#e3e8ec"
BEFORE = "#c0702b"  # copper: the site as metered
AFTER = "#2f7d6d"  # sea green: with the bank
LIMIT = "#8c2f39"  # wine: tariff thresholds
NEUTRAL = "#4a6a8a"  # steel blue: plain quantities
EXTRA = ("#c0702b", "#4a6a8a", "#9a7fb8", "#b59a2b", "#5d8f3a", "#8c2f39")

_BASE_LAYOUT = {
    "margin": {"l": 64, "r": 20, "t": 40, "b": 48},
    "font": {"family": "system-ui, -apple-system, 'Segoe UI', sans-serif", "size": 12, "color": INK},
    "paper_bgcolor": "rgba(0,0,0,0)",
    "plot_bgcolor": "#ffffff",
    "legend": {"orientation": "h", "y": -0.18},
    "hovermode": "closest",
}


def _layout(title: str, x: str | None = None, y: str | None = None, **extra) -> dict:
    out = json.loads(json.dumps(_BASE_LAYOUT))
    out["title"] = {"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 14}}
    out["xaxis"] = {"title": {"text": x} if x else None, "gridcolor": GRID, "zeroline": False}
    out["yaxis"] = {"title": {"text": y} if y else None, "gridcolor": GRID, "zeroline": False}
    for k, v in extra.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k].update(v)
        else:
            out[k] = v
    return out


def period_label(p: dict) -> str:
    """``2025-03`` for a calendar month, else ``start..end`` (end exclusive)."""
    s, e = date.fromisoformat(p["start"]), date.fromisoformat(p["end"])
    nxt = date(s.year + (s.month == 12), s.month % 12 + 1, 1)
    if s.day == 1 and e == nxt:
        return f"{s.year:04d}-{s.month:02d}"
    return f"{p['start']}..{p['end']}"


def figure_json(fig: dict) -> str:
    """Standard JSON (NaN → null), compact."""
    return json.dumps(_clean(fig), separators=(",", ":"), allow_nan=False)


def _nan_to_none(values) -> list:
    a = np.asarray(values, dtype=float)
    return [None if not math.isfinite(v) else v for v in a.tolist()]


# --------------------------------------------------------------------------------------------
# audit (one meter, one tariff)
# --------------------------------------------------------------------------------------------
def pf_by_period(audit: dict, thresholds: list[dict]) -> dict:
    periods = audit["periods"]
    labels = [period_label(p) for p in periods]
    data = [{"type": "scatter", "mode": "lines+markers", "name": "energy PF (lagging kvarh)",
             "x": labels, "y": [p["pf"] for p in periods], "line": {"color": NEUTRAL, "width": 2},
             "marker": {"size": 7}, "hovertemplate": "%{x}: PF %{y:.3f}<extra></extra>"},
            {"type": "scatter", "mode": "markers", "name": "PF at the kW peak",
             "x": labels, "y": [p["pf_at_peak"] for p in periods],
             "marker": {"color": BEFORE, "symbol": "diamond-open", "size": 8},
             "hovertemplate": "%{x}: PF at peak %{y:.3f}<extra></extra>"}]
    shapes, notes = [], []
    for i, t in enumerate(thresholds):
        shapes.append({"type": "line", "xref": "paper", "x0": 0, "x1": 1, "y0": t["pf"], "y1": t["pf"],
                       "line": {"color": LIMIT, "width": 1.5, "dash": "dash"}})
        notes.append({"xref": "paper", "x": 1, "xanchor": "right", "y": t["pf"], "yanchor": "bottom",
                      "text": f"{t['key']}: PF {t['pf']:.3f}", "showarrow": False,
                      "font": {"color": LIMIT, "size": 11}, "yshift": 2 + 12 * i})
    ys = [v for p in periods for v in (p["pf"], p["pf_at_peak"]) if v is not None] + [t["pf"] for t in thresholds]
    lo = max(0.0, min(ys) - 0.03) if ys else 0.5
    return {"data": data, "layout": _layout("Power factor by billing period", None, "PF",
                                            shapes=shapes, annotations=notes,
                                            yaxis={"range": [lo, 1.005]})}


def reactive_by_period(audit: dict, reactive_keys: list[str]) -> dict:
    periods = audit["periods"]
    labels = [period_label(p) for p in periods]
    cur = audit.get("currency") or ""
    data = []
    for i, key in enumerate(reactive_keys):
        if not any(p["charges"].get(key) for p in periods):
            continue  # a clause that charged nothing in any period only clutters the legend
        data.append({"type": "bar", "name": key, "x": labels,
                     "y": [p["charges"].get(key, 0.0) for p in periods],
                     "marker": {"color": EXTRA[i % len(EXTRA)]},
                     "hovertemplate": f"%{{x}} {key}: %{{y:,.2f}} {cur}<extra></extra>"})
    layout = _layout("Reactive charges by billing period", None, f"charge ({cur})", barmode="stack",
                     showlegend=True)
    if not data:
        layout["annotations"] = [{"xref": "paper", "yref": "paper", "x": 0.5, "y": 0.5, "showarrow": False,
                                  "text": "no reactive charge in any period"}]
    return {"data": data, "layout": layout}


def peaks_by_period(audit: dict) -> dict:
    """Peak kW, kVA and kvar by period; hovering a peak shows when it was (local time, zone
    named)."""
    periods = audit["periods"]
    labels = [period_label(p) for p in periods]
    tz = audit.get("timezone")

    def when(key: str) -> list[str]:
        return [local_time(p.get(key), tz) if p.get(key) else "-" for p in periods]

    data = [{"type": "bar", "name": "peak kW", "x": labels, "y": [p["peak_kw"] for p in periods],
             "customdata": when("peak_kw_at"), "marker": {"color": NEUTRAL},
             "hovertemplate": "%{x}: %{y:,.1f} kW at %{customdata}<extra></extra>"},
            {"type": "bar", "name": "peak kVA", "x": labels, "y": [p["peak_kva"] for p in periods],
             "customdata": when("peak_kva_at"), "marker": {"color": BEFORE},
             "hovertemplate": "%{x}: %{y:,.1f} kVA at %{customdata}<extra></extra>"},
            {"type": "scatter", "mode": "lines+markers", "name": "peak kvar (lagging)", "x": labels,
             "y": [p["peak_kvar"] for p in periods], "line": {"color": LIMIT, "width": 1.5},
             "hovertemplate": "%{x}: %{y:,.1f} kvar<extra></extra>"}]
    return {"data": data, "layout": _layout("Demand peaks by billing period", None, "kW · kVA · kvar",
                                            barmode="group")}


def pf_heatmap(profile) -> dict:
    """PF per interval: days across, time of day down; lagging and leading intervals in two
    colour scales. Each ``z`` is sent as days × slots and transposed by plotly, one number
    (or null) per interval."""
    m = np.round(profile.pf_matrix, 3)
    lead = profile.leading_matrix
    lag_z = [[None if (v != v or ld) else v for v, ld in zip(row, lrow, strict=True)] for row, lrow in zip(m.tolist(), lead.tolist(), strict=True)]
    lead_z = [[v if (ld and v == v) else None for v, ld in zip(row, lrow, strict=True)] for row, lrow in zip(m.tolist(), lead.tolist(), strict=True)]
    slots = m.shape[1]
    step = profile.slot_minutes
    tod = [f"{(i * step) // 60:02d}:{(i * step) % 60:02d}" for i in range(slots)]
    common = {"x": profile.days, "y": tod, "transpose": True, "zmin": 0.6, "zmax": 1.0, "zauto": False,
              "hoverongaps": False, "xgap": 0, "ygap": 0}
    data = [dict(common, type="heatmap", name="lagging", z=lag_z,
                 colorscale=[[0.0, "#7a1f2b"], [0.45, "#d0783a"], [0.75, "#f2d49b"], [0.875, "#9cc9b4"], [1.0, "#1f6e5c"]],
                 colorbar={"title": {"text": "PF lagging"}, "thickness": 12, "len": 0.5, "y": 0.75},
                 hovertemplate="%{x} %{y}<br>PF %{z:.3f} lagging<extra></extra>")]
    if lead.any():
        data.append(dict(common, type="heatmap", name="leading", z=lead_z,
                         colorscale=[[0.0, "#1b2f6b"], [0.5, "#5b7fc7"], [1.0, "#cfe0f5"]],
                         colorbar={"title": {"text": "PF leading"}, "thickness": 12, "len": 0.45, "y": 0.22},
                         hovertemplate="%{x} %{y}<br>PF %{z:.3f} leading<extra></extra>"))
    return {"data": data, "layout": _layout(f"Power factor by time of day ({profile.timezone}); blue: leading",
                                            None, "time of day",
                                            yaxis={"autorange": "reversed", "dtick": 4 * 60 // step if step <= 60 else 1,
                                                   "type": "category"},
                                            xaxis={"type": "date"})}


def pq_scatter(profile, thresholds: list[dict]) -> dict:
    kw = np.asarray(profile.scatter_kw, dtype=float)
    kvar = np.asarray(profile.scatter_kvar, dtype=float)
    kmax = float(np.nanmax(kw)) if kw.size else 1.0
    tphi = math.sqrt(1 - profile.target_pf ** 2) / profile.target_pf
    data = [{"type": "scatter", "mode": "markers", "name": f"intervals (every {max(1, round(profile.n_intervals / max(1, kw.size)))}th)",
             "x": np.round(kw, 2).tolist(), "y": np.round(kvar, 2).tolist(),
             "marker": {"color": NEUTRAL, "size": 4, "opacity": 0.45},
             "hovertemplate": "%{x:,.1f} kW, %{y:,.1f} kvar<extra></extra>"},
            {"type": "scatter", "mode": "lines", "name": f"target PF {profile.target_pf:.2f}",
             "x": [0, kmax], "y": [0, kmax * tphi], "line": {"color": AFTER, "width": 2}}]
    for t in thresholds:
        tp = math.sqrt(max(0.0, 1 - t["pf"] ** 2)) / t["pf"]
        data.append({"type": "scatter", "mode": "lines", "name": f"{t['key']} PF {t['pf']:.3f}",
                     "x": [0, kmax], "y": [0, kmax * tp], "line": {"color": LIMIT, "width": 1.5, "dash": "dash"}})
    return {"data": data, "layout": _layout("Active against reactive power (net kvar; leading below zero)",
                                            "P (kW)", "Q (kvar)")}


def duration_curve(profile) -> dict:
    data = [{"type": "scatter", "mode": "lines", "name": "kvar needed", "x": profile.duration_percent,
             "y": profile.duration_kvar, "fill": "tozeroy", "line": {"color": AFTER, "width": 2},
             "fillcolor": "rgba(47,125,109,0.15)",
             "hovertemplate": "%{x:.0f} % of intervals need ≥ %{y:,.1f} kvar<extra></extra>"}]
    shapes = [{"type": "line", "x0": 5, "x1": 5, "yref": "paper", "y0": 0, "y1": 1,
               "line": {"color": LIMIT, "dash": "dot", "width": 1}}]
    notes = [{"x": 5, "y": profile.kvar_at_95, "text": f"{profile.kvar_at_95:,.0f} kvar suffices in 95 % of intervals",
              "showarrow": True, "arrowhead": 2, "ax": 90, "ay": -30, "font": {"size": 11}}]
    return {"data": data, "layout": _layout(f"Duration curve of the kvar needed for PF {profile.target_pf:.2f}",
                                            "share of intervals (%)", "kvar", shapes=shapes, annotations=notes)}


# --------------------------------------------------------------------------------------------
# scenario
# --------------------------------------------------------------------------------------------
def before_after(case: dict) -> dict:
    before, after = case["before"], case["after"]
    labels = [period_label(p) for p in before]
    cur = case.get("currency") or ""
    data = [{"type": "bar", "name": "reactive charges, as metered", "x": labels,
             "y": [p["reactive_total"] for p in before], "marker": {"color": BEFORE},
             "hovertemplate": f"%{{x}}: %{{y:,.2f}} {cur}<extra>before</extra>"},
            {"type": "bar", "name": "reactive charges, with the bank", "x": labels,
             "y": [p["reactive_total"] for p in after], "marker": {"color": AFTER},
             "hovertemplate": f"%{{x}}: %{{y:,.2f}} {cur}<extra>after</extra>"},
            {"type": "scatter", "mode": "lines+markers", "name": "saving on the whole bill", "x": labels,
             "y": [b["total"] - a["total"] for b, a in zip(before, after, strict=True)],
             "line": {"color": NEUTRAL, "width": 1.5, "dash": "dot"},
             "hovertemplate": f"%{{x}}: %{{y:,.2f}} {cur}<extra>saving</extra>"}]
    return {"data": data, "layout": _layout("Reactive charges before and after correction", None,
                                            f"charge ({cur})", barmode="group")}


def savings_by_charge(case: dict) -> dict:
    items = [(k, v) for k, v in case["savings_by_charge"].items() if abs(v) > 0.005]
    cur = case.get("currency") or ""
    items.sort(key=lambda kv: kv[1])
    data = [{"type": "bar", "orientation": "h", "x": [v for _, v in items], "y": [k for k, _ in items],
             "marker": {"color": [AFTER if v >= 0 else LIMIT for _, v in items]},
             "hovertemplate": f"%{{y}}: %{{x:,.2f}} {cur} a year<extra></extra>", "name": "saving"}]
    return {"data": data, "layout": _layout("Annual saving by charge (negative: the bank adds to it)",
                                            f"{cur} a year", None, showlegend=False,
                                            margin={"l": 130, "r": 20, "t": 40, "b": 48})}


def cash_flow(case: dict) -> dict:
    rows = case["cash_flow"]
    years = [r["year"] for r in rows]
    cur = case.get("currency") or ""
    data = [{"type": "bar", "name": "net cash flow of the year", "x": years, "y": [r["net"] for r in rows],
             "marker": {"color": [LIMIT if r["net"] < 0 else "#b8d4cc" for r in rows]},
             "hovertemplate": f"year %{{x}}: %{{y:,.0f}} {cur}<extra></extra>"},
            {"type": "scatter", "mode": "lines+markers", "name": "cumulative", "x": years,
             "y": [r["cumulative"] for r in rows], "line": {"color": AFTER, "width": 2.5},
             "hovertemplate": f"year %{{x}}: %{{y:,.0f}} {cur}<extra>cumulative</extra>"},
            {"type": "scatter", "mode": "lines", "name": "cumulative, discounted", "x": years,
             "y": [r["discounted_cumulative"] for r in rows], "line": {"color": NEUTRAL, "width": 1.5, "dash": "dash"},
             "hovertemplate": f"year %{{x}}: %{{y:,.0f}} {cur}<extra>discounted</extra>"}]
    notes, shapes = [], [{"type": "line", "xref": "paper", "x0": 0, "x1": 1, "y0": 0, "y1": 0,
                          "line": {"color": INK, "width": 1}}]
    pb = case.get("simple_payback_years")
    if pb is not None and pb <= (years[-1] if years else 0):
        data.append({"type": "scatter", "mode": "markers", "name": "payback", "x": [pb], "y": [0],
                     "marker": {"color": LIMIT, "size": 12, "symbol": "star"},
                     "hovertemplate": f"payback after {pb:.2f} years<extra></extra>"})
        notes.append({"x": pb, "y": 0, "text": f"payback {pb:.1f} years", "showarrow": True, "arrowhead": 2,
                      "ax": 40, "ay": -40, "font": {"color": LIMIT}})
    return {"data": data, "layout": _layout("Cash flow over the life of the bank", "year", cur,
                                            annotations=notes, shapes=shapes)}


def frequency_scan(case: dict) -> dict | None:
    """|Z_bus| against harmonic order without the bank and with each stage (log scale), with the
    orders screened or measured marked; None when the scenario has no scan (site data missing)."""
    scan = case.get("frequency_scan")
    if not scan:
        return None
    x = scan["orders"]
    data = [{"type": "scatter", "mode": "lines", "name": "site without the bank", "x": x,
             "y": scan["impedance_ohm_without"], "line": {"color": BEFORE, "width": 2.5},
             "hovertemplate": "order %{x:.1f}: %{y:.4f} Ω<extra>without</extra>"}]
    stages = scan.get("with") or []
    for k, st in enumerate(stages):
        last = k == len(stages) - 1
        data.append({"type": "scatter", "mode": "lines", "name": f"with {st['label']}", "x": x,
                     "y": st["impedance_ohm"],
                     "line": {"color": AFTER if last else EXTRA[1 + k % (len(EXTRA) - 1)],
                              "width": 2.2 if last else 1.1, "dash": None if last else "dot"},
                     "hovertemplate": f"order %{{x:.1f}}: %{{y:.4f}} Ω<extra>{st['label']}</extra>"})
    shapes = [{"type": "line", "x0": h, "x1": h, "yref": "paper", "y0": 0, "y1": 1,
               "line": {"color": LIMIT, "width": 1, "dash": "dot"}} for h in scan.get("harmonic_orders", [])]
    damped = (f"damped by {scan['load_kw']:,.0f} kW of load" if scan.get("damped") else "undamped")
    return {"data": data, "layout": _layout(
        f"Frequency scan at the bus: |Z| against harmonic order ({damped}; S_sc {scan['short_circuit_kva']:,.0f} kVA)",
        "harmonic order h", "|Z| (Ω per phase, log)", shapes=shapes,
        yaxis={"type": "log", "dtick": "D2", "gridcolor": GRID, "zeroline": False,
               "title": {"text": "|Z| (Ω per phase, log)"}},
        xaxis={"range": [1, 50], "gridcolor": GRID, "zeroline": False, "dtick": 5,
               "title": {"text": "harmonic order h (dotted: orders screened or measured)"}})}
# --------------------------------------------------------------------------------------------
# scenarios side by side
# --------------------------------------------------------------------------------------------
def cumulative_cash_flows(comparison: dict) -> dict:
    """The cumulative (solid) and discounted cumulative (dotted) cash flow of each compared
    scenario on one chart (``auditor.services.compare``)."""
    data = []
    for i, (name, rows) in enumerate(comparison["cash_flows"].items()):
        color = EXTRA[i % len(EXTRA)]
        years = [r["year"] for r in rows]
        data.append({"type": "scatter", "mode": "lines+markers", "name": f"{name}", "x": years,
                     "y": [r["cumulative"] for r in rows], "line": {"color": color, "width": 2.5},
                     "legendgroup": name, "hovertemplate": f"{name}, year %{{x}}: %{{y:,.0f}}<extra>cumulative</extra>"})
        data.append({"type": "scatter", "mode": "lines", "name": f"{name}, discounted", "x": years,
                     "y": [r["discounted_cumulative"] for r in rows],
                     "line": {"color": color, "width": 1.5, "dash": "dot"}, "legendgroup": name,
                     "hovertemplate": f"{name}, year %{{x}}: %{{y:,.0f}}<extra>discounted</extra>"})
    cur = comparison.get("currency") or ""
    shapes = [{"type": "line", "xref": "paper", "x0": 0, "x1": 1, "y0": 0, "y1": 0, "line": {"color": INK, "width": 1}}]
    return {"data": data, "layout": _layout("Cumulative cash flow of each scenario (dotted: discounted)", "year",
                                            cur, shapes=shapes)}
