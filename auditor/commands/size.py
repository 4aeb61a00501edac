"""``auditor size``: a correction scenario for one meter or site — the design (a capacitor bank,
a shunt reactor, capacitance switched off, or the optimiser's choice), its screening, its
specification, savings, costs and payback."""
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
from auditor.commands.options import NounGroup, wide_option
from auditor.render import echo_json, fmt, table, wrap, wrapped_table

STATUS_WORD = {"pass": "pass", "caution": "CAUTION", "fail": "FAIL"}


def _failing_rules(d: dict) -> list[dict]:
    return [r for r in d["screening"].get("rules", []) if r["status"] == "fail"]


def _headline(d: dict) -> list[str]:
    """What a reader must see first: failing rules, or the optimiser's verdict."""
    lines = []
    o = d.get("optimiser")
    failing = _failing_rules(d)
    if o and o["status"] == "none_passes":
        lines.append(wrap(f"NO DESIGN PASSES SCREENING — {o['message']}"))
    elif o:
        lines.append(wrap(("Recommended: " if o["status"] == "recommended" else "Recommended (nearest that passes): ")
                          + d["bank"]["label"]))
        if o["status"] != "recommended":
            lines.append(wrap(o["message"], "  "))
    if failing:
        lines.append("NOT RECOMMENDED — this design fails screening:")
        lines += [wrap(f"FAIL {r['rule']}: {r['message']}", "  ") for r in failing]
        alt = d.get("alternative")
        if alt:
            lines.append(wrap(f"Nearest design that passes: {alt['label']} ({alt['why']}; saving "
                              f"{fmt(alt['annual_savings'])}/yr, capex {fmt(alt['capex'])}, NPV {fmt(alt['npv'])})",
                              "  "))
        elif not o:
            lines.append("  None of its nearest remedies (detuned, smaller steps, automatic) passes either.")
    return lines


def _value(r: dict) -> str:
    if r["value"] is None:
        return "-"
    return f"{fmt(r['value'], 2)}{(' ' + r['unit']) if r.get('unit') else ''}"


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


#: The candidate table: (heading, detail column?). Headline first: the design, its money and
#: its screening; the rest behind --wide.
CANDIDATE_COLUMNS = (("#", False), ("design", False), ("kvar", True), ("capex", True), ("saving/yr", False),
                     ("NPV", False), ("payback y", False), ("PF after", True), ("screen", False))


def _candidate_row(c: dict) -> list:
    return [c["rank"], c["label"], c["total_kvar"], c["capex"], c["annual_savings"], c["npv"],
            c["simple_payback_years"], c["pf_after"],
            "ok" if c["passed_screening"] else "FAIL " + ", ".join(c.get("failed_rules", []))]


def render_case(d: dict, wide: bool = False) -> str:
    """The case as text: the failing rules (or the optimiser's verdict) first, then the design,
    money, screening, specification, harmonics, candidates, warnings and cautions. Every line
    fits :data:`auditor.render.WIDTH` columns unless ``wide``."""
    cur = d.get("currency") or ""
    b = d["bank"]
    lines = [wrap(f"Meter {d['meter']} ({d['site']}) under tariff {d['tariff']!r}, target PF {d['target_pf']:.2f}")]
    lines += _headline(d)
    lines += ["",
              wrap(f"Design: {b.get('label') or b['kind']} — {b['kind'].replace('_', ' ')}, steps "
                   f"{', '.join(f'{s:g}' for s in b['steps_kvar'])} kvar, total {b['total_kvar']:g} kvar"
                   + (f", detuned {b['detuning']['reactor_percent']:g} %" if b.get("detuning") else "")),
              wrap(f"Energy PF {fmt(d.get('pf_before'), 3)} → {fmt(d.get('pf_after'), 3)}"
                   + (" leading" if d.get("pf_after_sense") == "leading" else "")
                   + f"; peak kVA {fmt(d['capacity']['peak_kva_before'], 1)} → "
                   f"{fmt(d['capacity']['peak_kva_after'], 1)} (released {fmt(d['capacity']['released_kva'], 1)} kVA)"),
              ""]
    lines.append(table(["charge", f"saving / year {cur}"],
                       [[k, v] for k, v in d["savings_by_charge"].items()] + [["total", d["annual_savings"]]],
                       wide=wide))
    irr = d.get("irr")
    lines += ["", wrap(f"Capex {fmt(d['capex'])} {cur}; simple payback {fmt(d.get('simple_payback_years'), 1)} years; "
                       f"discounted payback {fmt(d.get('discounted_payback_years'), 1)} years"),
              wrap(f"NPV over {d['life_years']} years at {100 * d['discount_rate']:.1f} %: {fmt(d['npv'])} {cur}; "
                   f"IRR {'-' if irr is None else f'{100 * irr:.1f} %'}")]
    lines += [wrap(x) for x in _finance_items(d, cur)]
    s = d["screening"]
    verdict = {"pass": "PASSED", "caution": "PASSED with cautions", "fail": "NOT PASSED"}[s.get("status", "pass")]
    lines += ["", f"Screening — {verdict}:",
              table(["rule", "status", "value", "limit"],
                    [[r["rule"], STATUS_WORD[r["status"]], _value(r),
                      "-" if r["limit"] is None else f"{fmt(r['limit'], 2)} {r.get('unit') or ''}".strip()]
                     for r in s.get("rules", [])], wide=wide)]
    lines += [wrap(f"{STATUS_WORD[r['status']]} {r['rule']}: {r['message']}", "  ") for r in s.get("rules", [])
              if r["status"] == "caution"]
    spec = d.get("specification")
    if spec:
        lines += ["", "Specification" + ("" if spec.get("recommended", True) else " (NOT RECOMMENDED as it stands)") + ":",
                  wrapped_table(["section", "item", "value", "unit", "note"],
                                [[r["section"], r["label"], r["value"], r["unit"], r["note"]]
                                 for r in spec["rows"] if r["section"] != "Cautions"],
                                {1: 24, 2: 14, 4: 24}, wide=wide)]
    h = d.get("harmonics")
    if h and h.get("thd_v_pct_with") is not None:
        label = "ESTIMATED (not measured)" if h["source"] == "estimated" else "measured"
        lines += ["", wrap(f"Harmonics, {label} — {h.get('note') or ''}"),
                  wrap(f"Voltage THD at the bus {fmt(h['thd_v_pct_without'], 2)} % without, "
                       f"{fmt(h['thd_v_pct_with'], 2)} % with the bank's largest stage (limits: "
                       f"{h['limits']['individual_pct']:g} % individual, {h['limits']['thd_pct']:g} % THD, "
                       "IEEE Std 519-2014)"),
                  table(["order", "current A", "bus V % without", "bus V % with"],
                        [[o["order"], o["current_a"], o["bus_voltage_pct_without"], o["bus_voltage_pct_with"]]
                         for o in h["orders"]], wide=wide),
                  wrap("Capacitor duty (% of rating; IEEE Std 18 limits 110 / 120 / 135 / 135): "
                       + ", ".join(f"{k.replace('_pct', '').replace('_', ' ')} {fmt(v, 1)}"
                                   for k, v in h["capacitor_duty"].items()))]
    elif h:
        lines += ["", wrap(f"Harmonics ({'ESTIMATED' if h['source'] == 'estimated' else 'measured'}): "
                           f"{h.get('why_incomplete') or ''}")]
    if d.get("optimiser"):
        o = d["optimiser"]
        lines += ["", f"Optimiser: {o['designs_compared']} designs compared, {o['passed']} pass screening"]
        lines += [wrap(f["message"], "  ") for f in o["families"]]
    if d.get("candidates"):
        top = d["candidates"][:10]
        lines += ["", f"Best {len(top)} of {len(d['candidates'])} (designs that pass first"
                      + ("" if wide else "; --wide adds kvar, capex and PF after") + "):",
                  table([h for h, _ in CANDIDATE_COLUMNS], [_candidate_row(c) for c in top],
                        detail=[x for _, x in CANDIDATE_COLUMNS], wide=wide)]
    # a rule's message is printed once: under the headline (fail) or the screening table (caution)
    shown = set(r["message"] for r in s.get("rules", []) if r["status"] in ("fail", "caution"))
    if d.get("alternative"):
        shown.update(w for w in d.get("warnings", []) if "the nearest design that passes is" in w)
    if d.get("optimiser"):
        shown.add(d["optimiser"]["message"])
        shown.update(f["message"] for f in d["optimiser"]["families"])
    for w in d.get("warnings", []):
        if w not in shown:
            lines.append(wrap(f"warning: {w}"))
    lines += ["", "Cautions:"] + [wrap(f"- {c}", "  ") for c in d.get("cautions", [])]
    return "\n".join(lines)


def render_site(d: dict, site: str, wide: bool = False) -> str:
    """A site's correction: which designs fail screening first, then each case, then the total."""
    lines = [wrap(f"Site {site} ({', '.join(d['meters'])}), {d['mode'].replace('_', ' ')} correction:")]
    failing = {name: [r["rule"] for r in _failing_rules(sc)] for name, sc in d["scenarios"].items()}
    failing = {name: rules for name, rules in failing.items() if rules}
    if failing:
        lines.append(wrap("NOT RECOMMENDED — fails screening: "
                          + "; ".join(f"{name} ({', '.join(rules)})" for name, rules in failing.items())))
    for name, sc in d["scenarios"].items():
        lines += ["", f"== {name}", render_case({**sc, "meter": name, "site": site, "tariff": d["tariff"]}, wide)]
    lines += ["", wrap(f"Site total: saving {fmt(d['annual_savings'])}/yr, capex {fmt(d['capex'])}, NPV {fmt(d['npv'])}")]
    return "\n".join(lines)


def _screening_option(ctx, param, values):
    from auditor.correction import ScreeningLimits
    from auditor.correction.screening import parse_setting
    from auditor.errors import UsageError

    out = {}
    try:
        for text in values:
            key, value = parse_setting(text)
            out[key] = value
        ScreeningLimits.from_mapping(out, where="--screening")
    except UsageError as exc:
        raise click.BadParameter(exc.message) from None
    return out


SCREENING_HELP = ("A screening setting KEY=VALUE (repeatable) over the site's and the defaults, e.g. "
                  "resonance_fail_percent=8 or harmonic_orders=5,7,11,13. Keys: see the contributor guide, "
                  "'Correction layer'.")


@click.command("size")
@click.option("--meter", metavar="M", help="The meter to correct.")
@click.option("--site", metavar="NAME", help="Correct every meter of a site instead (see --mode).")
@click.option("--mode", type=click.Choice(["central", "per-meter"]), default="central", show_default=True,
              help="With --site: one design on the meters' sum, or one per meter.")
@click.option("--tariff", required=True, metavar="FILE", help="Tariff TOML file (or a shipped example's name).")
@click.option("--target-pf", default=0.95, show_default=True, type=click.FloatRange(0.5, 1.0),
              help="PF the controller aims for (lagging).")
@click.option("--fixed", "fixed_kvar", type=click.FloatRange(min=0, min_open=True), metavar="KVAR",
              help="A fixed capacitor bank of KVAR.")
@click.option("--bank", "steps", metavar="STEPS", help='An automatic capacitor bank, e.g. "6x50" or "25,50,50,100".')
@click.option("--reactor", "reactor_kvar", type=click.FloatRange(min=0, min_open=True), metavar="KVAR",
              help="A switched shunt reactor of KVAR, for a site that runs leading.")
@click.option("--switch-off", "switch_off_kvar", type=click.FloatRange(min=0, min_open=True), metavar="KVAR",
              help="Switch KVAR of existing capacitance off while the site runs leading.")
@click.option("--optimise", "--optimize", "optimise", is_flag=True,
              help="Search designs (capacitor banks, and reactors where the site leads) for the best NPV "
                   "among those that pass screening.")
@click.option("--detuning", "detuning_percent", type=click.Choice(["0", "5.67", "7", "14"]), default="0",
              show_default=True, help="Series reactor, percent (with --fixed/--bank).")
@click.option("--leading-limit", "leading_pf_limit", type=click.FloatRange(0.5, 1.0),
              help="Let the automatic controller go leading down to this PF (default: never leading).")
@click.option("--capacitor-voltage", "capacitor_rated_voltage_v", type=click.FloatRange(min=0, min_open=True),
              help="Rated voltage of the capacitors, V: output scales by (V_site / V_rated)².")
@click.option("--harmonics", "harmonics_file", type=click.Path(dir_okay=False), metavar="FILE",
              help="Harmonic current spectrum measured at the point of connection (CSV: order,current_pct "
                   "or order,current_a[,voltage_pct]); overrides the site's.")
@click.option("--fundamental-a", type=click.FloatRange(min=0, min_open=True), metavar="A",
              help="Fundamental current at the harmonic measurement, A (when the file does not say).")
@click.option("--measured-kw", type=click.FloatRange(min=0, min_open=True), metavar="KW",
              help="Load at the harmonic measurement, kW (with --measured-pf, when the file does not say).")
@click.option("--measured-pf", type=click.FloatRange(0, 1, min_open=True), metavar="PF",
              help="PF at the harmonic measurement (with --measured-kw).")
@click.option("--drive-share", type=click.FloatRange(0, 1, min_open=True), metavar="FRACTION",
              help="Without a measurement: the share of the load on six-pulse drives, for an ESTIMATED "
                   "spectrum (e.g. 0.4).")
@click.option("--screening", "screening", multiple=True, metavar="KEY=VALUE", callback=_screening_option,
              help=SCREENING_HELP)
@click.option("--capex-per-kvar", type=click.FloatRange(min=0),
              help="Installed cost per kvar (of the design asked; with --optimise, of capacitor banks).")
@click.option("--capex-fixed", type=click.FloatRange(min=0),
              help="Fixed installed cost (of the design asked; with --switch-off, the whole cost).")
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
@wide_option
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output (the same data as the table).")
@pass_ctx
def size_cmd(ctx: Context, meter, site, mode, tariff, target_pf, fixed_kvar, steps, reactor_kvar, switch_off_kvar,
             optimise, detuning_percent, leading_pf_limit, capacitor_rated_voltage_v, harmonics_file, fundamental_a,
             measured_kw, measured_pf, drive_share, screening, capex_per_kvar, capex_fixed, life_years,
             discount_rate, escalation, start, end, save_as, wide, json_out, **case_kwargs):
    """Size power factor correction (or a reactor for a leading site), screen it and cost the case."""
    from auditor.services.correction import ScenarioRequest, save_scenario, scenario_for_meter

    if bool(meter) == bool(site):
        raise click.UsageError("give either --meter M or --site NAME")
    from auditor.services.correction import split_costs

    cost_values = {k: v for k, v in (("capex_per_kvar", capex_per_kvar), ("capex_fixed", capex_fixed),
                                     ("life_years", life_years), ("discount_rate", discount_rate),
                                     ("escalation", escalation)) if v is not None}
    cost_values.update(finance_costs(case_kwargs))
    cover = cover_of(case_kwargs)
    if cover and not save_as:
        raise click.UsageError("--client, --project and --author go on a saved case: add --save NAME")
    costs, reactor_costs = split_costs(cost_values, reactor_kvar=reactor_kvar, switch_off_kvar=switch_off_kvar)
    harmonics = None
    if harmonics_file:
        from auditor.services.correction import read_spectrum_file

        harmonics = read_spectrum_file(harmonics_file)
        for key, value in (("fundamental_a", fundamental_a), ("kw", measured_kw), ("pf", measured_pf)):
            if value is not None:
                harmonics[key] = value
    elif fundamental_a is not None or measured_kw is not None or measured_pf is not None:
        raise click.UsageError("--fundamental-a, --measured-kw and --measured-pf describe a --harmonics file")
    if (measured_kw is None) != (measured_pf is None):
        raise click.UsageError("give --measured-kw and --measured-pf together")
    req = ScenarioRequest(meter=meter or "", tariff=tariff, target_pf=target_pf, fixed_kvar=fixed_kvar, steps=steps,
                          optimise=optimise, detuning_percent=float(detuning_percent), costs=costs,
                          leading_pf_limit=leading_pf_limit, capacitor_rated_voltage_v=capacitor_rated_voltage_v,
                          reactor_kvar=reactor_kvar, switch_off_kvar=switch_off_kvar, reactor_costs=reactor_costs,
                          screening=dict(screening), harmonics=harmonics, drive_share=drive_share,
                          start=start.date().isoformat() if start else None,
                          end=end.date().isoformat() if end else None)
    if site:
        from auditor.services.correction import scenario_for_site

        if save_as:
            raise click.UsageError("--save works with --meter (a scenario belongs to one meter)")
        d = scenario_for_site(ctx.store, site, req, mode.replace("-", "_"))
        if json_out:
            echo_json(d)
        else:
            click.echo(render_site(d, site, wide))
        return 0
    case = scenario_for_meter(ctx.store, req)
    d = case.to_dict()
    if save_as:
        d["saved_as"] = save_scenario(ctx.store, save_as, case)["name"]
        if cover:
            from auditor.services.report import set_scenario_cover

            d["cover"] = set_scenario_cover(ctx.store, save_as, **cover)
    if json_out:
        echo_json(d)
    else:
        click.echo(render_case(d, wide))
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
    verdict = {True: "passes", False: "FAILS", None: "-"}
    click.echo(table(["name", "meter", "tariff", "saving/yr", "NPV", "payback y", "screening"],
                     [[r["name"], r["meter"], r["tariff"], r["annual_savings"], r["npv"], r["simple_payback_years"],
                       verdict[r["recommended"]]] for r in rows]))
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
