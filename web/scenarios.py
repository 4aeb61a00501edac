"""Scenarios: the form, the case it gives (failing screening first, the specification, the
harmonic study), saved scenarios by name."""
from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, request, url_for
from flask_wtf.file import FileField
from wtforms import BooleanField, FloatField, RadioField
from wtforms.validators import NumberRange, Optional

from auditor import charts
from auditor.correction import CAUTIONS
from auditor.errors import AuditorError
from auditor.services import report as rp
from auditor.services.cache import cached_size
from auditor.services.correction import (
    ScenarioRequest,
    delete_scenario,
    get_scenario,
    list_scenarios,
    read_uploaded_spectrum,
    save_scenario,
    set_site_harmonics,
    split_costs,
    with_site_settings,
)
from auditor.services.meters import list_meters
from auditor.services.portfolio import load_named_tariff
from auditor.web.forms import COSTS, DeleteForm, ScenarioForm, choices
from auditor.web.helpers import default_tariff_name, store, tariff_choices, tariff_dirs
from auditor.web.tables import Col, rows_of

bp = Blueprint("scenarios", __name__)

#: A harmonic spectrum is a few dozen rows; a larger upload is not one.
MAX_SPECTRUM_BYTES = 1_000_000


class CaseForm(ScenarioForm):
    """The scenario form with the leading-site designs and the harmonic measurement."""

    design = RadioField("Design", default="optimise", choices=choices([
        ("optimise", "Let the optimiser choose (best NPV among designs that pass screening)"),
        ("fixed", "Fixed capacitor bank"),
        ("automatic", "Automatic capacitor bank (switched steps)"),
        ("reactor", "Shunt reactor, switched (a site that runs leading)"),
        ("switch_off", "Switch existing capacitance off while the site runs leading")]))
    reactor_kvar = FloatField("Reactor (kvar)", validators=[Optional(), NumberRange(min=0.1, max=100000)])
    switch_off_kvar = FloatField("Existing capacitance to switch off (kvar)",
                                 validators=[Optional(), NumberRange(min=0.1, max=100000)])
    harmonics = FileField("Harmonic measurement (CSV)",
                          description="order,current_pct (or current_a)[,voltage_pct], measured at the point of "
                                      "connection; a '# fundamental_a = …' line gives the fundamental current.")
    keep_harmonics = BooleanField("Keep it as the site's measurement", default=True)
    drive_share = FloatField("Share of the load on six-pulse drives", validators=[Optional(), NumberRange(0.01, 1.0)],
                             description="Without a measurement only: an ESTIMATED spectrum (e.g. 0.4), "
                                         "labelled as an estimate wherever it is shown.")

    def validate(self, extra_validators=None) -> bool:
        ok = super().validate(extra_validators)
        if self.design.data == "reactor" and self.reactor_kvar.data is None and not self.reactor_kvar.errors:
            self.reactor_kvar.errors = [*self.reactor_kvar.errors, "Give the size of the reactor in kvar."]
            ok = False
        if self.design.data == "switch_off" and self.switch_off_kvar.data is None and not self.switch_off_kvar.errors:
            self.switch_off_kvar.errors = [*self.switch_off_kvar.errors,
                                           "Give the existing capacitance to switch off, in kvar."]
            ok = False
        return ok


def _form() -> CaseForm:
    form = CaseForm()
    form.meter.choices = choices((m["meter"], f"{m['meter']} — {m['site']}") for m in list_meters(store()))
    form.tariff.choices = choices((c.name, c.title) for c in tariff_choices() if not c.error)
    return form


def _prefill(form: CaseForm, saved: dict | None) -> None:
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
    if r.get("optimise") or r.get("optimize"):
        form.design.data = "optimise"
    elif r.get("fixed_kvar") is not None:
        form.design.data, form.fixed_kvar.data = "fixed", r["fixed_kvar"]
    elif r.get("steps"):
        form.design.data, form.steps.data = "automatic", r["steps"]
    elif r.get("reactor_kvar") is not None:
        form.design.data, form.reactor_kvar.data = "reactor", r["reactor_kvar"]
    elif r.get("switch_off_kvar") is not None:
        form.design.data, form.switch_off_kvar.data = "switch_off", r["switch_off_kvar"]
    if r.get("drive_share") is not None and not r.get("harmonics"):
        form.drive_share.data = r["drive_share"]
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
    scan = charts.frequency_scan(case)
    if scan is not None:
        figs.append(("scan", scan))
    cols, rows = rp.scenario_rows(case)
    candidates = case.get("candidates") or []
    ccols = candidate_columns(case.get("currency") or "")
    return {"case": case, "case_charts": {k: charts.figure_json(f) for k, f in figs},
            "case_columns": cols, "case_rows": rows, "candidate_columns": ccols,
            "candidate_rows": rows_of(ccols, candidates),
            "candidate_classes": ["chosen" if c.get("chosen") else "" for c in candidates]}


def screening_cell(c: dict) -> dict:
    """A candidate's verdict as a pill, the rules it fails under it."""
    if c.get("passed_screening"):
        return {"value": "passes", "pill": "ok"}
    rules = ", ".join(str(r).replace("_", " ") for r in c.get("failed_rules") or [])
    return {"value": "fails", "pill": "bad", "note": rules or None, "wrap": True}


def candidate_columns(cur: str) -> list[Col]:
    """The optimiser's candidates: what a reader compares first — the design, its NPV, its
    payback and whether it passes screening (and which rules it fails) — then the rest behind
    "All columns"."""
    return [
        Col("Rank", lambda c: c["rank"], "int"),
        Col("Design", lambda c: c["label"]),
        Col(f"NPV ({cur})", lambda c: c["npv"], "money"),
        Col("Payback (years)", lambda c: c["simple_payback_years"], "power"),
        Col("Screening", screening_cell),
        Col(f"Saving a year ({cur})", lambda c: c["annual_savings"], "money", detail=True),
        Col(f"Capex ({cur})", lambda c: c["capex"], "money", detail=True),
        Col("Total (kvar)", lambda c: c["total_kvar"], "power", detail=True),
        Col("PF after", lambda c: c["pf_after"], "pf", detail=True),
        Col("Resonance order h", lambda c: c.get("resonance_order"), "power", detail=True),
    ]


def _page(form: CaseForm, status: int = 200, **ctx):
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


def _uploaded_spectrum(form: CaseForm) -> tuple[str, str] | None:
    """(text, the file's own name) of an uploaded spectrum, or None."""
    upload = form.harmonics.data
    if upload is None or not getattr(upload, "filename", ""):
        return None
    raw = upload.read(MAX_SPECTRUM_BYTES + 1)
    name = upload.filename.replace("\\", "/").rsplit("/", 1)[-1] or "the uploaded file"
    if len(raw) > MAX_SPECTRUM_BYTES:
        raise _PageError(f"{name}: too large for a harmonic spectrum (at most {MAX_SPECTRUM_BYTES:,} bytes)")
    try:
        return raw.decode("utf-8-sig"), name
    except UnicodeDecodeError:
        raise _PageError(f"{name}: not UTF-8 text") from None


class _PageError(Exception):
    def __init__(self, message: str):
        super().__init__(message)
        self.message = message


@bp.post("/scenario")
def run():
    form = _form()
    if not form.validate():
        return _page(form, 400)
    design = form.design.data
    capacitor = design in ("fixed", "automatic")
    costs, reactor_costs = split_costs(
        form.costs(), reactor_kvar=form.reactor_kvar.data if design == "reactor" else None,
        switch_off_kvar=form.switch_off_kvar.data if design == "switch_off" else None)
    req = ScenarioRequest(
        meter=form.meter.data, tariff=form.tariff.data, target_pf=float(form.target_pf.data),
        fixed_kvar=float(form.fixed_kvar.data) if design == "fixed" else None,
        steps=form.steps.data.strip() if design == "automatic" else None,
        reactor_kvar=float(form.reactor_kvar.data) if design == "reactor" else None,
        switch_off_kvar=float(form.switch_off_kvar.data) if design == "switch_off" else None,
        optimise=design == "optimise",
        detuning_percent=float(form.detuning.data) if capacitor else 0.0,
        costs=costs, reactor_costs=reactor_costs,
        drive_share=float(form.drive_share.data) if form.drive_share.data is not None else None)
    try:
        uploaded = _uploaded_spectrum(form)
        if uploaded is not None:
            text, name = uploaded
            if form.keep_harmonics.data:
                spectrum = set_site_harmonics(store(), req.meter, text, name)
                flash(f"Kept “{name}” as the harmonic measurement of the meter's site.", "ok")
            else:
                spectrum = read_uploaded_spectrum(text, name)
            req = req.replace(harmonics=spectrum)
        tariff = load_named_tariff(req.tariff, tariff_dirs())
        # the site's settings go into the request before the cache looks at it
        req = with_site_settings(store(), req)
        case = cached_size(store(), req, tariff)
        name = (form.name.data or "").strip()
        if name:
            save_scenario(store(), name, case)
            flash(f"Saved as scenario “{name}”.", "ok")
            return redirect(url_for("scenarios.show", name=name))
    except AuditorError as exc:
        return _page(form, 400, error=exc.message)
    except _PageError as exc:
        return _page(form, 400, error=exc.message)
    return _page(form, **_case_context(case.to_dict()), tariff_name=req.tariff)


@bp.get("/scenarios")
def index():
    return render_template("scenarios.html", saved=list_scenarios(store()), delete_form=DeleteForm())


@bp.get("/scenarios/<scenario:name>")
def show(name: str):
    saved = get_scenario(store(), name)
    form = _form()
    _prefill(form, saved)
    from auditor.web.report import cover_form

    return _page(form, **_case_context(saved["result"]), scenario=saved, cover_form=cover_form(name))


@bp.get("/scenarios/<path:name>")
def show_old_address(name: str):
    """An address from before names were written as one segment ("/scenarios/Bay 3/west"):
    to the scenario's own address."""
    return redirect(url_for("scenarios.show", name=name), 308)


@bp.post("/scenarios/delete")
def delete():
    form = DeleteForm()
    if not form.validate():
        flash("Could not delete: the form was incomplete.", "error")
        return redirect(url_for("scenarios.index"))
    delete_scenario(store(), form.name.data)
    flash(f"Deleted scenario “{form.name.data}”.", "ok")
    return redirect(url_for("scenarios.index"))
