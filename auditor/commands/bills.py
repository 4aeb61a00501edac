"""``auditor bills``: import utility bills, list them, check them, write a billing query."""
from __future__ import annotations

from pathlib import Path

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import NounGroup, json_option, meter_option, tariff_option
from auditor.render import echo_json, fmt, table

_FIELDS = ("kwh", "kvarh", "peak_kw", "peak_kva", "pf", "reactive_charge", "total")


@click.group("bills", cls=NounGroup)
def bills_group():
    """Utility bills: import, list, check against the interval data, dispute."""


@bills_group.command("import")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--profile", type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="Bill profile (TOML) for a layout other than the bill CSV contract.")
@json_option
@pass_ctx
def import_cmd(ctx: Context, file: Path, profile: Path | None, json_out: bool):
    """Import a bills CSV (meter,period_start,period_end,kwh,kvarh,peak_kw,peak_kva,pf,reactive_charge,total)."""
    from auditor.services.bills import import_bills

    res = import_bills(ctx.store, file, profile)
    if json_out:
        echo_json(res)
        return 0
    ctx.say(f"{res['status']:<9} {file.name}: {res['message']}")
    for w in res["warnings"]:
        ctx.say(f"warning: {w}")
    return 0


@bills_group.command("list")
@meter_option("Only this meter's bills.", required=False)
@json_option
@pass_ctx
def list_cmd(ctx: Context, meter: str | None, json_out: bool):
    """The stored bills."""
    from auditor.services.bills import list_bills

    rows = list_bills(ctx.store, meter)
    if json_out:
        echo_json(rows)
        return 0
    if not rows:
        click.echo("no bills stored (auditor bills import FILE)")
        return 0
    click.echo(table(["meter", "from", "to", "kWh", "kvarh", "peak kW", "peak kVA", "PF", "reactive", "total", "source"],
                     [[r["meter"], r["period_start"], r["period_end"], *[r[f] for f in _FIELDS],
                       f"{r['source']}" + (f":{r['line']}" if r["line"] else "")] for r in rows]))
    return 0


def _tolerance_options(f):
    opts = [
        click.option("--tolerance-energy", type=click.FloatRange(min=0), metavar="PCT",
                     help="Energy tolerance in % (default 0.5)."),
        click.option("--tolerance-demand", type=click.FloatRange(min=0), metavar="PCT",
                     help="Demand tolerance in % (default 1)."),
        click.option("--tolerance-pf", type=click.FloatRange(min=0, max=1), metavar="PF",
                     help="Power factor tolerance, absolute (default 0.01)."),
        click.option("--tolerance-charge", type=click.FloatRange(min=0), metavar="PCT",
                     help="Charge tolerance in % (default 1) ..."),
        click.option("--tolerance-charge-abs", type=click.FloatRange(min=0), metavar="AMOUNT",
                     help="... or this many currency units, whichever is larger (default 1)."),
    ]
    for o in reversed(opts):
        f = o(f)
    return f


def _tolerances(kw: dict):
    from auditor.bills import with_tolerances

    return with_tolerances(energy_percent=kw.get("tolerance_energy"), demand_percent=kw.get("tolerance_demand"),
                           pf=kw.get("tolerance_pf"), charge_percent=kw.get("tolerance_charge"),
                           charge_abs=kw.get("tolerance_charge_abs"))


def check_text(d: dict) -> str:
    cur = d["currency"]
    out = [f"Bills of meter {d['meter']} ({d['site']}) against tariff {d['tariff']!r}"]
    out.append(table(["from", "to", "status", "coverage %", "findings", "causes", f"in question {cur}"],
                     [[b["period_start"], b["period_end"], b["status"],
                       None if b["coverage"] is None else 100 * b["coverage"], b["findings"],
                       ", ".join(b["causes"]) or "-", b["disputable"]] for b in d["bills"]]))
    if d["findings"]:
        out.append("")
        out.append(table(["from", "field", "billed", "expected", "difference", "severity", "cause", f"money {cur}"],
                         [[f["period_start"], f["field"], f["billed"], f["expected"], f["difference"], f["severity"],
                           f["cause"] or "unexplained", f["money"]] for f in d["findings"]], digits=3))
        seen = set()
        for f in d["findings"]:
            key = (f["period_start"], f["cause"])
            if key not in seen:
                seen.add(key)
                out.append(f"  {f['period_start']}: {f['explanation']}")
    else:
        out.append("\nNo difference beyond tolerance.")
    out.append(f"\nTotal in question: {fmt(d['total_disputable'])} {cur}")
    out += [f"warning: {w}" for w in d["warnings"]]
    return "\n".join(out)


@bills_group.command("check")
@meter_option()
@tariff_option()
@_tolerance_options
@json_option
@pass_ctx
def check_cmd(ctx: Context, meter: str, tariff: str, json_out: bool, **kw):
    """Compare every bill of a meter with the same period computed from its data and the tariff.

    Exits 0 even when there are findings.
    """
    from auditor.services.bills import check_bills

    d = check_bills(ctx.store, meter, tariff, _tolerances(kw))
    if json_out:
        echo_json(d)
    else:
        click.echo(check_text(d))
    return 0


@bills_group.command("dispute")
@meter_option()
@tariff_option()
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Output file: .txt for plain text, .html for HTML.")
@_tolerance_options
@pass_ctx
def dispute_cmd(ctx: Context, meter: str, tariff: str, out: Path, **kw):
    """Write a billing-query summary of the check (plain text or HTML, by the file's extension)."""
    from auditor.errors import UsageError
    from auditor.services.bills import check_bills, dispute_summary

    ext = out.suffix.lower()
    if ext not in (".txt", ".html", ".htm"):
        raise click.BadParameter(f"{out.name}: use a .txt or .html file name", param_hint="--out")
    d = check_bills(ctx.store, meter, tariff, _tolerances(kw))
    text = dispute_summary(d, "text" if ext == ".txt" else "html")
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise UsageError(f"cannot write {out}: {exc.strerror or exc}") from None
    ctx.say(f"wrote {out} ({len(d['findings'])} findings, {fmt(d['total_disputable'])} {d['currency']} in question)")
    return 0


commands = [bills_group]
