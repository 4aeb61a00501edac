"""``auditor size``: a capacitor bank for one meter — savings, costs, payback and screening."""
from __future__ import annotations

import click

from auditor.commands.case import (
    RATE,
    RATE_HELP,
    cover_of,
    cover_options,
    finance_costs,
    finance_options,
)
from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import NounGroup
from auditor.render import echo_json, fmt, table


def _finance_items(d: dict, cur: str) -> list[str]:
    """The optional finance items of a case, one line each (apart from the tariff saving)."""
    out = []
    if d.get("incentive"):
        out.append(f"Incentive {fmt(d['incentive'])} {cur} in year {d.get('incentive_year', 0)}")
    if d.get("replacement_cost"):
        out.append(f"Replacement of cells or contactors {fmt(d['replacement_cost'])} {cur} in year {d['replacement_year']}")
    if d.get("tax_rate"):
        out.append(f"Profit tax {100 * d['tax_rate']:.1f} %, straight-line depreciation over {d.get('depreciation_years')} years")
    if d.get("loss_reduction_kwh_per_year"):
        out.append(f"Line-loss reduction (indicative) {fmt(d['loss_reduction_kwh_per_year'], 0)} kWh a year, worth "
                   f"{fmt(d.get('loss_reduction_value_per_year'))} {cur} a year — "
                   + ("counted in the payback" if d.get("loss_reduction_counted") else "not counted in the payback"))
    return out


def render_case(d: dict) -> str:
    cur = d.get("currency") or ""
    b = d["bank"]
    lines = [f"Meter {d['meter']} ({d['site']}) under tariff {d['tariff']!r}, target PF {d['target_pf']:.2f}",
             f"Bank: {b.get('label') or b['kind']} — {b['kind']}, steps {', '.join(f'{s:g}' for s in b['steps_kvar'])} kvar, "
             f"total {b['total_kvar']:g} kvar" + (f", detuned {b['detuning']}" if b.get("detuning") else ""),
             f"Energy PF {fmt(d.get('pf_before'), 3)} → {fmt(d.get('pf_after'), 3)}; peak kVA "
             f"{fmt(d['capacity']['peak_kva_before'], 1)} → {fmt(d['capacity']['peak_kva_after'], 1)} "
             f"(released {fmt(d['capacity']['released_kva'], 1)} kVA)", ""]
    lines.append(table(["charge", f"saving / year {cur}"],
                       [[k, v] for k, v in d["savings_by_charge"].items()] + [["total", d["annual_savings"]]]))
    irr = d.get("irr")
    lines += ["", f"Capex {fmt(d['capex'])} {cur}; simple payback {fmt(d.get('simple_payback_years'), 1)} years; "
              f"discounted payback {fmt(d.get('discounted_payback_years'), 1)} years",
              f"NPV over {d['life_years']} years at {100 * d['discount_rate']:.1f} %: {fmt(d['npv'])} {cur}; "
              f"IRR {'-' if irr is None else f'{100 * irr:.1f} %'}"]
    lines += _finance_items(d, cur)
    s = d["screening"]
    lines += ["", "Screening: resonance order " + fmt(s.get("resonance_order"), 2)
              + f", voltage rise {fmt(s.get('voltage_rise_percent'), 2)} %, leading intervals {s.get('leading_intervals')}"
              + (" — PASSED" if s.get("passed") else " — NOT PASSED")]
    if d.get("candidates"):
        top = d["candidates"][:10]
        lines += ["", f"Optimiser: {len(d['candidates'])} candidates, best 10:",
                  table(["#", "design", "kvar", "capex", "saving/yr", "NPV", "payback y", "PF after", "screen"],
                        [[c["rank"], c["label"], c["total_kvar"], c["capex"], c["annual_savings"], c["npv"],
                          c["simple_payback_years"], c["pf_after"], "ok" if c["passed_screening"] else "FAIL"]
                         for c in top])]
    for w in d.get("warnings", []):
        lines.append(f"warning: {w}")
    lines += ["", "Cautions:"] + [f"  - {c}" for c in d.get("cautions", [])]
    return "\n".join(lines)


@click.command("size")
@click.option("--meter", metavar="M", help="The meter to correct.")
@click.option("--site", metavar="NAME", help="Correct every meter of a site instead (see --mode).")
@click.option("--mode", type=click.Choice(["central", "per-meter"]), default="central", show_default=True,
              help="With --site: one bank on the meters' sum, or one bank per meter.")
@click.option("--tariff", required=True, metavar="FILE", help="Tariff TOML file (or a shipped example's name).")
@click.option("--target-pf", default=0.95, show_default=True, type=click.FloatRange(0.5, 1.0),
              help="Power factor the bank should reach.")
@click.option("--fixed", "fixed_kvar", type=click.FloatRange(min=0, min_open=True), metavar="KVAR", help="A fixed bank of KVAR.")
@click.option("--bank", "steps", metavar="STEPS", help='An automatic bank, e.g. "6x50" or "25,50,50,100".')
@click.option("--optimize", "--optimise", "optimize", is_flag=True, help="Search designs for the best NPV that passes screening.")
@click.option("--detuning", "detuning_percent", type=click.Choice(["0", "5.67", "7", "14"]), default="0",
              show_default=True, help="Series reactor, percent (with --fixed/--bank).")
@click.option("--leading-limit", "leading_pf_limit", type=click.FloatRange(0.5, 1.0),
              help="Let the automatic controller go leading down to this PF (default: never leading).")
@click.option("--capacitor-voltage", "capacitor_rated_voltage_v", type=click.FloatRange(min=0, min_open=True),
              help="Rated voltage of the capacitors, V: output scales by (V_site / V_rated)².")
@click.option("--capex-per-kvar", type=click.FloatRange(min=0), help="Installed cost per kvar.")
@click.option("--capex-fixed", type=click.FloatRange(min=0), help="Fixed installed cost.")
@click.option("--life-years", type=click.IntRange(1, 60), help="Economic life (default 15).")
@click.option("--discount-rate", type=RATE, help=f"Discount rate, {RATE_HELP}; default 8%.")
@click.option("--escalation", type=RATE, help=f"Tariff price escalation, {RATE_HELP}; default 3%.")
@finance_options
@click.option("--from", "start", type=click.DateTime(["%Y-%m-%d"]), metavar="YYYY-MM-DD",
              help="First local day, inclusive (default: the start of the data).")
@click.option("--to", "end", type=click.DateTime(["%Y-%m-%d"]), metavar="YYYY-MM-DD",
              help="Last local day, exclusive (default: the end of the data).")
@click.option("--save", "save_as", metavar="NAME", help="Save the scenario under NAME.")
@cover_options
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output (the same data as the table).")
@pass_ctx
def size_cmd(ctx: Context, meter, site, mode, tariff, target_pf, fixed_kvar, steps, optimize, detuning_percent,
             leading_pf_limit, capacitor_rated_voltage_v, capex_per_kvar, capex_fixed, life_years, discount_rate, escalation, start, end, save_as, json_out,
             **case_kwargs):
    """Size power factor correction and cost the case."""
    from auditor.services.correction import SizeRequest, save_scenario, size_meter

    costs = {k: v for k, v in (("capex_per_kvar", capex_per_kvar), ("capex_fixed", capex_fixed),
                               ("life_years", life_years), ("discount_rate", discount_rate),
                               ("escalation", escalation)) if v is not None}
    costs.update(finance_costs(case_kwargs))
    cover = cover_of(case_kwargs)
    if cover and not save_as:
        raise click.UsageError("--client, --project and --author go on a saved case: add --save NAME")
    req = SizeRequest(meter=meter or "", tariff=tariff, target_pf=target_pf, fixed_kvar=fixed_kvar, steps=steps,
                      optimize=optimize, detuning_percent=float(detuning_percent), costs=costs,
                      leading_pf_limit=leading_pf_limit, capacitor_rated_voltage_v=capacitor_rated_voltage_v,
                      start=start.date().isoformat() if start else None, end=end.date().isoformat() if end else None)
    if bool(meter) == bool(site):
        raise click.UsageError("give either --meter M or --site NAME")
    if site:
        from auditor.services.correction import size_site

        if save_as:
            raise click.UsageError("--save works with --meter (a scenario belongs to one meter)")
        d = size_site(ctx.store, site, req, mode.replace("-", "_"))
        if json_out:
            echo_json(d)
        else:
            click.echo(f"Site {site} ({', '.join(d['meters'])}), {d['mode'].replace('_', ' ')} correction:")
            for name, sc in d["scenarios"].items():
                click.echo(f"\n== {name}")
                click.echo(render_case({**sc, "meter": name, "site": site, "tariff": d["tariff"]}))
            click.echo(f"\nSite total: saving {fmt(d['annual_savings'])}/yr, capex {fmt(d['capex'])}, NPV {fmt(d['npv'])}")
        return 0
    case = size_meter(ctx.store, req)
    d = case.to_dict()
    if save_as:
        d["saved_as"] = save_scenario(ctx.store, save_as, case)["name"]
        if cover:
            from auditor.services.report import set_scenario_cover

            d["cover"] = set_scenario_cover(ctx.store, save_as, **cover)
    if json_out:
        echo_json(d)
    else:
        click.echo(render_case(d))
        if save_as:
            click.echo(f"\nsaved as scenario {save_as!r}")
    return 0


@click.group("scenarios", cls=NounGroup)
def scenarios_group():
    """Saved correction scenarios."""


@scenarios_group.command("list")
@click.option("--meter", metavar="M", help="Only this meter's scenarios.")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output (the same data as the table).")
@pass_ctx
def scenarios_list(ctx: Context, meter, json_out):
    """List saved scenarios."""
    from auditor.services.correction import list_scenarios

    rows = list_scenarios(ctx.store, meter)
    if json_out:
        echo_json({"scenarios": rows})
        return 0
    click.echo(table(["name", "meter", "tariff", "saving/yr", "NPV", "payback y"],
                     [[r["name"], r["meter"], r["tariff"], r["annual_savings"], r["npv"], r["simple_payback_years"]]
                      for r in rows]))
    return 0


@scenarios_group.command("delete")
@click.argument("name")
@pass_ctx
def scenarios_delete(ctx: Context, name):
    """Delete saved scenario NAME."""
    from auditor.services.correction import delete_scenario

    delete_scenario(ctx.store, name)
    click.echo(f"deleted scenario {name!r}")
    return 0


commands = [size_cmd, scenarios_group]
