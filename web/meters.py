"""The meter page (audit by period and interval charts) and the exports."""
from __future__ import annotations

import re
import secrets

from flask import Blueprint, Response, abort, render_template, request

from auditor import charts
from auditor.errors import UsageError
from auditor.services import report as rp
from auditor.services.cache import cached_audit
from auditor.services.correction import list_scenarios
from auditor.services.meter_charts import meter_chart_data
from auditor.services.portfolio import tariff_threshold_pf
from auditor.web import tables
from auditor.web.helpers import chosen_tariff, store, tariff_choices, tariff_for_scenario

bp = Blueprint("meters", __name__)

MIME = {"html": "text/html; charset=utf-8", "csv": "text/csv; charset=utf-8",
        "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"}


def _target_pf() -> float:
    raw = request.args.get("target_pf", "0.95")
    try:
        value = float(raw)
    except ValueError:
        raise UsageError(f"target_pf must be a number such as 0.95, not {raw!r}") from None
    if not 0.5 <= value <= 1.0:
        raise UsageError(f"target_pf must be between 0.5 and 1, not {raw}")
    return value


@bp.get("/meters/<meter:meter>")
def meter(meter: str):
    from auditor.services.alerts import list_alerts
    from auditor.web.alerts import mark_alerts, own_tariff_or_chosen

    name, tariff, own = own_tariff_or_chosen(meter, chosen_tariff())
    target = _target_pf()
    s = store()
    ma = cached_audit(s, meter, tariff, own.billing_day if own is not None and own.tariff is tariff else None)
    audit = ma.to_dict()
    profile = meter_chart_data(s, meter, target)
    thresholds = tariff_threshold_pf(tariff)
    cols = tables.audit_columns(audit, list(ma.result.charge_keys))
    rows = tables.rows_of(cols, audit["periods"])
    figs = [("pf", charts.pf_by_period(audit, thresholds)),
            ("reactive", charts.reactive_by_period(audit, list(ma.result.reactive_keys))),
            ("peaks", charts.peaks_by_period(audit)),
            ("heatmap", charts.pf_heatmap(profile)),
            ("scatter", charts.pq_scatter(profile, thresholds)),
            ("duration", charts.duration_curve(profile))]
    totals = dict(audit["totals"])
    alerts = list_alerts(s, states=None, meter=meter, limit=50)
    figs = list(mark_alerts(dict(figs), [a for a in alerts if a["state"] != "resolved"], audit["periods"]).items())
    return render_template("meter.html", meter=meter, audit=audit, data=ma.data, tariff=tariff,
                           tariff_name=name, tariffs=tariff_choices(), columns=cols, rows=rows,
                           charts={k: charts.figure_json(f) for k, f in figs}, profile=profile,
                           totals=totals, target_pf=target, thresholds=thresholds,
                           scenarios=list_scenarios(s, meter), alerts=alerts, own=own)


_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


@bp.get("/export/<meter:meter>.<ext:fmt>")
def export(meter: str, fmt: str):
    """An export of the audit (``?tariff=``) or of a saved scenario (``?scenario=``)."""
    if fmt not in rp.FORMATS:
        abort(404)
    scenario = request.args.get("scenario") or None
    if scenario:
        from auditor.services.correction import get_scenario

        name, tariff = tariff_for_scenario(get_scenario(store(), scenario))
    else:
        name, tariff = chosen_tariff()
    report = rp.build_report(store(), meter, tariff, scenario, with_profile=(fmt == "html"))
    nonce = secrets.token_urlsafe(16)
    body = rp.render_html(report, nonce=nonce).encode("utf-8") if fmt == "html" else rp.render(report, fmt)
    stem = _SAFE.sub("_", f"{meter}_{scenario or name}").strip("_") or "report"
    resp = Response(body, mimetype=MIME[fmt].split(";")[0])
    if fmt != "html":
        resp.headers["Content-Type"] = MIME[fmt]
    resp.headers["Content-Disposition"] = f'attachment; filename="{stem}.{fmt}"'
    if fmt == "html":
        # the report carries its own scripts; allow exactly those (by nonce), nothing remote
        resp.headers["Content-Security-Policy"] = (
            f"default-src 'none'; script-src 'nonce-{nonce}'; style-src 'unsafe-inline'; "
            "img-src data: blob:; font-src data:; base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
    return resp
