"""The savings case the demo prints: the optimiser on each demo meter, saved by name."""
from __future__ import annotations

from auditor.render import fmt, table
from auditor.services.correction import SizeRequest, save_scenario, size_meter
from auditor.services.demo import DEMO_TARIFF
from auditor.services.ingest import list_meters


def savings_case(store) -> dict:
    rows, data = [], {}
    cautions: list[str] = []
    for m in list_meters(store):
        case = size_meter(store, SizeRequest(meter=m["meter"], tariff=DEMO_TARIFF, optimize=True))
        d = case.to_dict()
        save_scenario(store, f"{m['meter']} optimised", case)
        data[m["meter"]] = {k: d[k] for k in ("bank", "annual_savings", "savings_by_charge", "capex",
                                              "simple_payback_years", "npv", "irr", "screening", "warnings")}
        cautions = d["cautions"]
        s = d["screening"]
        verdict = "ok" if s.get("passed") else "CHECK"
        if not d["npv"] or d["npv"] <= 0:
            verdict = "no bank pays back"
        rows.append([m["meter"], d["bank"]["label"], d["annual_savings"], d["capex"], d["simple_payback_years"],
                     d["npv"], fmt(s.get("resonance_order"), 1), verdict])
    text = "\n".join([
        "Correction case (optimiser, target PF 0.95, demo cost assumptions; saved as '<meter> optimised'):",
        table(["meter", "bank", "saving/yr", "capex", "payback y", "NPV", "resonance h", "verdict"], rows),
        "Cautions:", *[f"  - {c}" for c in cautions],
    ])
    return {"data": {"meters": data, "cautions": cautions}, "text": text}
