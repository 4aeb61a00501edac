"""Search bank designs for the best NPV that passes screening.

Candidates are built from standard bank sizes (fixed, automatic in step patterns, plain or
detuned). The controller runs for all equal-step candidates at once (candidates × intervals,
closed form); the tariff is re-run per candidate through the prepared audit, which only
replaces the reactive energies.

References
----------
.. [1] IEEE Std 1036-2010, *Guide for the Application of Shunt Power Capacitors*.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from auditor.correction.banks import (
    BankDesign,
    controller_limits,
    corrected_kvarh,
    switch_equal_steps,
    switch_stages,
)
from auditor.correction.scenario import (
    CorrectedRun,
    ScenarioResult,
    _result,
    _sensitivity,
    evaluate_prepared,
    prepare_case,
)
from auditor.correction.screening import SiteElectrical
from auditor.correction.sizing import required_kvar
from auditor.errors import UsageError
from auditor.finance import CostInputs

#: Bank totals commonly offered for LV sites, kvar — common practice (illustrative list).
STANDARD_KVAR = (10, 15, 20, 25, 30, 40, 50, 60, 75, 100, 125, 150, 175, 200, 250, 300, 350, 400,
                 450, 500, 600, 700, 800, 900, 1000, 1200, 1500, 2000)
#: Step patterns tried for automatic banks, in units of total / sum(pattern): four and six
#: equal steps, and the 1:1:2:2 sequence (six-step resolution from four contactors) — common
#: practice.
STEP_PATTERNS: tuple[tuple[int, ...], ...] = ((1, 1, 1, 1), (1, 1, 1, 1, 1, 1), (1, 1, 2, 2))
#: Step (capacitor unit) sizes commonly sold for LV banks, kvar — common practice
#: (illustrative list). Automatic candidates are built only from these, so every design the
#: optimiser proposes can be bought as specified (no 29.17 kvar steps).
STANDARD_STEP_KVAR = (5, 7.5, 10, 12.5, 15, 20, 25, 30, 40, 50, 60, 75, 100, 125, 150, 200)
#: Numbers of equal steps tried beyond the patterns (controller outputs usually 3 to 8 stages
#: or more; more steps follow the load more closely) — common practice.
EQUAL_STEP_COUNTS = (3, 4, 5, 6, 7, 8)
#: Smallest step worth switching, kvar — common practice.
MIN_STEP_KVAR = 5.0
#: Capacitor rated voltage per system voltage for detuned banks (e.g. 440 V capacitors on a
#: 400 V system for 5.67 % and 7 %, 480 V for 14 %) — common practice, from memory.
DETUNED_CAPACITOR_VOLTAGE_RATIO = {5.67: 1.10, 7.0: 1.10, 14.0: 1.20}


def candidate_designs(sizes: Sequence[float], *,
                      step_patterns: Sequence[Sequence[int]] = STEP_PATTERNS,
                      detuning: Sequence[float] = (0.0, 7.0), include_fixed: bool = True,
                      nominal_voltage_v: float | None = None) -> list[BankDesign]:
    """Fixed and automatic banks of every size and step pattern, plain and detuned.

    A pattern (1, 1, 2, 2) of a 300 kvar bank gives steps 50, 50, 100, 100; patterns whose
    smallest step falls below :data:`MIN_STEP_KVAR` are skipped.
    """
    designs: list[BankDesign] = []
    for total in sizes:
        for p in detuning:
            cap_v = None
            if p and nominal_voltage_v is not None:
                ratio = DETUNED_CAPACITOR_VOLTAGE_RATIO.get(float(p), 1.10)
                cap_v = round(nominal_voltage_v * ratio)
            if include_fixed:
                designs.append(BankDesign.fixed(float(total), p, cap_v))
            seen: set[tuple[float, ...]] = set()
            for pattern in step_patterns:
                if not pattern or any(int(k) < 1 for k in pattern):
                    raise UsageError(f"step pattern {tuple(pattern)!r}: use whole numbers >= 1")
                unit = float(total) / sum(int(k) for k in pattern)
                if unit * min(pattern) >= MIN_STEP_KVAR and _standard_step(unit):
                    steps = tuple(unit * int(k) for k in pattern)
                    seen.add(steps)
                    designs.append(BankDesign("automatic", steps, p, cap_v))
            for step in STANDARD_STEP_KVAR:
                count = float(total) / step
                if step >= MIN_STEP_KVAR and abs(count - round(count)) < 1e-9 and round(count) in EQUAL_STEP_COUNTS:
                    steps = (float(step),) * round(count)
                    if steps not in seen:
                        seen.add(steps)
                        designs.append(BankDesign("automatic", steps, p, cap_v))
    return designs


def _standard_step(kvar: float) -> bool:
    return any(abs(kvar - s) < 1e-9 for s in STANDARD_STEP_KVAR)


def default_sizes(prepared, target_pf: float, limit: float = 1.25) -> tuple[float, ...]:
    """Standard totals up to 1.25 × the largest interval requirement (at least two sizes)."""
    need = required_kvar(prepared.kw, prepared.kvar_lag - prepared.kvar_lead, target_pf)
    top = float(np.max(need)) if need.size else 0.0
    sizes = tuple(float(s) for s in STANDARD_KVAR if s <= max(top * limit, 1e-9))
    if len(sizes) < 2:
        sizes = tuple(float(s) for s in STANDARD_KVAR[:2])
    return sizes


def _outputs(designs: Sequence[BankDesign], prepared, target_pf: float,
             leading_pf_limit: float | None, system_voltage_v: float | None) -> np.ndarray:
    """Effective output per candidate and interval (candidates × intervals)."""
    n = prepared.kw.size
    kvar_net = prepared.kvar_lag - prepared.kvar_lead
    needed, allowed = controller_limits(prepared.kw, kvar_net, target_pf, leading_pf_limit)
    out = np.empty((len(designs), n))
    factors = np.array([d.output_factor(system_voltage_v) for d in designs])
    fixed = np.array([d.kind == "fixed" for d in designs])
    equal = np.array([d.kind == "automatic" and len(set(d.steps_kvar)) == 1 for d in designs])
    if fixed.any():
        out[fixed] = (np.array([d.total_kvar for d in designs]) * factors)[fixed, None]
    if equal.any():
        idx = np.nonzero(equal)[0]
        step = np.array([designs[i].steps_kvar[0] for i in idx]) * factors[idx]
        count = np.array([len(designs[i].steps_kvar) for i in idx])
        out[idx] = switch_equal_steps(needed, allowed, step, count)
    for i in np.nonzero(~fixed & ~equal)[0]:
        # mixed step sizes: the general rule, vectorised over intervals
        out[i] = switch_stages(needed, allowed, designs[i].stage_totals_kvar() * factors[i])
    return out


def optimise(frame: pd.DataFrame, tariff, *, tz: str, interval_minutes: int,
             target_pf: float = 0.95, costs: CostInputs | None = None,
             site: SiteElectrical | None = None, sizes: Sequence[float] | None = None,
             designs: Sequence[BankDesign] | None = None,
             step_patterns: Sequence[Sequence[int]] = STEP_PATTERNS,
             detuning: Sequence[float] = (0.0, 7.0), include_fixed: bool = True,
             leading_pf_limit: float | None = None, periods=None, start=None, end=None,
             billing_day: int | None = None, sensitivity: bool = True) -> ScenarioResult:
    """The candidate with the best NPV among those passing screening, with the table of all.

    Parameters
    ----------
    sizes : sequence of float, optional
        Bank totals to try (default: standard sizes up to 1.25 × the largest interval need).
    designs : sequence of BankDesign, optional
        Explicit candidates (override ``sizes``/``step_patterns``/``detuning``).
    step_patterns : sequence of tuple of int
        Automatic-bank step patterns (default :data:`STEP_PATTERNS`).
    detuning : sequence of float
        Reactor percentages to try, 0 meaning a plain bank (default plain and 7 %).
    Other parameters as :func:`auditor.correction.run_scenario`.

    Returns
    -------
    ScenarioResult
        For the chosen design, with ``candidates`` filled (one dict per design, best first).
        When no candidate passes screening, the best NPV overall is returned with a warning.
    """
    target_pf, costs, site, prepare_kwargs, prepared, before = prepare_case(
        frame, tariff, tz=tz, interval_minutes=interval_minutes, target_pf=target_pf, costs=costs,
        site=site, periods=periods, start=start, end=end, billing_day=billing_day,
        leading_pf_limit=leading_pf_limit)
    if designs is None:
        chosen_sizes = tuple(sizes) if sizes is not None else default_sizes(prepared, target_pf)
        if not chosen_sizes or any(not s > 0 for s in chosen_sizes):
            raise UsageError(f"bank sizes must be positive kvar values, got {sizes!r}")
        designs = candidate_designs(chosen_sizes, step_patterns=step_patterns, detuning=detuning,
                                    include_fixed=include_fixed,
                                    nominal_voltage_v=site.nominal_voltage_v)
    designs = list(designs)
    if not designs:
        raise UsageError("no candidate bank designs to compare")
    outputs = _outputs(designs, prepared, target_pf, leading_pf_limit, site.nominal_voltage_v)
    to_energy = interval_minutes / 60.0
    lag0, lead0 = prepared.kvar_lag * to_energy, prepared.kvar_lead * to_energy
    rows, figures_all = [], []
    for i, design in enumerate(designs):
        lag, lead = corrected_kvarh(lag0, lead0, outputs[i], interval_minutes)
        run = CorrectedRun(outputs[i], lag, lead, prepared.run(kvarh_lag=lag, kvarh_lead=lead))
        fig = evaluate_prepared(prepared, before, tariff, interval_minutes=interval_minutes,
                                bank=design, target_pf=target_pf, costs=costs, site=site,
                                leading_pf_limit=leading_pf_limit, run=run)
        figures_all.append(fig)
        s = fig["screening"]
        rows.append({
            "label": design.label, "kind": design.kind, "steps_kvar": list(design.steps_kvar),
            "total_kvar": design.total_kvar, "detuning_percent": design.detuning_percent,
            "effective_kvar": design.total_kvar * design.output_factor(site.nominal_voltage_v),
            "capex": fig["finance"].capex, "annual_savings": fig["annual_savings"],
            "npv": fig["finance"].npv, "irr": fig["finance"].irr,
            "simple_payback_years": fig["finance"].simple_payback_years,
            "pf_after": fig["pf_after"], "passed_screening": s.passed,
            "resonance_order": s.resonance_order, "voltage_rise_percent": s.voltage_rise_percent,
            "leading_intervals": s.leading_intervals, "warnings": list(s.warnings),
        })
    npv = np.array([r["npv"] for r in rows])
    passed = np.array([r["passed_screening"] for r in rows])
    extra: list[str] = []
    if passed.any():
        best = int(np.nonzero(passed)[0][np.argmax(npv[passed])])
    else:
        best = int(np.argmax(npv))
        extra.append("no candidate passed screening: the design shown has the best NPV but "
                     "needs the screening findings resolved (detuning, smaller or switched bank)")
    if npv[best] <= 0:
        extra.append("no candidate has a positive NPV under these costs and this tariff")
    order = sorted(range(len(rows)), key=lambda i: (not rows[i]["passed_screening"], -rows[i]["npv"]))
    table = tuple({**rows[i], "rank": k + 1, "chosen": i == best} for k, i in enumerate(order))
    fig = figures_all[best]
    bank = designs[best]
    sens = ()
    if sensitivity:
        sens = _sensitivity(frame, tariff, prepare_kwargs, bank, target_pf, interval_minutes, costs,
                            site, leading_pf_limit, fig["annual_savings"], fig["mean_rated"],
                            fig["price"], fig["year_factor"], fig["loss_reduction_kwh"])
    return _result(bank, target_pf, tariff, before, fig, sens, costs, candidates=table,
                   extra_warnings=extra)

