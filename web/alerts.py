"""Alerts: what the nightly checks found (filter, mark seen, run the checks now); the badge in
the navigation and on the portfolio; each alert marked on the meter page's charts; a meter's own
tariff set from its page."""
from __future__ import annotations

from datetime import date

from flask import Blueprint, flash, redirect, render_template, request, url_for

from auditor.errors import UsageError
from auditor.monitoring import KINDS
from auditor.services import alerts as al
from auditor.services import portfolio as pf
from auditor.services.ingest import list_meters
from auditor.services.meter_tariff import clear_meter_tariff, meter_tariff, set_meter_tariff
from auditor.web.helpers import store, tariff_dirs

bp = Blueprint("alerts", __name__)

STATE_FILTERS = {"open": ("new", "seen"), "new": ("new",), "seen": ("seen",), "resolved": ("resolved",), "all": None}
KIND_LABELS = {"projected_charge": "projected charge", "correction_loss": "correction lost",
               "leading_at_light_load": "leading at light load", "data_stopped": "data stopped",
               "data_quality": "data quality", "multiplier_change": "multiplier change"}
SEVERITY_PILL = {"critical": "bad", "warning": "warn", "info": "plain"}


def _filters() -> dict:
    state = request.args.get("state", "open")
    if state not in STATE_FILTERS:
        raise UsageError(f"state must be one of {', '.join(STATE_FILTERS)}, not {state!r}")
    kind = request.args.get("kind") or None
    if kind is not None and kind not in KINDS:
        raise UsageError(f"kind must be one of {', '.join(KINDS)}, not {kind!r}")
    since_raw = request.args.get("since") or None
    since = None
    if since_raw:
        try:
            since = date.fromisoformat(since_raw)
        except ValueError:
            raise UsageError(f"since must be a date such as 2025-09-01, not {since_raw!r}") from None
    return {"state": state, "kind": kind, "meter": request.args.get("meter") or None, "since": since}


@bp.get("/alerts")
def index():
    f = _filters()
    s = store()
    alerts = al.list_alerts(s, states=STATE_FILTERS[f["state"]], meter=f["meter"], since=f["since"], kind=f["kind"],
                            limit=500)
    meters = sorted({m["meter"] for m in list_meters(s)})
    return render_template("alerts.html", alerts=alerts, filters=f, kinds=KINDS, kind_labels=KIND_LABELS,
                           states=list(STATE_FILTERS), meters=meters, severity_pill=SEVERITY_PILL,
                           last_run=al.last_run(s), counts=al.alert_counts(s))


def _back():
    target = request.form.get("next") or ""
    # only a path of this site: never redirect elsewhere
    if not target.startswith("/") or target.startswith("//"):
        target = url_for("alerts.index")
    return redirect(target)


@bp.post("/alerts/seen")
def seen():
    ids = []
    for raw in request.form.getlist("id"):
        try:
            ids.append(int(raw))
        except ValueError:
            raise UsageError(f"not an alert id: {raw!r}") from None
    every = request.form.get("all") == "1"
    meter = request.form.get("meter") or None
    if not ids and not every and meter is None:
        flash("Tick at least one alert to mark it seen.", "error")
        return _back()
    n = al.mark_seen(store(), ids, meter=meter, every=every and not ids)
    flash(f"{n} alert{'s' if n != 1 else ''} marked seen.", "ok")
    return _back()


@bp.post("/alerts/check")
def check():
    from auditor.services.notify import load_settings

    result = al.evaluate(store(), None, settings=load_settings().checks, trigger="web")
    flash(result.summary(), "ok")
    return _back()


@bp.post("/meters/<meter:meter>/tariff")
def set_tariff(meter: str):
    s = store()
    name = request.form.get("tariff") or ""
    if not name:
        had = clear_meter_tariff(s, meter)
        flash(f"Meter {meter} has no tariff of its own now." if had else f"Meter {meter} had no tariff of its own.", "ok")
    else:
        choice = pf.find_tariff(name, tariff_dirs())
        day_raw = request.form.get("billing_day") or ""
        try:
            day = int(day_raw) if day_raw else None
        except ValueError:
            raise UsageError(f"billing day must be a whole number from 1 to 28, not {day_raw!r}") from None
        own = set_meter_tariff(s, meter, choice.path, day)
        flash(f"Meter {meter} is billed under {own.tariff.name}"
              + (f" (periods from day {own.billing_day})" if own.billing_day else "") + ".", "ok")
    return redirect(url_for("meters.meter", meter=meter))


# --------------------------------------------------------------------------------------------
# for the other pages
# --------------------------------------------------------------------------------------------
def new_alert_count() -> int:
    """New alerts, for the badge in the navigation (0 when the store cannot say)."""
    try:
        return al.alert_counts(store())["new"]
    except Exception:  # the navigation must never break a page  # noqa: BLE001
        return 0


def portfolio_badges() -> dict:
    """Open alerts per meter: ``{meter: {"new", "seen", "critical"}}``."""
    return al.alert_counts(store())["by_meter"]


def own_tariff_or_chosen(meter: str, chosen):
    """The meter's own tariff when the page was not asked for a named one, else ``chosen``
    (``(name, tariff)`` of the tariff picker). Returns (name, tariff, own) where ``own`` is the
    meter's :class:`~auditor.services.meter_tariff.OwnTariff` or None."""
    own = meter_tariff(store(), meter)
    if own is not None and not request.args.get("tariff"):
        return own.source_name, own.tariff, own
    return chosen[0], chosen[1], own


def _period_of(label_periods: list[dict], day: str) -> str | None:
    from auditor.charts import period_label

    for p in label_periods:
        if p["start"] <= day < p["end"]:
            return period_label(p)
    return None


def mark_alerts(figs: dict, alerts: list[dict], periods: list[dict]) -> dict:
    """Add each alert to the meter page's figures at its date: a dotted line and a short label
    on the billing-period charts (at the period holding the date) and on the heat map (at the
    day). ``figs`` maps chart ids to plotly figure dicts; returns it."""
    from auditor.charts import LIMIT

    colours = {"critical": LIMIT, "warning": "#b07016", "info": "#6b7a86"}
    for key, fig in figs.items():
        if key not in ("pf", "reactive", "peaks", "heatmap"):
            continue
        layout = fig.setdefault("layout", {})
        shapes = layout.setdefault("shapes", [])
        notes = layout.setdefault("annotations", [])
        for k, a in enumerate(alerts):
            if not a.get("since"):
                continue
            day = a["since"][:10]
            x = day if key == "heatmap" else _period_of(periods, day)
            if x is None:
                continue
            colour = colours.get(a["severity"], LIMIT)
            # on the heat map's warm colours a dark line shows where a coloured one disappears
            line = "#1d2a33" if key == "heatmap" else colour
            shapes.append({"type": "line", "xref": "x", "x0": x, "x1": x, "yref": "paper", "y0": 0, "y1": 1,
                           "layer": "above", "line": {"color": line, "width": 2, "dash": "dot"}})
            notes.append({"xref": "x", "x": x, "yref": "paper", "y": 1.0 - 0.07 * (k % 4), "yanchor": "top",
                          "xanchor": "left", "showarrow": False, "bgcolor": "rgba(255,255,255,0.85)",
                          "text": f"⚑ {KIND_LABELS.get(a['kind'], a['kind'])} {day}",
                          "font": {"color": colour, "size": 11}})
    return figs
