"""``auditor audit``: figures and charges per billing period for one meter; with ``--all``,
``--site`` or several ``--meter``, one row per meter audited in parallel."""
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


def batch_table(rows: list[dict]) -> str:
    """One row per meter: site, kWh, energy PF, reactive charges, total, coverage, worst month."""
    currencies = {r["currency"] for r in rows if r["currency"]}
    cur = f" {next(iter(currencies))}" if len(currencies) == 1 else ""
    headers = ["site", "meter", "kWh", "PF", f"reactive{cur}", f"total{cur}", "cover %", "worst month"]
    if len(currencies) > 1:
        headers.insert(6, "currency")
    out = []
    for r in rows:
        worst = f"{r['worst_period']} (PF {r['worst_pf']:.3f})" if r["worst_period"] else ("failed" if r["error"] else "-")
        line = [r["site"] or "-", r["meter"], r["kwh"], "-" if r["pf"] is None else f"{r['pf']:.3f}",
                r["reactive_total"], r["total"], None if r["coverage"] is None else 100 * r["coverage"], worst]
        if len(currencies) > 1:
            line.insert(6, r["currency"] or "-")
        out.append(line)
    return table(headers, out, digits=2)


def write_batch_csv(rows: list[dict], path) -> None:
    import csv

    from auditor.services.batch import CSV_COLUMNS

    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(CSV_COLUMNS)
        for r in rows:
            w.writerow(["" if r[k] is None else r[k] for k in CSV_COLUMNS])


@click.command("audit")
@meter_option(required=False, help="Meter id as imported; repeat it to audit several meters at once.",
              multiple=True)
@click.option("--all", "all_meters", is_flag=True, help="Audit every meter (one row per meter).")
@click.option("--site", metavar="NAME", help="Audit every meter of the site NAME (one row per meter).")
@tariff_option(required=False, help="Tariff TOML file (or the name of a shipped example); default: each "
                                    "meter's own (auditor meters set-tariff).")
@date_range_options
@click.option("--billing-day", type=click.IntRange(1, 28), metavar="N",
              help="Day of month billing periods start (default: calendar months, or the meter's own).")
@click.option("--periods", "periods_file", type=click.Path(dir_okay=False), metavar="FILE",
              help="CSV of billing periods (header start,end; local dates, end exclusive).")
@click.option("--workers", type=click.IntRange(1, 256), metavar="N",
              help="Processes auditing meters side by side (default: the number of CPUs).")
@click.option("--csv", "csv_out", type=click.Path(dir_okay=False, writable=True), metavar="FILE",
              help="Also write the one-row-per-meter table to FILE as CSV.")
@wide_option
@json_option
@pass_ctx
def audit_cmd(ctx: Context, meter, all_meters, site, tariff, start, end, billing_day, periods_file, workers,
              csv_out, wide, json_out):
    """Energy, demand and every reactive charge per billing period.

    One --meter prints the audit by billing period. --all, --site NAME or several --meter audit
    every meter named in parallel and print one row per meter (with --json: every meter's audit
    document); a meter that fails is reported and the others go on (exit 1).
    """
    from auditor.services.audit import read_periods_file

    chosen = sum([bool(all_meters), site is not None, bool(meter)])
    if chosen != 1:
        raise click.UsageError("give one of --meter M (repeatable), --site NAME or --all")
    if periods_file and billing_day:
        raise click.UsageError("give either --periods or --billing-day")
    if json_out and csv_out:
        raise click.UsageError("give either --json or --csv FILE")
    check_date_range(start, end)
    periods = read_periods_file(periods_file) if periods_file else None
    dates = {"start": start.date() if start else None, "end": end.date() if end else None,
             "billing_day": billing_day, "periods": periods}
    if len(meter) == 1 and not (csv_out or workers):
        return _one_meter(ctx, meter[0], tariff, dates, wide, json_out)
    return _many_meters(ctx, list(meter), all_meters, site, tariff, dates, workers, csv_out, json_out)


def _one_meter(ctx: Context, meter: str, tariff: str | None, dates: dict, wide: bool, json_out: bool) -> int:
    from auditor.services.audit import audit_meter

    result = audit_meter(ctx.store, meter, tariff, **dates)
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


def _many_meters(ctx: Context, meters: list[str], all_meters: bool, site: str | None, tariff: str | None,
                 dates: dict, workers: int | None, csv_out: str | None, json_out: bool) -> int:
    import sys

    from auditor.services.batch import audit_meters, own_tariffs, same_tariff, select_meters

    # the tariff named applies to every meter; without one, each meter's own (and its billing day)
    tariff_for = same_tariff(tariff) if tariff is not None else own_tariffs(ctx.store)
    names = select_meters(ctx.store, all_meters=all_meters, site=site, meters=meters)
    if not names:
        from auditor.errors import NotFoundError

        raise NotFoundError(f"site {site!r} has no meters" if site else "the database has no meters",
                            cli_hint=None if site else "auditor import FILE")
    bar = None
    if not ctx.quiet and sys.stderr.isatty():
        bar = click.progressbar(length=len(names), label="auditing", file=sys.stderr, show_pos=True, show_eta=True)
        bar.__enter__()
    done = [0]

    def progress(i: int, n: int) -> None:
        if bar is not None:
            bar.update(i - done[0])
            done[0] = i

    try:
        batch = audit_meters(ctx.store, names, tariff_for, workers=workers, progress=progress, **dates)
    finally:
        if bar is not None:
            bar.__exit__(None, None, None)
    if json_out:
        echo_json(batch.to_dict())
    else:
        if csv_out:
            write_batch_csv(batch.rows, csv_out)
        click.echo(batch_table(batch.rows))
        if csv_out:
            ctx.say(f"wrote {csv_out} ({len(batch.rows)} meters)")
    for f in batch.failed:
        click.echo(f"error: meter {f['meter']}: {f['error']}", err=True)
    if batch.internal_error:
        return 3
    return 1 if batch.failed else 0


commands = [audit_cmd]
