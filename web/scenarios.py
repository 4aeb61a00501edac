"""Scenarios: the form, the case it gives, saved scenarios by name."""
from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, request, url_for

from auditor import charts
from auditor.correction import CAUTIONS
from auditor.errors import AuditorError
from auditor.services import report as rp
from auditor.services.cache import cached_size
from auditor.services.correction import (
    SizeRequest,
    delete_scenario,
    get_scenario,
    list_scenarios,
    save_scenario,
)
from auditor.services.meters import list_meters
from auditor.services.portfolio import load_named_tariff
from auditor.web.forms import COSTS, DeleteForm, ScenarioForm, choices
from auditor.web.helpers import default_tariff_name, store, tariff_choices, tariff_dirs

bp = Blueprint("scenarios", __name__)


def _form() -> ScenarioForm:
    form = ScenarioForm()
    form.meter.choices = choices((m["meter"], f"{m['meter']} — {m['site']}") for m in list_meters(store()))
    form.tariff.choices = choices((c.name, c.title) for c in tariff_choices() if not c.error)
    return form


def _prefill(form: ScenarioForm, saved: dict | None) -> None:
    meter = request.args.get("meter")
    if meter:
        form.meter.data = meter
    if not form.tariff.data:
        form.tariff.data = request.args.get("tariff") or default_tariff_name()
    if not saved:
        return
    r = saved["request"]
    form.meter.data = saved["meter"]
    from pathlib import Path

    stem = Path(str(r.get("tariff") or "")).stem
    if stem in {c.value if hasattr(c, 'value') else c[0] for c in form.tariff.choices}:
        form.tariff.data = stem
    form.target_pf.data = r.get("target_pf", 0.95)
    if r.get("optimize"):
        form.design.data = "optimise"
    elif r.get("fixed_kvar") is not None:
        form.design.data, form.fixed_kvar.data = "fixed", r["fixed_kvar"]
    elif r.get("steps"):
        form.design.data, form.steps.data = "automatic", r["steps"]
    form.detuning.data = f"{r.get('detuning_percent', 0):g}"
    c = r.get("costs") or {}
    form.capex_fixed.data = c.get("capex_fixed")
    form.capex_per_kvar.data = c.get("capex_per_kvar")
    form.life_years.data = c.get("life_years")
    form.discount_rate.data = 100 * c["discount_rate"] if c.get("discount_rate") is not None else None
    form.escalation.data = 100 * c["escalation"] if c.get("escalation") is not None else None
    form.tax_rate.data = f"{100 * c['tax_rate']:g}" if c.get("tax_rate") else None
    for key in ("incentive", "incentive_year", "replacement_cost", "replacement_year", "depreciation_years"):
        getattr(form, key).data = c.get(key)
    form.count_loss_reduction.data = bool(c.get("count_loss_reduction"))
    form.name.data = saved["name"]


def _case_context(case: dict) -> dict:
    figs = [("before_after", charts.before_after(case)), ("savings", charts.savings_by_charge(case)),
            ("cashflow", charts.cash_flow(case))]
    cols, rows = rp.scenario_rows(case)
    return {"case": case, "case_charts": {k: charts.figure_json(f) for k, f in figs},
            "case_columns": cols, "case_rows": rows,
            "candidate_columns": rp.candidate_columns(case.get("currency") or "")}


def _page(form: ScenarioForm, status: int = 200, **ctx):
    meter = form.meter.data
    return render_template("scenario.html", form=form, costs=COSTS, saved=list_scenarios(store()),
                           all_cautions=CAUTIONS,
                           meter=meter, delete_form=DeleteForm(), **ctx), status


@bp.get("/scenario")
def new():
    form = _form()
    saved = get_scenario(store(), request.args["from"]) if request.args.get("from") else None
    _prefill(form, saved)
    return _page(form)


@bp.post("/scenario")
def run():
    form = _form()
    if not form.validate():
        return _page(form, 400)
    req = SizeRequest(
        meter=form.meter.data, tariff=form.tariff.data, target_pf=float(form.target_pf.data),
        fixed_kvar=float(form.fixed_kvar.data) if form.design.data == "fixed" else None,
        steps=form.steps.data.strip() if form.design.data == "automatic" else None,
        optimize=form.design.data == "optimise",
        detuning_percent=float(form.detuning.data) if form.design.data != "optimise" else 0.0,
        costs=form.costs())
    try:
        tariff = load_named_tariff(req.tariff, tariff_dirs())
        case = cached_size(store(), req, tariff)
        name = (form.name.data or "").strip()
        if name:
            save_scenario(store(), name, case)
            flash(f"Saved as scenario “{name}”.", "ok")
            return redirect(url_for("scenarios.show", name=name))
    except AuditorError as exc:
        return _page(form, 400, error=exc.message)
    return _page(form, **_case_context(case.to_dict()), tariff_name=req.tariff)


@bp.get("/scenarios")
def index():
    return render_template("scenarios.html", saved=list_scenarios(store()), delete_form=DeleteForm())


@bp.get("/scenarios/<path:name>")
def show(name: str):
    saved = get_scenario(store(), name)
    form = _form()
    _prefill(form, saved)
    from auditor.web.report import cover_form

    return _page(form, **_case_context(saved["result"]), scenario=saved, cover_form=cover_form(name))


@bp.post("/scenarios/delete")
def delete():
    form = DeleteForm()
    if not form.validate():
        flash("Could not delete: the form was incomplete.", "error")
        return redirect(url_for("scenarios.index"))
    delete_scenario(store(), form.name.data)
    flash(f"Deleted scenario “{form.name.data}”.", "ok")
    return redirect(url_for("scenarios.index"))
