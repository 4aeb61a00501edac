"""The savings case the demo prints: the optimiser on each demo meter, saved by name."""
from __future__ import annotations

import textwrap

from auditor.render import WIDTH, fmt, table
from auditor.services.correction import ScenarioRequest, save_scenario, scenario_for_meter
from auditor.services.demo import DEMO_TARIFF
from auditor.services.ingest import list_meters


def _verdict(d: dict) -> str:
    """What the optimiser concluded, in one cell: never "ok" for a design that fails a rule."""
    o = d.get("optimiser") or {}
    if not d.get("recommended", True) or o.get("status") == "none_passes":
        return "no design passes screening"
    if not d["npv"] or d["npv"] <= 0:
        return "no design pays back"
    status = d["screening"].get("status")
    text = "recommended" if status == "pass" else "recommended (cautions)"
    return text + (" (nearest that passes)" if o.get("status") == "nearest_passing" else "")


def savings_case(store) -> dict:
    rows, data = [], {}
    cautions: list[str] = []
    for m in list_meters(store):
        case = scenario_for_meter(store, ScenarioRequest(meter=m["meter"], tariff=DEMO_TARIFF, optimise=True))
        d = case.to_dict()
        save_scenario(store, f"{m['meter']} optimised", case)
        data[m["meter"]] = {k: d[k] for k in ("bank", "recommended", "annual_savings", "savings_by_charge",
                                              "capex", "simple_payback_years", "npv", "irr", "screening",
                                              "specification", "warnings")}
        data[m["meter"]]["optimiser"] = {k: d["optimiser"][k] for k in ("status", "message")}
        cautions = d["cautions"]
        s = d["screening"]
        rows.append([m["meter"], d["bank"]["short_label"], d["annual_savings"], d["capex"], d["simple_payback_years"],
                     d["npv"], fmt(s.get("resonance_order"), 1), _verdict(d)])
    text = "\n".join([
        *textwrap.wrap("Correction case (optimiser, target PF 0.95, demo cost assumptions; only designs that "
                       "pass screening are recommended; saved as '<meter> optimised'):", WIDTH),
        table(["meter", "design", "saving/yr", "capex", "payback y", "NPV", "h res.", "verdict"], rows,
              right=[False, False, True, True, True, True, True, False]),
        "Cautions:", *[line for c in cautions for line in textwrap.wrap(c, WIDTH, initial_indent="  - ", subsequent_indent="    ")],
    ])
    return {"data": {"meters": data, "cautions": cautions}, "text": text}
