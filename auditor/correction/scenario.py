"""A correction scenario: a design on the interval data, tariff again, savings, screening, finance.

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
from auditor.correction.harmonics import Spectrum, estimate_spectrum, frequency_scan
from auditor.correction.remedies import ReactorCosts, leading_kvar_in_windows
from auditor.correction.screening import (
    CAUTIONS,
    Operation,
    ScreeningLimits,
    ScreeningResult,
    SiteElectrical,
    light_load_kvar,
    screen,
)
from auditor.correction.sizing import check_frame, check_pf
from auditor.correction.specification import build_specification, pf_range
from auditor.errors import UsageError
from auditor.finance import CostInputs, FinanceResult
from auditor.tariffs.engine import compute_charges
from auditor.tariffs.facts import leading_keys

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
    """Charge keys of the tariff's over-correction clauses (the tariffs package decides)."""
    return leading_keys(tariff)


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


@dataclass(frozen=True)
class BillSummary:
    """What comparing designs needs of a tariff run: the total, each charge summed over the
    periods (non-finite amounts left out), and the highest peak kVA."""

    total: float
    charges: dict[str, float]
    peak_kva: float | None

    @classmethod
    def of(cls, result: AuditResult) -> BillSummary:
        return cls(float(result.total), _charges_sum(result), _peak_kva(result))

    @classmethod
    def quick(cls, prepared, kvarh_lag: np.ndarray, kvarh_lead: np.ndarray) -> BillSummary:
        """The same figures straight from the charge engine, without building period results
        (the optimiser's path: the same numbers as :meth:`of` on ``prepared.run``)."""
        q, _ = prepared.quantities(kvarh_lag, kvarh_lead)
        ch = compute_charges(prepared.tariff, q)
        charges = {k: float(np.sum(v[np.isfinite(v)])) for k, v in ch.amounts.items()}
        peaks = q.peak_kva[np.isfinite(q.peak_kva)]
        return cls(float(np.sum(ch.total)), charges, float(peaks.max()) if peaks.size else None)


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
    """One design applied to prepared intervals, and the tariff run on the corrected data:
    the full audit (``result``; None on the optimiser's quick path) and its summary (``bill``)."""

    output_kvar: np.ndarray
    kvarh_lag: np.ndarray
    kvarh_lead: np.ndarray
    result: AuditResult | None
    bill: BillSummary | None = None

    def __post_init__(self) -> None:
        if self.bill is None:
            if self.result is None:
                raise ValueError("a corrected run needs its audit or its bill summary")
            object.__setattr__(self, "bill", BillSummary.of(self.result))

    def full(self, prepared) -> CorrectedRun:
        """This run with the full audit (computed when the quick path left it out)."""
        if self.result is not None:
            return self
        return CorrectedRun(self.output_kvar, self.kvarh_lag, self.kvarh_lead,
                            prepared.run(kvarh_lag=self.kvarh_lag, kvarh_lead=self.kvarh_lead), self.bill)


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
# the prepared scenario: everything that does not depend on the design
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class PreparedScenario:
    """The checked inputs and the audit before correction, shared by every design of a case.

    Attributes beyond the inputs: ``prepared`` and ``before`` (the audit), ``kvar_net`` per
    interval, ``load_kw`` (median kW, the load that damps the frequency scan when the spectrum
    carries none), ``light_load_kvar`` (the site's kvar at light load), ``leading_mask`` (the
    intervals inside the windows where the tariff charges leading energy; None when it has no
    such windows), ``spectrum`` (measured or estimated; None) and ``warnings``.
    """

    frame: pd.DataFrame
    tariff: object
    interval_minutes: int
    target_pf: float
    costs: CostInputs
    reactor_costs: ReactorCosts
    site: SiteElectrical
    limits: ScreeningLimits
    leading_pf_limit: float | None
    prepare_kwargs: dict
    prepared: object
    before: AuditResult
    before_bill: BillSummary
    kvar_net: np.ndarray
    load_kw: float | None
    light_load_kvar: float | None
    leading_mask: np.ndarray | None
    spectrum: Spectrum | None
    warnings: tuple[str, ...]
    audited_days: float
    price: float

    @property
    def year_factor(self) -> float:
        return DAYS_PER_YEAR / self.audited_days

    def leading_kvar(self) -> np.ndarray:
        """Leading kvar of the intervals in the charged windows (or all) where the site leads."""
        return leading_kvar_in_windows(self.kvar_net, self.leading_mask)


def _leading_mask(prepared, tariff) -> np.ndarray | None:
    """Intervals inside the windows of the tariff's leading-energy clauses (None: no window)."""
    keys = set(_leading_keys(tariff))
    rows = [prepared.window_rows[i] for i, m in enumerate(getattr(tariff, "reactive", ()))
            if tariff.key_of(m) in keys and prepared.window_rows[i] is not None]
    if not rows or prepared.window_masks.shape[0] == 0:
        return None
    return np.any(prepared.window_masks[rows] > 0, axis=0)


def prepare_scenario(frame: pd.DataFrame, tariff, *, tz: str, interval_minutes: int, target_pf: float,
                     costs: CostInputs | None = None, site: SiteElectrical | None = None, periods=None,
                     start=None, end=None, billing_day: int | None = None,
                     leading_pf_limit: float | None = None, limits: ScreeningLimits | None = None,
                     spectrum: Spectrum | None = None, drive_share: float | None = None,
                     reactor_costs: ReactorCosts | None = None) -> PreparedScenario:
    """Checks, the audit before correction and the site facts every design is measured by.

    A measured ``spectrum`` wins over ``drive_share``; the estimate from the drive share needs
    the site's nominal voltage.
    """
    check_frame(frame, interval_minutes)
    target_pf = check_pf(target_pf)
    if leading_pf_limit is not None:
        check_pf(leading_pf_limit, "leading_pf_limit")
    costs = costs or CostInputs()
    site = site or SiteElectrical()
    limits = limits or ScreeningLimits()
    prepare_kwargs = dict(tz=tz, interval_minutes=interval_minutes, periods=periods,
                          billing_day=billing_day, start=start, end=end)
    prepared = prepare_audit(frame, tariff, **prepare_kwargs)
    before = prepared.run()
    kvar_net = prepared.kvar_lag - prepared.kvar_lead
    loaded = prepared.kw[prepared.kw > 0]
    load_kw = float(np.median(loaded)) if loaded.size else None
    warnings: list[str] = []
    if spectrum is None and drive_share is not None:
        if site.nominal_voltage_v is None or load_kw is None:
            warnings.append("harmonics not estimated from the drive share: the site's nominal voltage "
                            "or a load is missing")
        else:
            kwh = float(np.sum(prepared.kwh))
            pf = _energy_pf(kwh, float(np.sum(kvar_net)) * interval_minutes / 60.0) or 0.9
            spectrum = estimate_spectrum(drive_share, load_kw=load_kw, pf=max(abs(pf), 0.5),
                                         voltage_v=site.nominal_voltage_v)
    if spectrum is not None and spectrum.estimated:
        warnings.append(f"harmonics ESTIMATED, not measured — {spectrum.note}")
    return PreparedScenario(
        frame=frame, tariff=tariff, interval_minutes=interval_minutes, target_pf=target_pf,
        costs=costs, reactor_costs=reactor_costs or ReactorCosts(), site=site, limits=limits,
        leading_pf_limit=leading_pf_limit, prepare_kwargs=prepare_kwargs, prepared=prepared,
        before=before, before_bill=BillSummary.of(before), kvar_net=kvar_net, load_kw=load_kw,
        light_load_kvar=light_load_kvar(kvar_net, limits), leading_mask=_leading_mask(prepared, tariff),
        spectrum=spectrum, warnings=tuple(warnings), audited_days=_audited_days(prepared),
        price=energy_price(tariff, costs))


def prepare_case(frame: pd.DataFrame, tariff, **kwargs):
    """The former tuple form of :func:`prepare_scenario` (target_pf, costs, site,
    prepare_kwargs, prepared, before), kept for callers outside the package."""
    ps = prepare_scenario(frame, tariff, **kwargs)
    return ps.target_pf, ps.costs, ps.site, ps.prepare_kwargs, ps.prepared, ps.before


# --------------------------------------------------------------------------------------------
# result
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ScenarioResult:
    """Everything a correction scenario reports; ``to_dict()`` is the JSON of ``auditor size``."""

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
    pf_after_sense: str = "lagging"
    specification: dict = field(default_factory=dict)
    harmonics: dict | None = None
    frequency_scan: dict | None = None
    optimiser: dict | None = None
    recommended: bool = True
    limits: ScreeningLimits = field(default_factory=ScreeningLimits)
    alternative: dict | None = None

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
            "recommended": self.recommended,
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
            "pf_after_sense": self.pf_after_sense,
            "line_loss_reduction": self.line_loss_reduction,
            "mean_output_kvar": self.mean_output_kvar,
            "screening": self.screening.to_dict(),
            "screening_settings": self.limits.to_dict(),
            "specification": self.specification,
            "harmonics": self.harmonics,
            "frequency_scan": self.frequency_scan,
            "sensitivity": [dict(row) for row in self.sensitivity],
            "warnings": list(self.warnings),
            "cautions": list(self.cautions),
        }
        out.update(f.extras())
        out["cost_inputs"] = self.costs.to_dict()
        if self.candidates is not None:
            out["candidates"] = [dict(c) for c in self.candidates]
        if self.optimiser is not None:
            out["optimiser"] = self.optimiser
        out["alternative"] = self.alternative
        return out


# --------------------------------------------------------------------------------------------
# one design on the prepared scenario
# --------------------------------------------------------------------------------------------
def _capex(ps: PreparedScenario, bank: BankDesign) -> float:
    if bank.is_capacitor:
        return finance.capex(ps.costs, bank.total_kvar, automatic=bank.kind == "automatic",
                             detuned=bank.detuned)
    return ps.reactor_costs.capex(bank.kind, bank.total_kvar)


def _loss_w_per_kvar(ps: PreparedScenario, bank: BankDesign) -> float:
    if bank.kind == "switch_off":
        return 0.0  # the capacitor's own small losses are saved while it is out; not counted
    if bank.kind == "reactor":
        return ps.reactor_costs.loss_w_per_kvar
    return ps.costs.loss_w_per_kvar_detuned if bank.detuned else ps.costs.loss_w_per_kvar


def _finance_for(ps: PreparedScenario, bank: BankDesign, annual_savings: float, mean_rated_kvar: float,
                 *, capex_scale: float = 1.0, price_scale: float = 1.0,
                 loss_reduction_kwh: float = 0.0) -> tuple[FinanceResult, float]:
    costs = ps.costs
    capex_value = capex_scale * _capex(ps, bank)
    loss_kwh = finance.annual_loss_kwh(mean_rated_kvar, _loss_w_per_kvar(ps, bank))
    result = finance.evaluate(
        capex_value, annual_savings * price_scale,
        annual_om_value=finance.annual_om(costs, capex_value),
        annual_loss_cost=loss_kwh * ps.price * price_scale,
        life_years=costs.life_years, discount_rate=costs.discount_rate, escalation=costs.escalation,
        costs=costs, loss_reduction_value=loss_reduction_kwh * ps.price * price_scale,
        loss_reduction_kwh_value=loss_reduction_kwh,
    )
    return result, loss_kwh


def _savings(before: BillSummary, after: BillSummary, year_factor: float) -> tuple[float, dict[str, float]]:
    b, a = before.charges, after.charges
    by_charge = {k: (b.get(k, 0.0) - a.get(k, 0.0)) * year_factor for k in dict.fromkeys([*b, *a])}
    return (before.total - after.total) * year_factor, by_charge


def _scaled_frame(frame: pd.DataFrame, factor: float) -> pd.DataFrame:
    out = frame.copy()
    for column in ("kwh", "kvarh_lag", "kvarh_lead"):
        out[column] = out[column] * factor
    return out


def _sensitivity(ps: PreparedScenario, bank: BankDesign, annual_savings: float,
                 mean_rated_kvar: float, loss_reduction_kwh: float = 0.0) -> tuple[dict, ...]:
    rows = []

    def row(factor: str, change: float, res: FinanceResult, savings: float) -> dict:
        return {"factor": factor, "change": change, "annual_savings": savings, "npv": res.npv,
                "irr": res.irr, "simple_payback_years": res.simple_payback_years}

    v = ps.site.nominal_voltage_v
    for change in SENSITIVITY_STEPS:
        # load: every interval's kWh and kvarh scaled, the controller and the tariff run again
        prepared = prepare_audit(_scaled_frame(ps.frame, 1.0 + change), ps.tariff, **ps.prepare_kwargs)
        before = prepared.run()
        run = apply_bank(prepared, bank, ps.target_pf, ps.interval_minutes,
                         leading_pf_limit=ps.leading_pf_limit, system_voltage_v=v)
        savings, _ = _savings(BillSummary.of(before), run.bill, ps.year_factor)
        rated = float(np.mean(np.abs(run.output_kvar))) / bank.output_factor(v)
        # I²R losses at a scaled load scale with its square
        res, _ = _finance_for(ps, bank, savings, rated,
                              loss_reduction_kwh=loss_reduction_kwh * (1.0 + change) ** 2)
        rows.append(row("load", change, res, savings))
    for change in SENSITIVITY_STEPS:
        # prices: every charge is price × quantity, so savings and loss cost scale together
        res, _ = _finance_for(ps, bank, annual_savings, mean_rated_kvar, price_scale=1.0 + change,
                              loss_reduction_kwh=loss_reduction_kwh)
        rows.append(row("prices", change, res, annual_savings * (1.0 + change)))
    for change in SENSITIVITY_STEPS:
        res, _ = _finance_for(ps, bank, annual_savings, mean_rated_kvar, capex_scale=1.0 + change,
                              loss_reduction_kwh=loss_reduction_kwh)
        rows.append(row("capex", change, res, annual_savings))
    base, _ = _finance_for(ps, bank, annual_savings, mean_rated_kvar, loss_reduction_kwh=loss_reduction_kwh)
    rows.extend(finance.item_sensitivity(base, ps.costs))
    return tuple(rows)


def evaluate_prepared(ps: PreparedScenario, bank: BankDesign, run: CorrectedRun | None = None) -> dict:
    """The figures of one design on the prepared scenario (no sensitivity); a dict of the
    ScenarioResult fields, shared by :func:`run_scenario` and the optimiser."""
    prepared, before = ps.prepared, ps.before_bill
    v = ps.site.nominal_voltage_v
    if run is None:
        run = apply_bank(prepared, bank, ps.target_pf, ps.interval_minutes,
                         leading_pf_limit=ps.leading_pf_limit, system_voltage_v=v)
    annual_savings, by_charge = _savings(before, run.bill, ps.year_factor)
    factor = bank.output_factor(v)
    mean_output = float(np.mean(run.output_kvar)) if run.output_kvar.size else 0.0
    mean_rated = float(np.mean(np.abs(run.output_kvar))) / factor if run.output_kvar.size else 0.0
    leading = _leading_keys(ps.tariff)
    lead_increase = None
    if leading:
        b, a = before.charges, run.bill.charges
        lead_increase = sum(a.get(k, 0.0) - b.get(k, 0.0) for k in leading)
    saving_period = before.total - run.bill.total
    gross = saving_period + max(lead_increase or 0.0, 0.0)
    kvar_after = ps.kvar_net - run.output_kvar
    op = Operation(kvar_net_before=ps.kvar_net, kvar_net_after=kvar_after, output_kvar=run.output_kvar,
                   kw=prepared.kw, interval_minutes=ps.interval_minutes, target_pf=ps.target_pf,
                   leading_charge_increase=lead_increase, saving=gross,
                   light_load_kvar=ps.light_load_kvar)
    screening = screen(bank, ps.site, limits=ps.limits, operation=op, spectrum=ps.spectrum,
                       load_kw=ps.load_kw)
    to_energy = ps.interval_minutes / 60.0
    kwh = float(np.sum(prepared.kwh))
    net_before = float(np.sum(ps.kvar_net) * to_energy)
    net_after = float(np.sum(run.kvarh_lag - run.kvarh_lead))
    pf1, pf2 = _energy_pf(kwh, net_before), _energy_pf(kwh, net_after)
    line_loss = 1.0 - (pf1 / pf2) ** 2 if pf1 and pf2 else None
    loss_reduction = finance.loss_reduction_kwh(kwh * ps.year_factor, line_loss, ps.costs.network_loss_percent)
    fin, loss_kwh = _finance_for(ps, bank, annual_savings, mean_rated, loss_reduction_kwh=loss_reduction)
    return dict(
        run=run, year_factor=ps.year_factor, audited_days=ps.audited_days, annual_savings=annual_savings,
        savings_by_charge=by_charge, finance=fin, loss_kwh=loss_kwh, screening=screening,
        mean_output=mean_output, mean_rated=mean_rated, price=ps.price, pf_before=pf1, pf_after=pf2,
        pf_after_sense="leading" if net_after < 0 else "lagging",
        line_loss=line_loss, peak_before=before.peak_kva, peak_after=run.bill.peak_kva,
        loss_reduction_kwh=loss_reduction,
    )


def _warnings(ps: PreparedScenario, after, figures: dict, bank: BankDesign) -> tuple[str, ...]:
    items: list[str] = []
    screening: ScreeningResult = figures["screening"]
    # a failing rule comes first, before anything the data or the money say
    for w in screening.warnings:
        if w not in items:
            items.append(w)
    for w in list(ps.warnings) + list(getattr(ps.before, "warnings", ())) + list(getattr(after, "warnings", ())):
        if w not in items:
            items.append(str(w))
    fin: FinanceResult = figures["finance"]
    if figures["annual_savings"] <= 0:
        items.append(f"{bank.label}: no saving under this tariff (the reactive charges do not fall)")
    elif fin.npv < 0:
        items.append(f"{bank.label}: negative NPV over {fin.life_years} years at "
                     f"{fin.discount_rate:.1%} — the saving does not repay the cost")
    pf_after = figures["pf_after"]
    if pf_after is not None and figures["pf_after_sense"] == "leading" and bank.is_capacitor:
        items.append(f"after correction the site runs net leading over the period (PF {pf_after:.3f} "
                     "leading): the bank over-corrects — a smaller or automatic bank is needed, not a "
                     "larger one")
    elif (pf_after is not None and pf_after < ps.target_pf - 5e-4 and figures["annual_savings"] > 0
          and bank.is_capacitor):
        items.append(f"after correction the period PF is {pf_after:.3f}, below the "
                     f"target {ps.target_pf:.2f}: a larger bank would be needed to reach it")
    return tuple(items)


def scan_of(ps: PreparedScenario, bank: BankDesign) -> dict | None:
    """The frequency-scan chart data of a design (None without S_sc or the bus voltage)."""
    s_sc, _ = ps.site.short_circuit()
    v = ps.site.nominal_voltage_v
    if s_sc is None or v is None:
        return None
    damping = ps.spectrum.load_kw if ps.spectrum is not None and ps.spectrum.load_kw else ps.load_kw
    stages = bank.stage_totals_kvar()[1:] if bank.is_capacitor else np.zeros(0)
    factor = bank.output_factor(v)
    labels = [f"{x * factor:,.0f} kvar at the bus" for x in stages]
    out = frequency_scan(voltage_v=v, short_circuit_kva=s_sc, stage_rated_kvar=stages,
                         rated_voltage_v=bank.capacitor_rated_voltage_v or v,
                         detuning_percent=bank.detuning_percent, load_kw=damping, stage_labels=labels,
                         sign=bank.sign)
    out["short_circuit_kva"] = s_sc
    out["design"] = bank.label
    out["harmonic_orders"] = list(ps.spectrum.orders) if ps.spectrum is not None else list(ps.limits.harmonic_orders)
    return out


def _result(ps: PreparedScenario, bank: BankDesign, figures: dict, sens, candidates=None,
            extra_warnings=(), optimiser: dict | None = None, recommended: bool | None = None,
            alternative: dict | None = None) -> ScenarioResult:
    figures = {**figures, "run": figures["run"].full(ps.prepared)}
    after = figures["run"].result
    screening: ScreeningResult = figures["screening"]
    rest = tuple(w for w in _warnings(ps, after, figures, bank) if w not in extra_warnings)
    if alternative is not None or (extra_warnings and optimiser is None):
        # a design asked for: its failing rules first, then what would pass instead
        failing = tuple(r.message for r in screening.failed_rules)
        warnings = failing + tuple(extra_warnings) + tuple(w for w in rest if w not in failing)
    else:
        warnings = tuple(extra_warnings) + rest
    if recommended is None:
        recommended = screening.passed
    pf_after = pf_range(ps.prepared.kw, ps.kvar_net - figures["run"].output_kvar)
    currency = getattr(ps.before, "currency", None) or getattr(ps.tariff, "currency", None)
    spec = build_specification(bank, ps.site, target_pf=ps.target_pf, screening=screening, limits=ps.limits,
                               pf_after=pf_after, capex=figures["finance"].capex, currency=currency,
                               cautions=CAUTIONS, recommended=recommended)
    harmonics = None
    if screening.harmonics is not None and screening.harmonics.source is not None:
        harmonics = screening.harmonics.to_dict()
    elif ps.spectrum is not None:
        harmonics = {"source": ps.spectrum.source, "note": ps.spectrum.note,
                     "orders": [{"order": h, "current_a": i, "bus_voltage_pct_without": None,
                                 "bus_voltage_pct_with": None}
                                for h, i in zip(ps.spectrum.orders, ps.spectrum.current_a, strict=True)],
                     "thd_v_pct_without": None, "thd_v_pct_with": None,
                     "limits": None, "capacitor_duty": None,
                     "why_incomplete": ("no capacitor in this design" if not bank.is_capacitor else
                                        "the site's short-circuit power or nominal voltage is not known")}
    return ScenarioResult(
        bank=bank, target_pf=ps.target_pf, currency=currency,
        before=ps.before, after=after, audited_days=figures["audited_days"],
        annual_savings=figures["annual_savings"], savings_by_charge=figures["savings_by_charge"],
        capex=figures["finance"].capex, finance=figures["finance"], screening=screening,
        peak_kva_before=figures["peak_before"], peak_kva_after=figures["peak_after"],
        pf_before=figures["pf_before"], pf_after=figures["pf_after"],
        line_loss_reduction=figures["line_loss"], mean_output_kvar=figures["mean_output"],
        loss_kwh_per_year=figures["loss_kwh"], sensitivity=sens, warnings=warnings,
        cautions=CAUTIONS, candidates=candidates, output_kvar=figures["run"].output_kvar,
        costs=ps.costs, pf_after_sense=figures["pf_after_sense"], specification=spec,
        harmonics=harmonics, frequency_scan=scan_of(ps, bank), optimiser=optimiser,
        recommended=recommended, limits=ps.limits, alternative=alternative,
    )


def run_scenario(frame: pd.DataFrame, tariff, *, tz: str, interval_minutes: int, bank: BankDesign,
                 target_pf: float = 0.95, costs: CostInputs | None = None,
                 site: SiteElectrical | None = None, periods: Sequence | None = None,
                 start=None, end=None, billing_day: int | None = None,
                 leading_pf_limit: float | None = None, sensitivity: bool = True,
                 limits: ScreeningLimits | None = None, spectrum: Spectrum | None = None,
                 drive_share: float | None = None,
                 reactor_costs: ReactorCosts | None = None, alternatives: bool = True) -> ScenarioResult:
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
        Fixed banks are always on; automatic banks, reactors and capacitance switched out
        follow the controller rules of :mod:`auditor.correction.banks`.
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
    limits : ScreeningLimits, optional
        Screening settings (defaults in :mod:`auditor.correction.screening`).
    spectrum : Spectrum, optional
        The measured harmonic spectrum at the bus.
    drive_share : float, optional
        Without a measurement: the share of the load on six-pulse drives, for an estimate.
    reactor_costs : ReactorCosts, optional
        Cost assumptions of reactors and of switching capacitance off.
    alternatives : bool
        When the design fails screening, look for the nearest design that passes (its detuned
        version, smaller steps, an automatic bank) and offer it as ``alternative``.

    Returns
    -------
    ScenarioResult
        A design that fails a screening rule is computed as asked, with ``recommended``
        False, the failing rules first among the warnings and, when one passes, the nearest
        design that does.

    References
    ----------
    .. [1] IEEE Std 1036-2010 (sizing, switched banks, screening).
    """
    if not isinstance(bank, BankDesign):
        raise UsageError(f"bank must be a BankDesign, got {type(bank).__name__}")
    ps = prepare_scenario(frame, tariff, tz=tz, interval_minutes=interval_minutes, target_pf=target_pf,
                          costs=costs, site=site, periods=periods, start=start, end=end,
                          billing_day=billing_day, leading_pf_limit=leading_pf_limit, limits=limits,
                          spectrum=spectrum, drive_share=drive_share, reactor_costs=reactor_costs)
    figures = evaluate_prepared(ps, bank)
    sens = (_sensitivity(ps, bank, figures["annual_savings"], figures["mean_rated"], figures["loss_reduction_kwh"])
            if sensitivity else ())
    alternative, extra = None, ()
    if not figures["screening"].passed and alternatives:
        # imported here: the optimiser builds on this module
        from auditor.correction.optimiser import nearest_passing

        alternative = nearest_passing(ps, bank, figures)
        extra = ((f"{bank.label} fails screening; the nearest design that passes is {alternative['label']} "
                  f"({alternative['why']}; NPV {alternative['npv']:,.0f})",) if alternative else
                 (f"{bank.label} fails screening and none of its nearest remedies passes",))
    return _result(ps, bank, figures, sens, extra_warnings=extra, alternative=alternative)


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
