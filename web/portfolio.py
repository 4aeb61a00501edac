"""The portfolio (home page): every site and meter, worst power factor first."""
from __future__ import annotations

from importlib import resources

from flask import Blueprint, render_template, request, send_file

from auditor.services.portfolio import portfolio_page, tariff_threshold_pf
from auditor.web.helpers import chosen_tariff, store, tariff_choices

bp = Blueprint("portfolio", __name__)


PER_PAGE = 50


@bp.get("/")
def index():
    name, tariff = chosen_tariff()
    # without a tariff asked for, each meter with a tariff of its own is audited under it
    asked = bool(request.args.get("tariff"))
    page = portfolio_page(store(), tariff, query=request.args.get("q", ""), site=request.args.get("site") or None,
                          page=request.args.get("page", 1, type=int) or 1,
                          per_page=request.args.get("per_page", PER_PAGE, type=int) or PER_PAGE,
                          own_tariffs=not asked)
    from auditor.web.alerts import portfolio_badges

    return render_template("portfolio.html", rows=page.rows, totals=page.totals, listing=page,
                           per_page_arg=page.per_page if page.per_page != PER_PAGE else None, tariff=tariff,
                           tariff_name=name, tariff_asked=name if asked else None, tariffs=tariff_choices(),
                           thresholds=tariff_threshold_pf(tariff), alerts=portfolio_badges())


@bp.get("/vendor/plotly.min.js")
def plotly_js():
    """plotly.js as bundled in the plotly Python package (never from a CDN)."""
    path = resources.files("plotly") / "package_data" / "plotly.min.js"
    return send_file(str(path), mimetype="text/javascript", max_age=86400)
