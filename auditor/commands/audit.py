"""``auditor audit``: figures and charges per billing period for one meter."""
from __future__ import annotations

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import (
    check_date_range,
    date_range_options,
    json_option,
    meter_option,
    tariff_option,
    wide_option,
)
from auditor.render import echo_json, fmt, local_time, table, wrap


def period_text(p: dict) -> str:
    """``2025-03`` for a calendar month, else ``2025-03-05→2025-04-03`` (end exclusive)."""
    s, e = p["start"], p["end"]
    y, m, d = (int(x) for x in s.split("-"))
    nxt = f"{y + (m == 12):04d}-{m % 12 + 1:02d}-01"
    return s[:7] if d == 1 and e == nxt else f"{s}→{e}"


def audit_table(periods: list[dict], currency: str, tz: str | None = None, wide: bool = False) -> str:
    """The audit by period: headline columns (energy, PF, the kW peak and its local time,
    reactive and total charges, coverage); ``wide`` adds the lagging and leading kvarh, tan φ,
    the kVA peak and its time, peak kvar, PF at the peak, load factor, estimated intervals and
    each charge of the tariff. Money in ``currency``, times in ``tz``."""
    keys: list[str] = []
    for p in periods:
        for k in p["charges"]:
            if k not in keys:
                keys.append(k)
    cols = [  # (heading, digits, detail)
        ("period", 0, False), ("kWh", 0, False), ("kvarh lag", 0, True), ("kvarh lead", 0, True),
        ("PF", 3, False), ("tan φ", 3, True), ("peak kW", 1, False), ("peak kW at", 0, False),
        ("peak kVA", 1, True), ("peak kVA at", 0, True), ("peak kvar", 1, True), ("PF at peak", 3, True),
        ("load factor %", 1, True), ("estimated", 0, True),
        *[(k, 2, True) for k in keys],
        (f"reactive {currency}", 2, False), (f"total {currency}", 2, False), ("cover %", 1, False),
    ]
    rows = []
    for p in periods:
        rows.append([period_text(p), p["kwh"], p["kvarh_lag"], p["kvarh_lead"], p["pf"], p["tan_phi"],
                     p["peak_kw"], local_time(p.get("peak_kw_at"), tz), p["peak_kva"],
                     local_time(p.get("peak_kva_at"), tz), p["peak_kvar"], p["pf_at_peak"],
                     None if p["load_factor"] is None else 100 * p["load_factor"], p["estimated_intervals"],
                     *[p["charges"].get(k, 0.0) for k in keys], p["reactive_total"], p["total"],
                     None if p["coverage"] is None else 100 * p["coverage"]])
    return table([c[0] for c in cols], rows, [c[1] for c in cols], detail=[c[2] for c in cols], wide=wide)


def charge_totals(periods: list[dict], currency: str) -> str:
    """Each charge of the tariff summed over the periods, one line (the table shows them by
    period only with ``--wide``)."""
    sums: dict[str, float] = {}
    for p in periods:
        for k, v in p["charges"].items():
            sums[k] = sums.get(k, 0.0) + (v or 0.0)
    return wrap("Charges over these periods (" + currency + "): "
                + ", ".join(f"{k} {fmt(v)}" for k, v in sums.items()))


@click.command("audit")
@meter_option()
@tariff_option(required=False, help="Tariff TOML file (or the name of a shipped example); default: the "
                                    "meter's own (auditor meters set-tariff).")
@date_range_options
@click.option("--billing-day", type=click.IntRange(1, 28), metavar="N",
              help="Day of month billing periods start (default: calendar months, or the meter's own).")
@click.option("--periods", "periods_file", type=click.Path(dir_okay=False), metavar="FILE",
              help="CSV of billing periods (header start,end; local dates, end exclusive).")
@wide_option
@json_option
@pass_ctx
def audit_cmd(ctx: Context, meter, tariff, start, end, billing_day, periods_file, wide, json_out):
    """Energy, demand and every reactive charge per billing period."""
    from auditor.services.audit import audit_meter, read_periods_file

    if periods_file and billing_day:
        raise click.UsageError("give either --periods or --billing-day")
    check_date_range(start, end)
    periods = read_periods_file(periods_file) if periods_file else None
    result = audit_meter(ctx.store, meter, tariff, start=start.date() if start else None,
                         end=end.date() if end else None, billing_day=billing_day, periods=periods)
    d = result.to_dict()
    if json_out:
        echo_json(d)
        return 0
    click.echo(wrap(f"Meter {d['meter']} ({d['site']}) under tariff {d['tariff']!r}; times are local, "
                    f"{d['timezone']}"))
    click.echo(audit_table(d["periods"], d["currency"], d["timezone"], wide=wide))
    t = d["totals"]
    click.echo()
    if not wide and d["periods"]:
        click.echo(charge_totals(d["periods"], d["currency"]))
    click.echo(wrap(f"Total {fmt(t.get('total'))} {d['currency']}, of which reactive / power factor "
                    f"{fmt(t.get('reactive_total'))} {d['currency']}; energy PF {fmt(t.get('pf'), 3)}"))
    for w in d["warnings"]:
        click.echo(wrap(f"warning: {w}"))
    return 0


commands = [audit_cmd]
