"""Tariffs: each loaded tariff as readable clauses."""
from __future__ import annotations

from flask import Blueprint, render_template

from auditor.services.portfolio import load_named_tariff, tariff_threshold_pf
from auditor.tariffs import describe_tariff
from auditor.web.helpers import tariff_choices, tariff_dirs

bp = Blueprint("tariffs", __name__)


@bp.get("/tariffs")
def index():
    items = []
    for c in tariff_choices():
        if c.error:
            items.append({"name": c.name, "title": c.title, "error": c.error, "clauses": [], "source": ""})
            continue
        t = load_named_tariff(c.name, tariff_dirs())
        items.append({"name": c.name, "title": t.name, "error": None, "clauses": describe_tariff(t),
                      "currency": t.currency, "thresholds": tariff_threshold_pf(t),
                      "source": c.path.read_text(encoding="utf-8"), "path": c.path.name})
    return render_template("tariffs.html", items=items)
