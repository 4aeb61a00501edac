"""The specification of a chosen design: what to ask a supplier for, and what to expect.

One dict (the JSON ``specification``) carries the figures and a display-ready ``rows`` list
that every renderer (command line, dashboard, XLSX, HTML) shows as it is:

* bus voltage; total and per-step kvar at the bus voltage; the number of steps;
* the capacitors' rated voltage — the design's, or the smallest standard rating at or above the
  rms voltage across the capacitor in service (bus voltage, light-load rise, the reactor's
  1/(1 − p) and the harmonic voltages) and at or above the peak voltage / 1.2, so the IEEE
  Std 18 margins (110 % rms, 120 % peak) stay free for transients; standard ratings from
  memory — and the rated kvar that gives the stated kvar at the bus:
  Q_r = Q_bus (U_r / V)² (1 − p);
* the series reactor: percent, tuning order h = 1/√p and tuning frequency h·f;
* controller settings (from memory, common practice): step k is switched in when the kvar still
  needed to reach the target PF exceeds the steps already in plus 2/3 of step k, and out when it
  falls below the steps already in plus 1/3 of step k (a hysteresis of 1/3 step); 30 s
  switching delay; 180 s before a step is switched in again (at least the discharge time of
  the capacitors' discharge devices — IEC 60831-1 asks for 75 V within 3 minutes, from memory);
* the minimum-load check, the PF range expected after, a budget range (capex −20 % … +20 %,
  the sensitivity range, on demonstration cost assumptions) and the cautions.
"""
from __future__ import annotations

import math

import numpy as np

from auditor.correction.banks import BankDesign, standard_capacitor_voltage, tuning_order
from auditor.correction.harmonics import HarmonicStudy
from auditor.correction.screening import ScreeningLimits, ScreeningResult, SiteElectrical

#: Controller settings, from memory (common practice): thresholds as shares of the step,
#: delays in seconds.
SWITCH_IN_SHARE = 2.0 / 3.0
SWITCH_OUT_SHARE = 1.0 / 3.0
SWITCH_DELAY_S = 30.0
RECONNECT_DELAY_S = 180.0
#: Budget range round the capex (the sensitivity table's ±20 %).
BUDGET_RANGE = (0.8, 1.2)


def pf_range(kw: np.ndarray, kvar_net_after: np.ndarray) -> dict:
    """Per-interval PF after correction: 5th percentile, median, 95th percentile, minimum, and
    the share of intervals leading (PF = P/|S|, IEEE Std 1459-2010)."""
    kw = np.asarray(kw, dtype=float)
    q = np.asarray(kvar_net_after, dtype=float)
    loaded = kw > 0
    if not loaded.any():
        return {"p5": None, "median": None, "p95": None, "min": None, "leading_share": None}
    pf = kw[loaded] / np.hypot(kw[loaded], q[loaded])
    p5, med, p95 = np.percentile(pf, [5, 50, 95])
    return {"p5": float(p5), "median": float(med), "p95": float(p95), "min": float(pf.min()),
            "leading_share": float(np.mean(q[loaded] < 0))}


def required_capacitor_voltage(bank: BankDesign, system_voltage_v: float,
                               harmonics: HarmonicStudy | None, rise_percent: float) -> float:
    """Volts (line to line) the capacitors must be rated for: max(rms in service, peak / 1.2)."""
    p = bank.detuning_percent / 100.0
    rms = system_voltage_v * (1.0 + rise_percent / 100.0) / (1.0 - p)
    peak = rms
    if harmonics is not None and harmonics.v_rms_pct.size:
        rated = bank.capacitor_rated_voltage_v or system_voltage_v
        rms = max(rms, float(np.max(harmonics.v_rms_pct)) * rated / 100.0)
        peak = max(peak, float(np.max(harmonics.v_peak_pct)) * rated / 100.0)
    return max(rms, peak / 1.2)


def controller_settings(bank: BankDesign, target_pf: float, factor: float) -> dict:
    """Switching thresholds per step (kvar still needed above the target), delays."""
    out = {"target_pf": target_pf, "switch_in_kvar": [], "switch_out_kvar": [],
           "switch_delay_s": None, "reconnect_delay_s": None, "source": "from memory"}
    if bank.kind == "fixed":
        out["note"] = "a fixed bank has no controller: it is energised with the load's supply"
        return out
    steps = [s * factor for s in bank.steps_kvar]
    before = np.concatenate([[0.0], np.cumsum(steps)[:-1]])
    out["switch_in_kvar"] = [float(b + SWITCH_IN_SHARE * s) for b, s in zip(before, steps, strict=True)]
    out["switch_out_kvar"] = [float(b + SWITCH_OUT_SHARE * s) for b, s in zip(before, steps, strict=True)]
    out["switch_delay_s"] = SWITCH_DELAY_S
    out["reconnect_delay_s"] = RECONNECT_DELAY_S if bank.is_capacitor or bank.kind == "switch_off" else 5.0
    if bank.is_capacitor:
        out["note"] = ("step k goes in when the kvar still needed to reach the target PF exceeds the steps "
                       "already in plus 2/3 of step k, and out below the steps in plus 1/3 of it; a step is "
                       "not switched in again before its capacitors have discharged")
    else:
        out["note"] = ("step k goes in when the site's leading kvar exceeds the steps already in plus 2/3 of "
                       "step k, and out below the steps in plus 1/3 of it, never letting the site lag beyond "
                       "the target PF")
    return out


def _fmt(value, digits: int = 1) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    if isinstance(value, float | int | np.floating):
        return f"{value:,.{digits}f}"
    return str(value)


def build_specification(bank: BankDesign, site: SiteElectrical, *, target_pf: float,
                        screening: ScreeningResult, limits: ScreeningLimits, pf_after: dict,
                        capex: float, currency: str | None, cautions, recommended: bool = True
                        ) -> dict:
    """The ``specification`` JSON of one design (module docstring)."""
    v = site.nominal_voltage_v
    factor = bank.output_factor(v)
    steps_bus = [float(s * factor) for s in bank.steps_kvar]
    kind = "capacitor" if bank.is_capacitor else bank.kind
    spec: dict = {
        "kind": kind, "design": bank.label, "recommended": recommended,
        "bus_voltage_v": v, "total_kvar_at_bus": float(sum(steps_bus)),
        "steps_kvar_at_bus": steps_bus, "steps": len(steps_bus),
        "capacitor_rated_voltage_v": None, "capacitor_rated_voltage_required_v": None,
        "capacitor_rated_voltage_note": None, "capacitor_rated_kvar": None,
        "reactor_percent": bank.detuning_percent if bank.detuned else None,
        "tuning_order": tuning_order(bank.detuning_percent) if bank.detuned else None,
        "tuning_frequency_hz": (tuning_order(bank.detuning_percent) * limits.frequency_hz
                                if bank.detuned else None),
        "frequency_hz": limits.frequency_hz,
    }
    if bank.is_capacitor and v is not None:
        rise = screening.voltage_rise_percent or 0.0
        required = required_capacitor_voltage(bank, v, screening.harmonics, rise)
        spec["capacitor_rated_voltage_required_v"] = required
        if bank.capacitor_rated_voltage_v is not None:
            rated_v = float(bank.capacitor_rated_voltage_v)
            rated_kvar = bank.total_kvar
            note = "as designed"
            if rated_v + 1e-9 < required:
                note = (f"as designed, below the {required:,.0f} V the capacitors see in service: "
                        f"choose {standard_capacitor_voltage(required):,.0f} V")
        else:
            rated_v = standard_capacitor_voltage(required)
            rated_kvar = float(sum(steps_bus)) * (rated_v / v) ** 2 * (1.0 - bank.detuning_percent / 100.0)
            note = ("from the bus voltage, the light-load rise, the reactor and the harmonic voltage, rounded "
                    "up to a standard rating (ratings from memory)")
        spec.update(capacitor_rated_voltage_v=rated_v, capacitor_rated_kvar=float(rated_kvar),
                    capacitor_rated_voltage_note=note)
    elif bank.is_capacitor:
        spec["capacitor_rated_voltage_v"] = bank.capacitor_rated_voltage_v
        spec["capacitor_rated_kvar"] = bank.total_kvar
        spec["capacitor_rated_voltage_note"] = "the site's nominal voltage is not known: give it to size the rating"
    spec["controller"] = controller_settings(bank, target_pf, factor)
    minimum = screening.rule("minimum_load")
    spec["minimum_load"] = {
        "status": minimum.status if minimum else None,
        "smallest_step_kvar": float(min(steps_bus)),
        "light_load_kvar": screening.light_load_kvar,
        "percentile": limits.light_load_percentile,
        "message": minimum.message if minimum else None,
    }
    spec["pf_after_range"] = {k: pf_after.get(k) for k in ("p5", "median", "p95", "min", "leading_share")}
    spec["budget"] = {"low": capex * BUDGET_RANGE[0], "high": capex * BUDGET_RANGE[1], "currency": currency,
                      "note": "installed cost ±20 % on demonstration cost assumptions; replace with quotations"}
    spec["screening_status"] = screening.status
    spec["failed_rules"] = [r.rule for r in screening.failed_rules]
    spec["cautions"] = list(cautions)
    spec["rows"] = specification_rows(spec, bank, screening)
    return spec


def specification_rows(spec: dict, bank: BankDesign, screening: ScreeningResult) -> list[dict]:
    """Display rows: (section, label, value, unit, note), values already formatted."""
    rows: list[dict] = []

    def add(section, label, value, unit="", note=""):
        rows.append({"section": section, "label": label, "value": value, "unit": unit, "note": note})

    failed = screening.failed_rules
    if failed:
        for r in failed:
            limit = "" if r.limit is None else f"limit {_fmt(r.limit, 2)} {r.unit}".strip()
            add("Screening", f"FAILS {r.rule.replace('_', ' ')}", _fmt(r.value, 2), r.unit,
                f"{limit}; not recommended as it stands" if limit else "not recommended as it stands")
    else:
        add("Screening", "result", "passes" + (" with cautions" if screening.status == "caution" else ""),
            "", "every rule's figure and limit is listed under Screening")
    what = {"capacitor": "capacitor bank", "reactor": "shunt reactor, switched",
            "switch_off": "existing capacitance switched out while leading"}[spec["kind"]]
    add("Design", "equipment", what + ("" if bank.kind != "fixed" else ", fixed")
        + (", automatic" if bank.kind == "automatic" else ""), "", spec["design"])
    add("Design", "bus voltage", _fmt(spec["bus_voltage_v"], 0), "V", "line to line")
    add("Design", "total at the bus voltage", _fmt(spec["total_kvar_at_bus"]), "kvar",
        "absorbed" if not bank.is_capacitor else "")
    add("Design", "steps at the bus voltage", ", ".join(_fmt(s) for s in spec["steps_kvar_at_bus"]), "kvar",
        f"{spec['steps']} step{'s' if spec['steps'] != 1 else ''}")
    if bank.is_capacitor:
        add("Capacitors", "rated voltage", _fmt(spec["capacitor_rated_voltage_v"], 0), "V",
            spec.get("capacitor_rated_voltage_note") or "")
        add("Capacitors", "rated output at that voltage", _fmt(spec["capacitor_rated_kvar"]), "kvar",
            "Q_r = Q_bus (U_r/V)² (1 − p)")
        add("Capacitors", "voltage in service (rms, peak/1.2)", _fmt(spec["capacitor_rated_voltage_required_v"], 0),
            "V", "the rating must be at least this")
        if spec["reactor_percent"]:
            add("Detuning", "series reactor", _fmt(spec["reactor_percent"], 2), "%", "of the capacitor reactance")
            add("Detuning", "tuning order", _fmt(spec["tuning_order"], 2), "", "h = 1/√p")
            add("Detuning", "tuning frequency", _fmt(spec["tuning_frequency_hz"], 0), "Hz",
                f"at {spec['frequency_hz']:g} Hz")
        else:
            add("Detuning", "series reactor", "none", "", "plain bank")
    c = spec["controller"]
    add("Controller", "target PF", _fmt(c["target_pf"], 2), "", c.get("note", ""))
    if c["switch_in_kvar"]:
        add("Controller", "switch-in thresholds", ", ".join(_fmt(x) for x in c["switch_in_kvar"]), "kvar",
            "per step, from memory")
        add("Controller", "switch-out thresholds", ", ".join(_fmt(x) for x in c["switch_out_kvar"]), "kvar",
            "per step, from memory")
        add("Controller", "switching delay", _fmt(c["switch_delay_s"], 0), "s", "from memory")
        add("Controller", "reconnection delay", _fmt(c["reconnect_delay_s"], 0), "s",
            "at least the discharge time; from memory")
    m = spec["minimum_load"]
    add("Checks", "minimum load", m["status"] or "–", "", m["message"] or "")
    r = spec["pf_after_range"]
    add("Expected", "interval PF after (5th / median / 95th percentile)",
        f"{_fmt(r['p5'], 3)} / {_fmt(r['median'], 3)} / {_fmt(r['p95'], 3)}", "",
        f"lowest {_fmt(r['min'], 3)}; leading in {_fmt(100 * r['leading_share'] if r['leading_share'] is not None else None, 1)} % of intervals")
    b = spec["budget"]
    add("Budget", "installed cost", f"{_fmt(b['low'], 0)} – {_fmt(b['high'], 0)}", b["currency"] or "", b["note"])
    for k, text in enumerate(spec["cautions"], start=1):
        add("Cautions", f"{k}", text, "", "")
    return rows
