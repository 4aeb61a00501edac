"""``auditor audit``: figures and charges per billing period for one meter."""
from __future__ import annotations

import click

from auditor.cli import Context, pass_ctx
from auditor.render import echo_json, fmt, table


def audit_table(periods: list[dict], currency: str) -> str:
    keys: list[str] = []
    for p in periods:
        for k in p["charges"]:
            if k not in keys:
                keys.append(k)
    headers = ["period", "kWh", "kvarh lag", "kvarh lead", "PF", "peak kW", "peak kVA", "cover %",
               *[f"{k} {currency}" for k in keys], f"reactive {currency}", f"total {currency}"]
    rows = []
    for p in periods:
        rows.append([f"{p['start']}→{p['end']}", p["kwh"], p["kvarh_lag"], p["kvarh_lead"],
                     None if p["pf"] is None else round(p["pf"], 3), p["peak_kw"], p["peak_kva"],
                     None if p["coverage"] is None else 100 * p["coverage"],
                     *[p["charges"].get(k, 0.0) for k in keys], p["reactive_total"], p["total"]])
    return table(headers, rows, digits=2)


@click.command("audit")
@click.option("--meter", "meter", required=True, metavar="M", help="Meter id as imported.")
@click.option("--tariff", "tariff", metavar="FILE",
              help="Tariff TOML file (or the name of a shipped example); default: the meter's own "
                   "(auditor meters set-tariff).")
@click.option("--from", "start", type=click.DateTime(["%Y-%m-%d"]), help="First local day (inclusive).")
@click.option("--to", "end", type=click.DateTime(["%Y-%m-%d"]), help="Last local day (exclusive).")
@click.option("--billing-day", type=click.IntRange(1, 28), help="Day of month billing periods start (default: calendar months).")
@click.option("--periods", "periods_file", type=click.Path(dir_okay=False),
              help="CSV of billing periods (header start,end; local dates, end exclusive).")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output.")
@pass_ctx
def audit_cmd(ctx: Context, meter, tariff, start, end, billing_day, periods_file, json_out):
    """Energy, demand and every reactive charge per billing period."""
    from auditor.services.audit import audit_meter, read_periods_file

    if periods_file and billing_day:
        raise click.UsageError("give either --periods or --billing-day")
    periods = read_periods_file(periods_file) if periods_file else None
    result = audit_meter(ctx.store, meter, tariff, start=start.date() if start else None,
                         end=end.date() if end else None, billing_day=billing_day, periods=periods)
    d = result.to_dict()
    if json_out:
        echo_json(d)
        return 0
    click.echo(f"Meter {d['meter']} ({d['site']}, {d['timezone']}) under tariff {d['tariff']!r}")
    click.echo(audit_table(d["periods"], d["currency"]))
    t = d["totals"]
    click.echo(f"\nTotal {fmt(t.get('total'))} {d['currency']}, of which reactive / power factor "
               f"{fmt(t.get('reactive_total'))} {d['currency']}; energy PF {fmt(t.get('pf'), 3)}")
    for w in d["warnings"]:
        click.echo(f"warning: {w}")
    return 0


commands = [audit_cmd]
