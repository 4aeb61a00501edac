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
    Tariff,
)

__all__ = ["describe_tariff"]


def _money(x: float, currency: str) -> str:
    return f"{x:g} {currency}"


_BASIS_TEXT = {
    "lag": "lagging kvarh",
    "net": "net kvarh (lagging minus leading)",
    "lag_plus_lead": "lagging plus leading kvarh",
}


def describe_tariff(tariff: Tariff) -> list[str]:
    """Each clause of the tariff as one readable sentence, in bill order."""
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
        out.append(f"Demand: {_money(d.price_per_kw, c)} per {unit} of billing demand (the period's highest interval {unit}).")
        if d.ratchet_percent is not None:
            out.append(
                f"Demand ratchet: billing demand is at least {d.ratchet_percent:g} % of the highest demand "
                f"of the previous {d.ratchet_periods} billing periods."
            )
    if tariff.fixed_per_period:
        out.append(f"Fixed charge: {_money(tariff.fixed_per_period, c)} per billing period.")
    rnd = "not rounded" if tariff.pf_rounding is None else f"rounded half up to {tariff.pf_rounding} decimals"
    out.append(f"Power factor is the energy PF of the period from {_BASIS_TEXT[tariff.kvarh_basis]}, {rnd} before any comparison.")
    for m in tariff.reactive:
        key = Tariff.key_of(m)
        if isinstance(m, KvarhExcess):
            where = " counted " + "; ".join(w.describe() for w in m.windows) if m.windows else ""
            out.append(
                f"{key}: {_money(m.price_per_kvarh, c)} per kvarh of {_BASIS_TEXT[m.kvarh]} above "
                f"{m.tan_phi_limit:g} x kWh (tan phi {m.tan_phi_limit:g}){where}."
            )
        elif isinstance(m, KvarhBanded):
            bands = []
            for i, b in enumerate(m.bands):
                price = f"{_money(b.price_per_kvarh, c)} per kvarh"
                if i == 0:
                    bands.append(f"{price} at PF {b.min_pf:g} and above" if b.min_pf > 0 else f"{price} at any PF")
                elif b.min_pf > 0:
                    bands.append(f"{price} from PF {b.min_pf:g} to below {m.bands[i - 1].min_pf:g}")
                else:
                    bands.append(f"{price} below PF {m.bands[i - 1].min_pf:g}")
            out.append(
                f"{key}: {_BASIS_TEXT[m.kvarh]} above {m.tan_phi_limit:g} x kWh priced by the period's PF band: "
                + "; ".join(bands) + "."
            )
        elif isinstance(m, PfDemandAdjust):
            pf = "the PF at the kW peak" if m.pf == "at_peak" else "the period's PF"
            text = f"{key}: when {pf} is below {m.base_pf:g}, billing demand is peak kW x {m.base_pf:g} / PF"
            if m.credit:
                text += "; above it the same ratio lowers billing demand"
                if m.max_credit_percent is not None:
                    text += f" by at most {m.max_credit_percent:g} %"
            out.append(text + ".")
        elif isinstance(m, PfPercent):
            text = (
                f"{key}: {m.percent_per_hundredth:g} % of the {', '.join(m.applies_to)} charges per 0.01 of PF "
                f"below {m.threshold_pf:g}"
            )
            if m.max_surcharge_percent is not None:
                text += f" (at most {m.max_surcharge_percent:g} %)"
            if m.rebate_above_pf is not None:
                text += f"; a rebate of {m.rebate_percent_per_hundredth:g} % per 0.01 above {m.rebate_above_pf:g}"
                if m.max_rebate_percent is not None:
                    text += f" (at most {m.max_rebate_percent:g} %)"
            out.append(text + ".")
        elif isinstance(m, KvarDemand):
            out.append(
                f"{key}: {_money(m.price_per_kvar, c)} per kvar of peak lagging kvar above "
                f"{m.allowance_ratio:g} x peak kW."
            )
        elif isinstance(m, LeadingKvarh):
            allowance = f" above {m.tan_phi_limit:g} x kWh" if m.tan_phi_limit else ""
            out.append(
                f"{key}: {_money(m.price_per_kvarh, c)} per leading kvarh{allowance} {m.window.describe()}."
            )
    return out
