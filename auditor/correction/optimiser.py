"""Search correction designs for the best NPV among those that pass screening.

Candidates are built from standard sizes: capacitor banks (fixed, automatic in step patterns,
plain or detuned) where the site lags, and — where it runs leading — switched shunt reactors
sized from the leading kvar in the windows where the tariff charges it, and the existing
capacitance switched out while leading. The controller runs for all equal-step capacitor
candidates at once (candidates × intervals, closed form); the tariff is re-run per candidate
through the prepared audit, which only replaces the reactive energies.

Only a design that passes every screening rule is recommended. When none of the first
candidates passes, the optimiser reports which rule stopped each family of designs and tries
the nearest remedies of the best failing ones — detuned versions, automatic banks with smaller
steps, smaller totals, capacitors of a higher rated voltage — and recommends the best of those
that pass. When nothing passes it says so and shows the closest design, marked not
recommended.

References
----------
.. [1] IEEE Std 1036-2010, *Guide for the Application of Shunt Power Capacitors*.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from auditor.correction.banks import (
    DETUNING_PERCENTS,
    BankDesign,
    bank_output_kvar,
    controller_limits,
    corrected_kvarh,
    standard_capacitor_voltage,
    switch_equal_steps,
    switch_stages,
)
from auditor.correction.harmonics import Spectrum
from auditor.correction.remedies import ReactorCosts, existing_capacitance_kvar, reactor_sizes
from auditor.correction.scenario import (
    BillSummary,
    CorrectedRun,
    PreparedScenario,
    ScenarioResult,
    _result,
    _sensitivity,
    evaluate_prepared,
    prepare_scenario,
)
from auditor.correction.screening import (
    ScreeningLimits,
    SiteElectrical,
    parallel_resonance_order,
    resonance_hits,
    screened_orders,
)
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
#: Step counts a remedy with smaller steps may use (controllers with 12 outputs exist —
#: common practice).
REMEDY_STEP_COUNTS = (3, 4, 5, 6, 7, 8, 10, 12)
#: Smallest step worth switching, kvar — common practice.
MIN_STEP_KVAR = 5.0
#: Share of the (charged-window) intervals that must run leading before the leading remedies
#: are tried — project default.
LEADING_SHARE_FOR_REMEDIES = 0.01
#: Failing designs (best NPV first) whose remedies are tried when nothing passes.
REMEDY_SOURCES = 6


def detuned_capacitor_voltage(nominal_voltage_v: float, detuning_percent: float) -> float:
    """Capacitor rating for a detuned bank: the bus voltage raised by the reactor, 1/(1 − p),
    rounded up to a standard rating (440 V for 5.67 % and 7 % on 400 V, 480 V for 14 %;
    ratings from memory)."""
    return standard_capacitor_voltage(nominal_voltage_v / (1.0 - float(detuning_percent) / 100.0))


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
                cap_v = detuned_capacitor_voltage(nominal_voltage_v, p)
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
            for steps in _equal_steps(float(total), EQUAL_STEP_COUNTS):
                if steps not in seen:
                    seen.add(steps)
                    designs.append(BankDesign("automatic", steps, p, cap_v))
    return designs


def _equal_steps(total: float, counts: Sequence[int]) -> list[tuple[float, ...]]:
    out = []
    for step in STANDARD_STEP_KVAR:
        count = total / step
        if step >= MIN_STEP_KVAR and abs(count - round(count)) < 1e-9 and round(count) in counts:
            out.append((float(step),) * round(count))
    return out


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


def choose_detuning(ps: PreparedScenario, sizes: Sequence[float]) -> float:
    """The series reactor (7, 5.67 or 14 %) whose stages resonate near no order present in the
    spectrum; 7 % when there is no spectrum or no short-circuit power (common practice).

    Detuned stages resonate between 1/√(Q_max/S_sc + p) and 1/√p; the reactor chosen leaves that
    whole range outside the fail band of every screened order, preferring the fewest cautions.
    """
    s_sc, _ = ps.site.short_circuit()
    if ps.spectrum is None or s_sc is None or not sizes:
        return 7.0
    orders, _ = screened_orders(ps.limits, ps.spectrum)
    qmax = max(sizes)
    best, best_key = 7.0, None
    for p in (7.0, 5.67, 14.0):
        h = parallel_resonance_order(s_sc, np.linspace(qmax / 40.0, qmax, 40), p)
        hits = resonance_hits(h, orders, ps.limits)
        key = (sum(1 for x in hits if x[0] == "fail"), sum(1 for x in hits if x[0] == "caution"))
        if best_key is None or key < best_key:
            best, best_key = p, key
    return best


def leading_remedy_designs(ps: PreparedScenario) -> list[BankDesign]:
    """Reactors near the quantiles of the leading kvar in the charged windows, and the existing
    capacitance switched out, when the site runs leading there often enough."""
    lead = ps.leading_kvar()
    in_windows = int(np.count_nonzero(ps.leading_mask)) if ps.leading_mask is not None else ps.kvar_net.size
    if lead.size == 0 or lead.size < LEADING_SHARE_FOR_REMEDIES * max(in_windows, 1):
        return []
    designs = [BankDesign.reactor(q) for q in reactor_sizes(lead)]
    existing = existing_capacitance_kvar(lead)
    if existing is not None:
        designs.append(BankDesign.switch_off(existing))
    return designs


def default_candidates(ps: PreparedScenario, *, sizes: Sequence[float] | None = None,
                       step_patterns: Sequence[Sequence[int]] = STEP_PATTERNS,
                       detuning: Sequence[float] | None = None, include_fixed: bool = True,
                       include_leading: bool | None = None) -> list[BankDesign]:
    """Capacitor banks of standard sizes (plain and detuned), and the leading-site remedies."""
    chosen_sizes = tuple(sizes) if sizes is not None else default_sizes(ps.prepared, ps.target_pf)
    if not chosen_sizes or any(not s > 0 for s in chosen_sizes):
        raise UsageError(f"bank sizes must be positive kvar values, got {sizes!r}")
    if detuning is None:
        detuning = (0.0, choose_detuning(ps, chosen_sizes))
    designs = candidate_designs(chosen_sizes, step_patterns=step_patterns, detuning=detuning,
                                include_fixed=include_fixed, nominal_voltage_v=ps.site.nominal_voltage_v)
    if include_leading is None or include_leading:
        designs += leading_remedy_designs(ps)
    return designs


def _outputs(designs: Sequence[BankDesign], prepared, target_pf: float,
             leading_pf_limit: float | None, system_voltage_v: float | None) -> np.ndarray:
    """Signed effective output per candidate and interval (candidates × intervals)."""
    n = prepared.kw.size
    kvar_net = prepared.kvar_lag - prepared.kvar_lead
    needed, allowed = controller_limits(prepared.kw, kvar_net, target_pf, leading_pf_limit)
    out = np.empty((len(designs), n))
    factors = np.array([d.output_factor(system_voltage_v) for d in designs])
    fixed = np.array([d.kind == "fixed" for d in designs])
    equal = np.array([d.kind == "automatic" and len(set(d.steps_kvar)) == 1 for d in designs])
    absorbing = np.array([not d.is_capacitor for d in designs])
    if fixed.any():
        out[fixed] = (np.array([d.total_kvar for d in designs]) * factors)[fixed, None]
    if equal.any():
        idx = np.nonzero(equal)[0]
        step = np.array([designs[i].steps_kvar[0] for i in idx]) * factors[idx]
        count = np.array([len(designs[i].steps_kvar) for i in idx])
        out[idx] = switch_equal_steps(needed, allowed, step, count)
    for i in np.nonzero(absorbing)[0]:
        out[i] = bank_output_kvar(designs[i], prepared.kw, kvar_net, target_pf)
    for i in np.nonzero(~fixed & ~equal & ~absorbing)[0]:
        # mixed step sizes: the general rule, vectorised over intervals
        out[i] = switch_stages(needed, allowed, designs[i].stage_totals_kvar() * factors[i])
    return out


def _evaluate(ps: PreparedScenario, designs: Sequence[BankDesign], origin: str) -> list[dict]:
    """Every design's figures on the prepared scenario, with its candidate-table row."""
    if not designs:
        return []
    v = ps.site.nominal_voltage_v
    outputs = _outputs(designs, ps.prepared, ps.target_pf, ps.leading_pf_limit, v)
    to_energy = ps.interval_minutes / 60.0
    lag0, lead0 = ps.prepared.kvar_lag * to_energy, ps.prepared.kvar_lead * to_energy
    evaluated = []
    for i, design in enumerate(designs):
        lag, lead = corrected_kvarh(lag0, lead0, outputs[i], ps.interval_minutes)
        run = CorrectedRun(outputs[i], lag, lead, None, BillSummary.quick(ps.prepared, lag, lead))
        fig = evaluate_prepared(ps, design, run=run)
        s = fig["screening"]
        failed = [r.rule for r in s.failed_rules]
        row = {
            "label": design.label, "kind": design.kind, "family": design.family,
            "steps_kvar": list(design.steps_kvar), "total_kvar": design.total_kvar,
            "detuning_percent": design.detuning_percent,
            "capacitor_rated_voltage_v": design.capacitor_rated_voltage_v,
            "effective_kvar": design.total_kvar * design.output_factor(v),
            "capex": fig["finance"].capex, "annual_savings": fig["annual_savings"],
            "npv": fig["finance"].npv, "irr": fig["finance"].irr,
            "simple_payback_years": fig["finance"].simple_payback_years,
            "pf_after": fig["pf_after"], "pf_after_sense": fig["pf_after_sense"],
            "passed_screening": s.passed, "screening_status": s.status, "failed_rules": failed,
            "cautions": [r.rule for r in s.rules if r.status == "caution" and r.checked],
            "resonance_order": s.resonance_order, "voltage_rise_percent": s.voltage_rise_percent,
            "leading_intervals": s.leading_intervals, "warnings": list(s.warnings), "origin": origin,
        }
        evaluated.append({"design": design, "figures": fig, "row": row})
    return evaluated


def remedy_designs(ps: PreparedScenario, failing: Sequence[dict]) -> list[tuple[BankDesign, str]]:
    """The nearest alternatives of failing designs: detuned versions, automatic banks with
    smaller steps, smaller totals, capacitors of a higher rated voltage; smaller reactor steps."""
    v = ps.site.nominal_voltage_v
    out: list[tuple[BankDesign, str]] = []
    for item in failing:
        d: BankDesign = item["design"]
        rules = set(item["row"]["failed_rules"])
        if not d.is_capacitor:
            if d.kind == "reactor" and len(d.steps_kvar) == 1:
                half = d.total_kvar / 2.0
                out.append((BankDesign.reactor((half, half)), f"{d.label} in two steps"))
            continue
        detunings = [d.detuning_percent] if d.detuned else [*DETUNING_PERCENTS]
        for p in detunings:
            if not d.detuned:
                out.append((BankDesign(d.kind, d.steps_kvar, p, _rating(v, p)), f"detuned version of {d.label}"))
            for steps in _equal_steps(d.total_kvar, REMEDY_STEP_COUNTS):
                if d.kind == "fixed" or min(steps) < min(d.steps_kvar):
                    out.append((BankDesign("automatic", steps, p, _rating(v, p)),
                                f"automatic bank with smaller steps instead of {d.label}"))
            smaller = [s for s in STANDARD_KVAR if s < d.total_kvar][-2:]
            for total in smaller:
                for steps in _equal_steps(float(total), REMEDY_STEP_COUNTS)[:2]:
                    out.append((BankDesign("automatic", steps, p, _rating(v, p)), f"smaller than {d.label}"))
        if "capacitor_duty" in rules and v is not None:
            rated = d.capacitor_rated_voltage_v or v
            higher = standard_capacitor_voltage(rated + 1.0)
            out.append((BankDesign(d.kind, d.steps_kvar, d.detuning_percent, higher),
                        f"{d.label} with {higher:g} V capacitors"))
    return out


def _rating(nominal_voltage_v: float | None, detuning_percent: float) -> float | None:
    if detuning_percent and nominal_voltage_v:
        return detuned_capacitor_voltage(nominal_voltage_v, detuning_percent)
    return None


def nearest_passing(ps: PreparedScenario, bank: BankDesign, figures: dict) -> dict | None:
    """For a design asked for that fails screening: the best remedy that passes (detuned
    version, smaller steps, an automatic bank, a higher capacitor rating), as a short dict —
    or None when no remedy passes either."""
    item = {"design": bank, "row": {"failed_rules": [r.rule for r in figures["screening"].failed_rules]}}
    seen: set = {(bank.kind, bank.steps_kvar, bank.detuning_percent, bank.capacitor_rated_voltage_v)}
    pairs = [(d, why) for d, why in remedy_designs(ps, [item]) if _dedupe([d], seen)]
    evaluated = _evaluate(ps, [d for d, _ in pairs], "remedy")
    why = {d.label: w for d, w in pairs}
    passing = [e for e in evaluated if e["row"]["passed_screening"]]
    if not passing:
        return None
    # the plain detuned version first when it passes, else the best NPV of what passes
    detuned = [e for e in passing if why[e["design"].label].startswith("detuned version")]
    best = max(detuned or passing, key=lambda e: e["row"]["npv"])
    r = best["row"]
    return {"label": r["label"], "why": why[r["label"]], "kind": r["kind"], "steps_kvar": r["steps_kvar"],
            "detuning_percent": r["detuning_percent"], "capacitor_rated_voltage_v": r["capacitor_rated_voltage_v"],
            "npv": r["npv"], "annual_savings": r["annual_savings"], "capex": r["capex"],
            "screening_status": r["screening_status"], "remedies_tried": len(evaluated),
            "remedies_passing": len(passing)}


def _families(evaluated: Sequence[dict]) -> list[dict]:
    """Per family of designs: how many passed, and which rules stopped the others."""
    fams: dict[str, dict] = {}
    for item in evaluated:
        r = item["row"]
        f = fams.setdefault(r["family"], {"family": r["family"], "designs": 0, "passed": 0,
                                           "best_passing": None, "best_npv": None, "stopped_by": {}})
        f["designs"] += 1
        if r["passed_screening"]:
            f["passed"] += 1
            if f["best_npv"] is None or r["npv"] > f["best_npv"]:
                f["best_npv"], f["best_passing"] = r["npv"], r["label"]
        for rule in r["failed_rules"]:
            f["stopped_by"][rule] = f["stopped_by"].get(rule, 0) + 1
    out = []
    for f in fams.values():
        stopped = sorted(f["stopped_by"].items(), key=lambda kv: -kv[1])
        f["stopped_by"] = [{"rule": k, "designs": n} for k, n in stopped]
        if f["passed"]:
            f["message"] = (f"{f['family']}: {f['passed']} of {f['designs']} designs pass; best "
                            f"{f['best_passing']}")
        else:
            why = ", ".join(f"{k.replace('_', ' ')} ({n} of {f['designs']})" for k, n in stopped)
            f["message"] = f"{f['family']}: none of {f['designs']} designs passes — stopped by {why}"
        out.append(f)
    return out


def _dedupe(designs: Sequence[BankDesign], seen: set) -> list[BankDesign]:
    out = []
    for d in designs:
        key = (d.kind, d.steps_kvar, d.detuning_percent, d.capacitor_rated_voltage_v)
        if key not in seen:
            seen.add(key)
            out.append(d)
    return out


def optimise(frame: pd.DataFrame, tariff, *, tz: str, interval_minutes: int,
             target_pf: float = 0.95, costs: CostInputs | None = None,
             site: SiteElectrical | None = None, sizes: Sequence[float] | None = None,
             designs: Sequence[BankDesign] | None = None,
             step_patterns: Sequence[Sequence[int]] = STEP_PATTERNS,
             detuning: Sequence[float] | None = None, include_fixed: bool = True,
             include_leading: bool | None = None,
             leading_pf_limit: float | None = None, periods=None, start=None, end=None,
             billing_day: int | None = None, sensitivity: bool = True,
             limits: ScreeningLimits | None = None, spectrum: Spectrum | None = None,
             drive_share: float | None = None, reactor_costs: ReactorCosts | None = None,
             remedies: bool = True) -> ScenarioResult:
    """The design with the best NPV among those passing screening, with the table of all.

    Parameters
    ----------
    sizes : sequence of float, optional
        Bank totals to try (default: standard sizes up to 1.25 × the largest interval need).
    designs : sequence of BankDesign, optional
        Explicit candidates (override ``sizes``/``step_patterns``/``detuning``/leading remedies).
    step_patterns : sequence of tuple of int
        Automatic-bank step patterns (default :data:`STEP_PATTERNS`).
    detuning : sequence of float, optional
        Reactor percentages to try, 0 meaning a plain bank (default plain and the reactor of
        :func:`choose_detuning`, 7 % without a spectrum).
    include_leading : bool, optional
        Try reactors and switching capacitance out (default: when the site runs leading in at
        least 1 % of the intervals where leading energy is charged).
    remedies : bool
        When nothing passes, try the nearest remedies of the best failing designs.
    Other parameters as :func:`auditor.correction.run_scenario`.

    Returns
    -------
    ScenarioResult
        For the chosen design, with ``candidates`` (one dict per design, passing ones first,
        best NPV first) and ``optimiser`` (status ``recommended``, ``nearest_passing`` or
        ``none_passes``; a message; the families of designs and what stopped them). With
        ``none_passes`` the design shown is the closest one and ``recommended`` is False.
    """
    ps = prepare_scenario(frame, tariff, tz=tz, interval_minutes=interval_minutes, target_pf=target_pf,
                          costs=costs, site=site, periods=periods, start=start, end=end,
                          billing_day=billing_day, leading_pf_limit=leading_pf_limit, limits=limits,
                          spectrum=spectrum, drive_share=drive_share, reactor_costs=reactor_costs)
    if designs is None:
        designs = default_candidates(ps, sizes=sizes, step_patterns=step_patterns, detuning=detuning,
                                     include_fixed=include_fixed, include_leading=include_leading)
    seen: set = set()
    designs = _dedupe(list(designs), seen)
    if not designs:
        raise UsageError("no candidate designs to compare")
    evaluated = _evaluate(ps, designs, "candidate")
    first_count = len(evaluated)
    status = "recommended"
    nearest_from = None
    if not any(e["row"]["passed_screening"] for e in evaluated) and remedies:
        failing = sorted(evaluated, key=lambda e: (len(e["row"]["failed_rules"]), -e["row"]["npv"]))
        pairs = remedy_designs(ps, failing[:REMEDY_SOURCES])
        reasons: dict = {}
        new = []
        for d, why in pairs:
            if _dedupe([d], seen):
                new.append(d)
                reasons[d.label] = why
        extra = _evaluate(ps, new, "remedy")
        for e in extra:
            e["row"]["remedy_of"] = reasons.get(e["design"].label)
        evaluated += extra
        if any(e["row"]["passed_screening"] for e in extra):
            status = "nearest_passing"
    passing = [k for k, e in enumerate(evaluated) if e["row"]["passed_screening"]]
    npv = np.array([e["row"]["npv"] for e in evaluated])
    if passing:
        best = max(passing, key=lambda k: npv[k])
        if status == "nearest_passing":
            nearest_from = evaluated[best]["row"].get("remedy_of")
    else:
        status = "none_passes"
        best = min(range(len(evaluated)),
                   key=lambda k: (len(evaluated[k]["row"]["failed_rules"]), -npv[k]))
    chosen = evaluated[best]
    families = _families(evaluated)
    label = chosen["design"].label
    if status == "recommended":
        message = (f"{label}: the best NPV of the {len(passing)} designs (of {len(evaluated)} compared) "
                   "that pass every screening rule")
    elif status == "nearest_passing":
        message = (f"none of the {first_count} designs first compared passes screening; the nearest design "
                   f"that passes is {label} ({nearest_from}), recommended with the best NPV of the "
                   f"{len(passing)} remedies that pass")
    else:
        fails = ", ".join(r.replace("_", " ") for r in chosen["row"]["failed_rules"])
        message = (f"no design passes screening ({len(evaluated)} compared, remedies included); shown: "
                   f"{label}, the closest, which fails {fails} — not recommended as it stands")
    stopped = [f["message"] for f in families if not f["passed"]]
    extra_warnings: list[str] = []
    if status != "recommended":
        extra_warnings.append(message)
        extra_warnings.extend(stopped)
    if chosen["row"]["npv"] <= 0:
        extra_warnings.append("no design that passes has a positive NPV under these costs and this tariff"
                              if status != "none_passes" else
                              "no design has a positive NPV under these costs and this tariff")
    order = sorted(range(len(evaluated)), key=lambda k: (
        not evaluated[k]["row"]["passed_screening"], len(evaluated[k]["row"]["failed_rules"]), -npv[k]))
    table = tuple({**evaluated[k]["row"], "rank": i + 1, "chosen": k == best,
                   "recommended": k == best and status != "none_passes"} for i, k in enumerate(order))
    fig = chosen["figures"]
    bank = chosen["design"]
    sens = (_sensitivity(ps, bank, fig["annual_savings"], fig["mean_rated"], fig["loss_reduction_kwh"])
            if sensitivity else ())
    summary = {"status": status, "message": message, "designs_compared": len(evaluated),
               "designs_first_compared": first_count, "passed": len(passing), "chosen": label,
               "nearest_passing_from": nearest_from, "families": families}
    return _result(ps, bank, fig, sens, candidates=table, extra_warnings=tuple(extra_warnings),
                   optimiser=summary, recommended=status != "none_passes")

