"""Each clause of a tariff as one sentence a bill reader recognises (``describe_tariff``),
used by ``auditor tariffs``-style listings, the dashboard's tariff page and the reports."""
from __future__ import annotations

from auditor.tariffs.model import (
    KvarDemand,
    KvarhBanded,
    KvarhExcess,
    LeadingKvarh,
    PfDemandAdjust,
    PfPercent,
    Rounding,
    Tariff,
    window_groups,
)

__all__ = ["describe_tariff"]


def _money(x: float, currency: str) -> str:
    return f"{x:g} {currency}"


_BASIS_TEXT = {
    "lag": "lagging kvarh",
    "net": "net kvarh (lagging minus leading)",
    "lag_plus_lead": "lagging plus leading kvarh",
    "max_lag_lead": "the larger of lagging and leading kvarh",
}
_SENSE_TEXT = {"lag": "lagging kvarh", "lead": "leading kvarh"}


def _pf_rounding_text(tariff: Tariff) -> str:
    r = tariff.pf_rounding
    if r is None:
        return "not rounded"
    if isinstance(r, Rounding):
        return r.describe()
    return f"rounded half up to {r} decimals"


def _windows_text(windows) -> str:
    return "; ".join(f"{w.name + ' ' if w.name else ''}{w.describe()}" for w in windows)


def _per_text(m) -> str:
    """How the clause is worked out, in words (empty for the whole period)."""
    per = getattr(m, "per", "period")
    if per == "window":
        names = [name for name, _ in window_groups(m.windows)]
        return (f", worked out separately in each time band ({', '.join(names)}) with that band's own "
                "energy and PF, other times exempt")
    if per == "interval":
        blocks = getattr(m, "block_minutes", None)
        if blocks == 1440:
            unit = "each local day"
        else:
            unit = f"each {blocks}-minute block of local time" if blocks else "each metered interval"
        return f", worked out for {unit} and summed over the period"
    return ""


def _where(m) -> str:
    """The windows of a clause, naming what each counts when a window sets its own kvarh."""
    if not m.windows or getattr(m, "per", "period") == "window":
        return ""
    parts = []
    for w in m.windows:
        own = f" ({_SENSE_TEXT[w.kvarh]})" if getattr(w, "kvarh", None) else ""
        parts.append(f"{w.name + ' ' if w.name else ''}{w.describe()}{own}")
    return " counted " + "; ".join(parts)


def _kvarh_excess_text(m: KvarhExcess, c: str) -> str:
    if m.reference_pf is not None:
        basis = "the reactive energy each window names" if any(w.kvarh for w in m.windows) else _BASIS_TEXT[m.kvarh]
        return (f"{m.key}: {_money(m.price_per_kwh, c)} per kWh of kWh x ({m.reference_pf:g} / PF - 1) when the PF "
                f"(from {basis}) is below {m.reference_pf:g}{_where(m)}{_per_text(m)}.")
    first = (f"{m.key}: {_money(m.price_per_kvarh, c)} per kvarh of {_BASIS_TEXT[m.kvarh]} above "
             f"{m.tan_phi_limit:g} x kWh (tan phi {m.tan_phi_limit:g})")
    if m.tiers:
        first += f" up to {m.tiers[0].above_tan_phi:g} x kWh"
        for k, t in enumerate(m.tiers):
            upper = f" up to {m.tiers[k + 1].above_tan_phi:g} x kWh" if k + 1 < len(m.tiers) else ""
            first += f", {_money(t.price_per_kvarh, c)} per kvarh above {t.above_tan_phi:g} x kWh{upper}"
    text = first + _where(m) + _per_text(m)
    if m.excess_rounding is not None:
        text += f"; the chargeable kvarh {m.excess_rounding.describe('kvarh')}"
    return text + "."


def _bands_text(m: KvarhBanded, c: str) -> str:
    bands = []
    for i, b in enumerate(m.bands):
        price = f"{_money(b.price_per_kvarh, c)} per kvarh"
        if i == 0:
            bands.append(f"{price} at PF {b.min_pf:g} and above" if b.min_pf > 0 else f"{price} at any PF")
        elif b.min_pf > 0:
            bands.append(f"{price} from PF {b.min_pf:g} to below {m.bands[i - 1].min_pf:g}")
        else:
            bands.append(f"{price} below PF {m.bands[i - 1].min_pf:g}")
    whose = "each band's" if m.per == "window" else "the period's"
    text = (f"{m.key}: {_BASIS_TEXT[m.kvarh]} above {m.tan_phi_limit:g} x kWh priced by {whose} PF band: "
            + "; ".join(bands) + _where(m) + _per_text(m))
    if m.per == "window":
        text += " (" + "; ".join(f"{name}: {_windows_text(ws)}" for name, ws in window_groups(m.windows)) + ")"
    if m.excess_rounding is not None:
        text += f"; the chargeable kvarh {m.excess_rounding.describe('kvarh')}"
    return text + "."


def _adjust_text(m: PfDemandAdjust) -> str:
    pf = {"at_peak": "the PF at the kW peak", "peak_kva": "peak kW / peak kVA"}.get(m.pf, "the period's PF")
    trigger = m.apply_below_pf if m.apply_below_pf is not None else m.base_pf
    formula = "peak kW / PF" if m.base_pf == 1 else f"peak kW x {m.base_pf:g} / PF"
    text = f"{m.key}: when {pf} is below {trigger:g}, billing demand is {formula}"
    if m.pf == "peak_kva" and m.apply_below_pf is None:
        text += f" (that is, the larger of peak kW and {m.base_pf:g} x peak kVA)"
    if m.max_increase_percent is not None:
        text += f", at most {m.max_increase_percent:g} % above peak kW"
    if m.adjusted_rounding is not None:
        text += f"; the adjusted demand {m.adjusted_rounding.describe('kW')}"
    if m.credit:
        text += "; above it the same ratio lowers billing demand"
        if m.max_credit_percent is not None:
            text += f" by at most {m.max_credit_percent:g} %"
    return text + "."


def _percent_text(m: PfPercent) -> str:
    text = (f"{m.key}: {m.percent_per_hundredth:g} % of the {', '.join(m.applies_to)} charges per 0.01 of PF "
            f"below {m.threshold_pf:g}")
    for s in m.slopes:
        text += f", {s.percent_per_hundredth:g} % per 0.01 below {s.below_pf:g}"
    if m.slopes:
        text += " (each rate on the hundredths in its own range)"
    if m.max_surcharge_percent is not None:
        text += f" (at most {m.max_surcharge_percent:g} %)"
    if m.rebate_above_pf is not None:
        text += f"; a rebate of {m.rebate_percent_per_hundredth:g} % per 0.01 above {m.rebate_above_pf:g}"
        if m.max_rebate_percent is not None:
            text += f" (at most {m.max_rebate_percent:g} %)"
    if m.difference_rounding is not None:
        text += f"; the PF difference {m.difference_rounding.describe()}"
    return text + "."


def _kvar_text(m: KvarDemand, c: str) -> str:
    kw = "peak kW"
    if m.allowance_lookback_periods:
        kw = f"the highest kW of this and the previous {m.allowance_lookback_periods} billing periods"
    text = f"{m.key}: {_money(m.price_per_kvar, c)} per kvar of peak lagging kvar above {m.allowance_ratio:g} x {kw}"
    if m.excess_rounding is not None:
        text += f"; the chargeable kvar {m.excess_rounding.describe('kvar')}"
    return text + "."


def _leading_text(m: LeadingKvarh, c: str) -> str:
    allowance = f" above {m.tan_phi_limit:g} x kWh" if m.tan_phi_limit else ""
    text = f"{m.key}: {_money(m.price_per_kvarh, c)} per leading kvarh{allowance} {_windows_text(m.windows)}{_per_text(m)}"
    if m.excess_rounding is not None:
        text += f"; the chargeable kvarh {m.excess_rounding.describe('kvarh')}"
    return text + "."


def describe_tariff(tariff: Tariff) -> list[str]:
    """Each clause of the tariff as one readable sentence, in bill order, rounding included."""
    c = tariff.currency
    out = [f"Tariff {tariff.name!r}, amounts in {c}."]
    if tariff.description:
        out.append(tariff.description)
    e = tariff.energy
    if e.windows:
        for w in e.windows:
            label = f"{w.name} " if w.name else ""
            out.append(f"Energy {label}{w.describe()}: {_money(w.price_per_kwh, c)} per kWh.")
        out.append(f"Energy at all other times: {_money(e.price_per_kwh, c)} per kWh.")
    else:
        out.append(f"Energy: {_money(e.price_per_kwh, c)} per kWh.")
    if tariff.calendar:
        sub = f" ({tariff.calendar.subdivision})" if tariff.calendar.subdivision else ""
        out.append(f"Public holidays are those of {tariff.calendar.country}{sub}.")
    d = tariff.demand
    if d:
        unit = "kVA" if d.basis == "kva" else "kW"
        if d.price_per_kw or not d.windows:
            out.append(f"Demand: {_money(d.price_per_kw, c)} per {unit} of billing demand (the period's highest interval {unit}).")
        if d.rounding is not None:
            out.append(f"Demand is {d.rounding.describe(unit)}, before it is billed.")
        for w in d.windows:
            label = f"{w.name} " if w.name else ""
            over = (f" on the excess of its highest {unit} over the highest {unit} of {w.excess_over}"
                    if w.excess_over else f" of its highest {unit}")
            out.append(f"Demand {label}{w.window.describe()}: {_money(w.price_per_kw, c)} per {unit}{over}.")
        if d.ratchet_percent is not None:
            looked = ("PF-adjusted demand" if d.ratchet_on == "billing" else "measured demand")
            out.append(
                f"Demand ratchet: billing demand is at least {d.ratchet_percent:g} % of the highest {looked} "
                f"of the previous {d.ratchet_periods} billing periods."
            )
    if tariff.fixed_per_period:
        out.append(f"Fixed charge: {_money(tariff.fixed_per_period, c)} per billing period.")
    out.append(f"Power factor is the energy PF of the period from {_BASIS_TEXT[tariff.kvarh_basis]}, "
               f"{_pf_rounding_text(tariff)} before any comparison.")
    for m in tariff.reactive:
        if isinstance(m, KvarhExcess):
            out.append(_kvarh_excess_text(m, c))
        elif isinstance(m, KvarhBanded):
            out.append(_bands_text(m, c))
        elif isinstance(m, PfDemandAdjust):
            out.append(_adjust_text(m))
        elif isinstance(m, PfPercent):
            out.append(_percent_text(m))
        elif isinstance(m, KvarDemand):
            out.append(_kvar_text(m, c))
        elif isinstance(m, LeadingKvarh):
            out.append(_leading_text(m, c))
    return out
