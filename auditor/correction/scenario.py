"""A correction scenario: bank on the interval data, tariff again, savings, screening, finance.

Worked example (by hand; the unit tests run it through the engine)
------------------------------------------------------------------
A 30-day month of constant 100 kW at PF 0.80 (75 kvar lagging), 15-minute intervals, a tariff
with only an excess-kvarh charge of 0.05 per kvarh above tan φ = 0.4 × kWh, and a fixed 42 kvar
bank::

    hours                 30 × 24                          = 720 h
    kWh                   100 × 720                        = 72 000
    before  kvarh         75 × 720                         = 54 000
            allowance     0.4 × 72 000                     = 28 800
            charge        0.05 × (54 000 − 28 800)         = 1 260.00
    after   kvar          75 − 42                          = 33   (tan φ 0.33, PF 0.9496)
            kvarh         33 × 720                         = 23 760 < 28 800
            charge                                         = 0.00
    saving of the month                                    = 1 260.00
    annual saving         1 260 × 365.25 / 30              = 15 340.50

References
----------
.. [1] IEEE Std 1036-2010, *Guide for the Application of Shunt Power Capacitors*.
.. [2] Brealey, Myers, Allen, *Principles of Corporate Finance* (NPV, IRR, payback).
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from auditor import finance
from auditor.audit import AuditResult, prepare_audit
from auditor.correction.banks import BankDesign, bank_output_kvar, corrected_kvarh
from auditor.correction.screening import CAUTIONS, ScreeningResult, SiteElectrical, screen
from auditor.correction.sizing import check_frame, check_pf
from auditor.errors import UsageError
from auditor.finance import CostInputs, FinanceResult

DAYS_PER_YEAR = 365.25
SENSITIVITY_STEPS = (-0.20, 0.20)


# --------------------------------------------------------------------------------------------
# helpers over the audit results
# --------------------------------------------------------------------------------------------
def _charges_sum(result) -> dict[str, float]:
    out: dict[str, float] = {}
    for period in result.periods:
        for key, value in period.charges.items():
            if value is None or (isinstance(value, float) and not math.isfinite(value)):
                continue
            out[key] = out.get(key, 0.0) + float(value)
    return out


def _leading_keys(tariff) -> tuple[str, ...]:
    keys = []
    for mechanism in getattr(tariff, "reactive", ()):
        if getattr(mechanism, "kind", None) == "leading_kvarh":
            keys.append(tariff.key_of(mechanism))
    return tuple(keys)


def _audited_days(prepared) -> float:
    """Days the savings were computed over: calendar days of each full period, and the days
    actually covered by data for a partial one (data starting or ending inside it)."""
    calendar = np.array([p.days for p in prepared.periods], dtype=float)
    covered = np.asarray(prepared.intervals, dtype=float) * prepared.interval_minutes / 1440.0
    days = float(np.sum(np.where(np.asarray(prepared.partial, dtype=bool),
                                 np.minimum(calendar, covered), calendar)))
    if days <= 0:
        raise UsageError("no interval data in the audited range: nothing to scale to a year")
    return days


def _peak_kva(result) -> float | None:
    values = [p.peak_kva for p in result.periods if p.peak_kva is not None and math.isfinite(p.peak_kva)]
    return max(values) if values else None


def _energy_pf(kwh: float, kvarh: float) -> float | None:
    if kwh <= 0:
        return None
    return kwh / math.hypot(kwh, kvarh)


def energy_price(tariff, costs: CostInputs) -> float:
    """Price that values the bank's losses: the cost input if given, else the tariff's base
    energy price."""
    if costs.energy_price_per_kwh is not None:
        return float(costs.energy_price_per_kwh)
    return float(tariff.energy.price_per_kwh)


@dataclass(frozen=True, eq=False)
class CorrectedRun:
    """One bank applied to prepared intervals, and the tariff run on the corrected data."""

    output_kvar: np.ndarray
    kvarh_lag: np.ndarray
    kvarh_lead: np.ndarray
    result: AuditResult


def apply_bank(prepared, bank: BankDesign, target_pf: float, interval_minutes: int, *,
               leading_pf_limit: float | None = None,
               system_voltage_v: float | None = None) -> CorrectedRun:
    """Run the controller on the prepared intervals and the tariff on the corrected energies."""
    kvar_net = prepared.kvar_lag - prepared.kvar_lead
    output = bank_output_kvar(bank, prepared.kw, kvar_net, target_pf,
                              leading_pf_limit=leading_pf_limit, system_voltage_v=system_voltage_v)
    to_energy = interval_minutes / 60.0
    lag, lead = corrected_kvarh(prepared.kvar_lag * to_energy, prepared.kvar_lead * to_energy,
                                output, interval_minutes)
    return CorrectedRun(output, lag, lead, prepared.run(kvarh_lag=lag, kvarh_lead=lead))


# --------------------------------------------------------------------------------------------
# result
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ScenarioResult:
    """Everything a correction case reports; ``to_dict()`` is the JSON of ``auditor size``."""

    bank: BankDesign
    target_pf: float
    currency: str | None
    before: AuditResult
    after: AuditResult
    audited_days: float
    annual_savings: float
    savings_by_charge: dict[str, float]
    capex: float
    finance: FinanceResult
    screening: ScreeningResult
    peak_kva_before: float | None
    peak_kva_after: float | None
    pf_before: float | None
    pf_after: float | None
    line_loss_reduction: float | None
    mean_output_kvar: float
    loss_kwh_per_year: float
    sensitivity: tuple[dict, ...]
    warnings: tuple[str, ...]
    cautions: tuple[str, ...] = CAUTIONS
    candidates: tuple[dict, ...] | None = None
    output_kvar: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    costs: CostInputs = field(default_factory=CostInputs)

    @property
    def released_kva(self) -> float | None:
        if self.peak_kva_before is None or self.peak_kva_after is None:
            return None
        return self.peak_kva_before - self.peak_kva_after

    @property
    def npv(self) -> float:
        return self.finance.npv

    def to_dict(self) -> dict:
        f = self.finance
        out = {
            "bank": self.bank.to_dict(),
            "target_pf": self.target_pf,
            "currency": self.currency,
            "before": self.before.to_dict()["periods"],
            "after": self.after.to_dict()["periods"],
            "audited_days": self.audited_days,
            "annual_savings": self.annual_savings,
            "savings_by_charge": dict(self.savings_by_charge),
            "capex": self.capex,
            "annual_om": f.annual_om,
            "annual_loss_cost": f.annual_loss_cost,
            "loss_kwh_per_year": self.loss_kwh_per_year,
            "simple_payback_years": f.simple_payback_years,
            "discounted_payback_years": f.discounted_payback_years,
            "npv": f.npv,
            "irr": f.irr,
            "life_years": f.life_years,
            "discount_rate": f.discount_rate,
            "escalation": f.escalation,
            "cash_flow": [dict(row) for row in f.cash_flow],
            "capacity": {
                "peak_kva_before": self.peak_kva_before,
                "peak_kva_after": self.peak_kva_after,
                "released_kva": self.released_kva,
            },
            "pf_before": self.pf_before,
            "pf_after": self.pf_after,
            "line_loss_reduction": self.line_loss_reduction,
            "mean_output_kvar": self.mean_output_kvar,
            "screening": self.screening.to_dict(),
            "sensitivity": [dict(row) for row in self.sensitivity],
            "warnings": list(self.warnings),
            "cautions": list(self.cautions),
        }
        out.update(f.extras())
        out["cost_inputs"] = self.costs.to_dict()
        if self.candidates is not None:
            out["candidates"] = [dict(c) for c in self.candidates]
        return out


# --------------------------------------------------------------------------------------------
# the case
# --------------------------------------------------------------------------------------------
def _finance_for(bank: BankDesign, annual_savings: float, mean_rated_kvar: float,
                 price_per_kwh: float, costs: CostInputs, *, capex_scale: float = 1.0,
                 price_scale: float = 1.0, loss_reduction_kwh: float = 0.0) -> tuple[FinanceResult, float]:
    capex_value = capex_scale * finance.capex(costs, bank.total_kvar,
                                              automatic=bank.kind == "automatic", detuned=bank.detuned)
    w_per_kvar = costs.loss_w_per_kvar_detuned if bank.detuned else costs.loss_w_per_kvar
    loss_kwh = finance.annual_loss_kwh(mean_rated_kvar, w_per_kvar)
    result = finance.evaluate(
        capex_value, annual_savings * price_scale,
        annual_om_value=finance.annual_om(costs, capex_value),
        annual_loss_cost=loss_kwh * price_per_kwh * price_scale,
        life_years=costs.life_years, discount_rate=costs.discount_rate, escalation=costs.escalation,
        costs=costs, loss_reduction_value=loss_reduction_kwh * price_per_kwh * price_scale,
        loss_reduction_kwh_value=loss_reduction_kwh,
    )
    return result, loss_kwh


def _savings(before, after, year_factor: float) -> tuple[float, dict[str, float]]:
    b, a = _charges_sum(before), _charges_sum(after)
    by_charge = {k: (b.get(k, 0.0) - a.get(k, 0.0)) * year_factor for k in dict.fromkeys([*b, *a])}
    return (float(before.total) - float(after.total)) * year_factor, by_charge


def _scaled_frame(frame: pd.DataFrame, factor: float) -> pd.DataFrame:
    out = frame.copy()
    for column in ("kwh", "kvarh_lag", "kvarh_lead"):
        out[column] = out[column] * factor
    return out


def _sensitivity(frame, tariff, prepare_kwargs: dict, bank: BankDesign, target_pf: float,
                 interval_minutes: int, costs: CostInputs, site: SiteElectrical,
                 leading_pf_limit: float | None, annual_savings: float, mean_rated_kvar: float,
                 price: float, year_factor: float, loss_reduction_kwh: float = 0.0) -> tuple[dict, ...]:
    rows = []

    def row(factor: str, change: float, res: FinanceResult, savings: float) -> dict:
        return {"factor": factor, "change": change, "annual_savings": savings, "npv": res.npv,
                "irr": res.irr, "simple_payback_years": res.simple_payback_years}

    for change in SENSITIVITY_STEPS:
        # load: every interval's kWh and kvarh scaled, the controller and the tariff run again
        prepared = prepare_audit(_scaled_frame(frame, 1.0 + change), tariff, **prepare_kwargs)
        before = prepared.run()
        run = apply_bank(prepared, bank, target_pf, interval_minutes,
                         leading_pf_limit=leading_pf_limit, system_voltage_v=site.nominal_voltage_v)
        savings, _ = _savings(before, run.result, year_factor)
        rated = float(np.mean(run.output_kvar)) / bank.output_factor(site.nominal_voltage_v)
        # I²R losses at a scaled load scale with its square
        res, _ = _finance_for(bank, savings, rated, price, costs,
                              loss_reduction_kwh=loss_reduction_kwh * (1.0 + change) ** 2)
        rows.append(row("load", change, res, savings))
    for change in SENSITIVITY_STEPS:
        # prices: every charge is price × quantity, so savings and loss cost scale together
        res, _ = _finance_for(bank, annual_savings, mean_rated_kvar, price, costs,
                              price_scale=1.0 + change, loss_reduction_kwh=loss_reduction_kwh)
        rows.append(row("prices", change, res, annual_savings * (1.0 + change)))
    for change in SENSITIVITY_STEPS:
        res, _ = _finance_for(bank, annual_savings, mean_rated_kvar, price, costs,
                              capex_scale=1.0 + change, loss_reduction_kwh=loss_reduction_kwh)
        rows.append(row("capex", change, res, annual_savings))
    base, _ = _finance_for(bank, annual_savings, mean_rated_kvar, price, costs,
                           loss_reduction_kwh=loss_reduction_kwh)
    rows.extend(finance.item_sensitivity(base, costs))
    return tuple(rows)


def evaluate_prepared(prepared, before, tariff, *, interval_minutes: int, bank: BankDesign,
                      target_pf: float, costs: CostInputs, site: SiteElectrical,
                      leading_pf_limit: float | None = None,
                      run: CorrectedRun | None = None) -> dict:
    """The figures of one bank on already prepared intervals (no sensitivity); a dict of
    the ScenarioResult fields, shared by :func:`run_scenario` and the optimiser."""
    if run is None:
        run = apply_bank(prepared, bank, target_pf, interval_minutes,
                         leading_pf_limit=leading_pf_limit, system_voltage_v=site.nominal_voltage_v)
    days = _audited_days(prepared)
    year_factor = DAYS_PER_YEAR / days
    annual_savings, by_charge = _savings(before, run.result, year_factor)
    price = energy_price(tariff, costs)
    factor = bank.output_factor(site.nominal_voltage_v)
    mean_output = float(np.mean(run.output_kvar)) if run.output_kvar.size else 0.0
    mean_rated = mean_output / factor
    leading = _leading_keys(tariff)
    lead_increase = None
    if leading:
        b, a = _charges_sum(before), _charges_sum(run.result)
        lead_increase = sum(a.get(k, 0.0) - b.get(k, 0.0) for k in leading)
    kvar_net = prepared.kvar_lag - prepared.kvar_lead
    screening = screen(bank, site, kvar_net_before=kvar_net, kvar_net_after=kvar_net - run.output_kvar,
                       output_kvar=run.output_kvar, interval_minutes=interval_minutes,
                       leading_charge_increase=lead_increase)
    to_energy = interval_minutes / 60.0
    kwh = float(np.sum(prepared.kwh))
    net_before = float(np.sum(kvar_net) * to_energy)
    net_after = float(np.sum(run.kvarh_lag - run.kvarh_lead))
    pf1, pf2 = _energy_pf(kwh, net_before), _energy_pf(kwh, net_after)
    line_loss = 1.0 - (pf1 / pf2) ** 2 if pf1 and pf2 else None
    loss_reduction = finance.loss_reduction_kwh(kwh * year_factor, line_loss, costs.network_loss_percent)
    fin, loss_kwh = _finance_for(bank, annual_savings, mean_rated, price, costs,
                                 loss_reduction_kwh=loss_reduction)
    return dict(
        run=run, year_factor=year_factor, audited_days=days, annual_savings=annual_savings,
        savings_by_charge=by_charge, finance=fin, loss_kwh=loss_kwh, screening=screening,
        mean_output=mean_output, mean_rated=mean_rated, price=price, pf_before=pf1, pf_after=pf2,
        line_loss=line_loss, peak_before=_peak_kva(before), peak_after=_peak_kva(run.result),
        loss_reduction_kwh=loss_reduction,
    )


def _warnings(before, after, figures: dict, bank: BankDesign, target_pf: float) -> tuple[str, ...]:
    items: list[str] = []
    for w in list(getattr(before, "warnings", ())) + list(getattr(after, "warnings", ())):
        if w not in items:
            items.append(str(w))
    items.extend(w for w in figures["screening"].warnings if w not in items)
    fin: FinanceResult = figures["finance"]
    if figures["annual_savings"] <= 0:
        items.append(f"{bank.label}: no saving under this tariff (the reactive charges do not fall)")
    elif fin.npv < 0:
        items.append(f"{bank.label}: negative NPV over {fin.life_years} years at "
                     f"{fin.discount_rate:.1%} — the saving does not repay the cost")
    if figures["pf_after"] is not None and figures["pf_after"] < target_pf - 5e-4 and figures["annual_savings"] > 0:
        items.append(f"after correction the period PF is {figures['pf_after']:.3f}, below the "
                     f"target {target_pf:.2f}: a larger bank would be needed to reach it")
    return tuple(items)


def prepare_case(frame: pd.DataFrame, tariff, *, tz: str, interval_minutes: int, target_pf: float,
                 costs: CostInputs | None, site: SiteElectrical | None, periods, start, end,
                 billing_day: int | None, leading_pf_limit: float | None):
    """Checks and the audit before correction, shared by :func:`run_scenario` and the optimiser.

    Returns ``(target_pf, costs, site, prepare_kwargs, prepared, before)``.
    """
    check_frame(frame, interval_minutes)
    target_pf = check_pf(target_pf)
    if leading_pf_limit is not None:
        check_pf(leading_pf_limit, "leading_pf_limit")
    costs = costs or CostInputs()
    site = site or SiteElectrical()
    prepare_kwargs = dict(tz=tz, interval_minutes=interval_minutes, periods=periods,
                          billing_day=billing_day, start=start, end=end)
    prepared = prepare_audit(frame, tariff, **prepare_kwargs)
    return target_pf, costs, site, prepare_kwargs, prepared, prepared.run()


def run_scenario(frame: pd.DataFrame, tariff, *, tz: str, interval_minutes: int, bank: BankDesign,
                 target_pf: float = 0.95, costs: CostInputs | None = None,
                 site: SiteElectrical | None = None, periods: Sequence | None = None,
                 start=None, end=None, billing_day: int | None = None,
                 leading_pf_limit: float | None = None, sensitivity: bool = True) -> ScenarioResult:
    """Apply ``bank`` to the meter's intervals, run the tariff again and cost the case.

    Parameters
    ----------
    frame : pandas.DataFrame
        Interval frame (DEVELOPERS.md).
    tariff : Tariff
        From :func:`auditor.tariffs.load_tariff`.
    tz : str
        Site time zone (billing is local).
    interval_minutes : int
    bank : BankDesign
        Fixed banks are always on; automatic banks follow the controller rule of
        :mod:`auditor.correction.banks`.
    target_pf : float
        Controller target (and the PF the warnings compare with).
    costs : CostInputs
        Demo assumptions by default — replace with quotations.
    site : SiteElectrical
        Transformer data for screening; without it screening says what it could not check.
    periods, start, end, billing_day
        Passed to :func:`auditor.audit.prepare_audit`.
    leading_pf_limit : float, optional
        Let the automatic controller go leading down to this PF (default: never leading).
    sensitivity : bool
        Compute the ±20 % table on load, prices and capex.

    Returns
    -------
    ScenarioResult

    References
    ----------
    .. [1] IEEE Std 1036-2010 (sizing, switched banks, screening).
    """
    if not isinstance(bank, BankDesign):
        raise UsageError(f"bank must be a BankDesign, got {type(bank).__name__}")
    target_pf, costs, site, prepare_kwargs, prepared, before = prepare_case(
        frame, tariff, tz=tz, interval_minutes=interval_minutes, target_pf=target_pf, costs=costs,
        site=site, periods=periods, start=start, end=end, billing_day=billing_day,
        leading_pf_limit=leading_pf_limit)
    figures = evaluate_prepared(prepared, before, tariff, interval_minutes=interval_minutes,
                                bank=bank, target_pf=target_pf, costs=costs, site=site,
                                leading_pf_limit=leading_pf_limit)
    sens = ()
    if sensitivity:
        sens = _sensitivity(frame, tariff, prepare_kwargs, bank, target_pf, interval_minutes, costs,
                            site, leading_pf_limit, figures["annual_savings"], figures["mean_rated"],
                            figures["price"], figures["year_factor"], figures["loss_reduction_kwh"])
    return _result(bank, target_pf, tariff, before, figures, sens, costs)


def _result(bank, target_pf, tariff, before, figures, sens, costs, candidates=None,
            extra_warnings=()) -> ScenarioResult:
    after = figures["run"].result
    warnings = tuple(extra_warnings) + _warnings(before, after, figures, bank, target_pf)
    return ScenarioResult(
        bank=bank, target_pf=target_pf,
        currency=getattr(before, "currency", None) or getattr(tariff, "currency", None),
        before=before, after=after, audited_days=figures["audited_days"],
        annual_savings=figures["annual_savings"], savings_by_charge=figures["savings_by_charge"],
        capex=figures["finance"].capex, finance=figures["finance"], screening=figures["screening"],
        peak_kva_before=figures["peak_before"], peak_kva_after=figures["peak_after"],
        pf_before=figures["pf_before"], pf_after=figures["pf_after"],
        line_loss_reduction=figures["line_loss"], mean_output_kvar=figures["mean_output"],
        loss_kwh_per_year=figures["loss_kwh"], sensitivity=sens, warnings=warnings,
        cautions=CAUTIONS, candidates=candidates, output_kvar=figures["run"].output_kvar,
        costs=costs,
    )


# --------------------------------------------------------------------------------------------
# several meters of a site
# --------------------------------------------------------------------------------------------
def sum_meters(frames: Mapping[str, pd.DataFrame]) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """Sum several meters' interval frames for central correction.

    Only intervals present in every meter are summed (a missing interval is not zero load);
    the count dropped is reported as a warning.
    """
    if not frames:
        raise UsageError("no meters to combine")
    names = list(frames)
    common = None
    for name in names:
        idx = frames[name].index
        common = idx if common is None else common.intersection(idx)
    columns = ["kwh", "kvarh_lag", "kvarh_lead", "kwh_received"]
    total = None
    for name in names:
        f = frames[name].reindex(common)
        part = f.reindex(columns=columns).fillna(0.0)
        total = part if total is None else total + part
    estimated = np.zeros(len(common), dtype=bool)
    for name in names:
        if "estimated" in frames[name].columns:
            estimated |= frames[name]["estimated"].reindex(common).fillna(False).to_numpy(dtype=bool)
    total["estimated"] = estimated
    total.index.name = "start"
    warnings = []
    for name in names:
        dropped = len(frames[name].index) - len(common)
        if dropped:
            warnings.append(f"meter {name}: {dropped} interval(s) missing in another meter were "
                            "left out of the site sum")
    if len(common) == 0:
        raise UsageError("the meters have no interval in common to correct centrally")
    return total.sort_index(), tuple(warnings)


@dataclass(frozen=True, eq=False)
class SiteScenarioResult:
    """Several meters of a site corrected centrally (on their sum) or each on its own."""

    mode: str
    scenarios: dict[str, ScenarioResult]
    warnings: tuple[str, ...]

    @property
    def annual_savings(self) -> float:
        return float(sum(s.annual_savings for s in self.scenarios.values()))

    @property
    def capex(self) -> float:
        return float(sum(s.capex for s in self.scenarios.values()))

    @property
    def npv(self) -> float:
        return float(sum(s.finance.npv for s in self.scenarios.values()))

    def to_dict(self) -> dict:
        flows = np.sum([np.asarray(s.finance.flows) for s in self.scenarios.values()], axis=0)
        return {
            "mode": self.mode,
            "annual_savings": self.annual_savings,
            "capex": self.capex,
            "npv": self.npv,
            "irr": finance.irr(flows),
            "scenarios": {k: s.to_dict() for k, s in self.scenarios.items()},
            "warnings": list(self.warnings),
            "cautions": list(CAUTIONS),
        }


def run_site(frames: Mapping[str, pd.DataFrame], tariff, *, tz: str, interval_minutes: int,
             bank: BankDesign | Mapping[str, BankDesign], mode: str = "central",
             **kwargs) -> SiteScenarioResult:
    """Correct a site's meters centrally (``mode="central"``: one bank on the summed intervals)
    or ``"per_meter"`` (each meter its bank, each billed on its own). Other keywords go to
    :func:`run_scenario`.

    The meters must share the life and discount rate of ``costs`` for the combined NPV to mean
    anything; they do, since one CostInputs is passed.
    """
    if mode == "central":
        if not isinstance(bank, BankDesign):
            raise UsageError("central correction takes one bank design")
        total, warnings = sum_meters(frames)
        result = run_scenario(total, tariff, tz=tz, interval_minutes=interval_minutes, bank=bank, **kwargs)
        return SiteScenarioResult("central", {"site": result}, warnings)
    if mode != "per_meter":
        raise UsageError(f"correction mode must be 'central' or 'per_meter', got {mode!r}")
    scenarios = {}
    for name, frame in frames.items():
        b = bank.get(name) if isinstance(bank, Mapping) else bank
        if b is None:
            raise UsageError(f"no bank design given for meter {name!r}")
        scenarios[name] = run_scenario(frame, tariff, tz=tz, interval_minutes=interval_minutes,
                                       bank=b, **kwargs)
    return SiteScenarioResult("per_meter", scenarios, ())
