"""The portfolio (home page): every site and meter, worst power factor first."""
from __future__ import annotations

from importlib import resources

from flask import Blueprint, render_template, request, send_file

from auditor.services.portfolio import portfolio_summary, tariff_threshold_pf
from auditor.web.helpers import chosen_tariff, store, tariff_choices

bp = Blueprint("portfolio", __name__)


@bp.get("/")
def index():
    name, tariff = chosen_tariff()
    # without a tariff asked for, each meter with a tariff of its own is audited under it
    rows = portfolio_summary(store(), tariff, own_tariffs=not request.args.get("tariff"))
    totals = {
        "meters": len(rows),
        "sites": len({r["site"] for r in rows}),
        "reactive_12m": sum(r["reactive_12m"] or 0.0 for r in rows if r["currency"] == tariff.currency),
        "other_currency": sum(1 for r in rows if r["currency"] != tariff.currency),
        "savings": sum(r["best"]["annual_savings"] for r in rows
                       if r["best"] and (r["best"]["npv"] or 0) > 0 and r["best"]["tariff"] == tariff.name),
    }
    from auditor.web.alerts import portfolio_badges

    return render_template("portfolio.html", rows=rows, totals=totals, tariff=tariff, tariff_name=name,
                           tariffs=tariff_choices(), thresholds=tariff_threshold_pf(tariff),
                           alerts=portfolio_badges())


@bp.get("/vendor/plotly.min.js")
def plotly_js():
    """plotly.js as bundled in the plotly Python package (never from a CDN)."""
    path = resources.files("plotly") / "package_data" / "plotly.min.js"
    return send_file(str(path), mimetype="text/javascript", max_age=86400)
