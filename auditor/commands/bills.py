"""``auditor bills``: import utility bills, list them, check them, write a billing query."""
from __future__ import annotations

from pathlib import Path

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import (
    NounGroup,
    json_option,
    meter_option,
    tariff_option,
    wide_option,
)
from auditor.render import echo_json, fmt, local_time, table, wrap

#: The bill figures as the tables name them, with their decimals (money to the cent); the same
#: decimals as ``auditor.bills.FIELD_DIGITS`` (kept here so that ``--help`` loads no numpy).
FIELD_HEADS = {"kwh": ("kWh", 0), "kvarh": ("kvarh", 0), "peak_kw": ("peak kW", 2), "peak_kva": ("peak kVA", 2),
               "pf": ("PF", 3), "reactive_charge": ("reactive", 2), "total": ("total", 2)}
_FIELDS = tuple(FIELD_HEADS)


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
    """Import a bills CSV (meter,period_start,period_end,kwh,kvarh,peak_kw,peak_kva,pf,reactive_charge,total,
    account,invoice)."""
    from auditor.services.bills import import_bills

    res = import_bills(ctx.store, file, profile)
    if json_out:
        echo_json(res)
        return 0
    ctx.say(f"{res['status']:<9} {file.name}: {res['message']}")
    for w in res["warnings"]:
        ctx.say(f"warning: {w}")
    return 0


def bills_table(rows: list[dict], wide: bool = False) -> str:
    """Stored bills: meter, account and invoice numbers, period, the billed figures; ``wide``
    adds kvarh, peak kVA and the source file and line."""
    detail_fields = ("kvarh", "peak_kva")
    headers = ["meter", "account", "invoice", "from", "to", *[FIELD_HEADS[f][0] for f in _FIELDS], "source"]
    digits = [0, 0, 0, 0, 0, *[FIELD_HEADS[f][1] for f in _FIELDS], 0]
    detail = [False] * 5 + [f in detail_fields for f in _FIELDS] + [True]
    body = [[r["meter"], r.get("account") or "-", r.get("invoice") or "-", r["period_start"], r["period_end"],
             *[r[f] for f in _FIELDS], f"{r['source']}" + (f":{r['line']}" if r["line"] else "")] for r in rows]
    return table(headers, body, digits, detail=detail, wide=wide)


@bills_group.command("list")
@meter_option("Only this meter's bills.", required=False)
@wide_option
@json_option
@pass_ctx
def list_cmd(ctx: Context, meter: str | None, wide: bool, json_out: bool):
    """The stored bills (money in the tariff's currency, to the cent)."""
    from auditor.services.bills import list_bills

    rows = list_bills(ctx.store, meter)
    if json_out:
        echo_json(rows)
        return 0
    if not rows:
        click.echo("no bills stored (auditor bills import FILE)")
        return 0
    click.echo(bills_table(rows, wide))
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


def _figure(field: str, value) -> str:
    return fmt(value, FIELD_HEADS.get(field, ("", 2))[1])


def check_text(d: dict, wide: bool = False) -> str:
    """The bill check as text: one row per bill (its causes by the same names as the findings),
    then the findings (a peak with the local time of the computed peak), each cause explained.
    ``wide`` adds the account, the number of findings, the severity, the tolerance and the
    period ends."""
    cur = d["currency"]
    tz = d.get("timezone")
    accounts = sorted({b["account"] for b in d["bills"] if b.get("account")})
    out = [wrap(f"Bills of meter {d['meter']} ({d['site']})"
                + (f", account {', '.join(accounts)}" if accounts else "")
                + f" against tariff {d['tariff']!r}; money in {cur}" + (f", times local ({tz})" if tz else ""))]
    out.append(table(["from", "to", "account", "invoice", "status", "coverage %", "findings", "causes",
                      f"in question {cur}"],
                     [[b["period_start"], b["period_end"], b.get("account") or "-", b.get("invoice") or "-",
                       b["status"].replace("_", " "), None if b["coverage"] is None else 100 * b["coverage"],
                       b["findings"], ", ".join(b.get("cause_labels") or []) or "-", b["disputable"]]
                      for b in d["bills"]],
                     [0, 0, 0, 0, 0, 1, 0, 0, 2], detail=[False, False, True, False, False, False, True, False, False],
                     wide=wide))
    if d["findings"]:
        peaks = any(f.get("expected_at") for f in d["findings"])
        out.append("")
        out.append(table(["from", "to", "field", "billed", "expected", "computed peak at", "difference",
                          "tolerance", "severity", "cause", f"money {cur}"],
                         [[f["period_start"], f["period_end"], f["field"], _figure(f["field"], f["billed"]),
                           _figure(f["field"], f["expected"]), local_time(f["expected_at"], tz) if f.get("expected_at")
                           else "", _figure(f["field"], f["difference"]), _figure(f["field"], f["tolerance"]),
                           f["severity"], f.get("cause_label") or f["cause"] or "unexplained", f["money"]]
                          for f in d["findings"]],
                         [0] * 10 + [2], detail=[False, True, False, False, False, not peaks, False, True, True, False,
                                                 False],
                         right=[False, False, False, True, True, False, True, True, False, False, True], wide=wide))
        seen = set()
        for f in d["findings"]:
            key = (f["period_start"], f["cause"])
            if key not in seen:
                seen.add(key)
                label = f.get("cause_label") or f["cause"] or "unexplained"
                out.append(wrap(f"{f['period_start']}, {label}: {f['explanation']}", "  "))
    else:
        out.append("\nNo difference beyond tolerance.")
    out.append(f"\nTotal in question: {fmt(d['total_disputable'])} {cur}")
    out += [wrap(f"warning: {w}") for w in d["warnings"]]
    return "\n".join(out)


@bills_group.command("check")
@meter_option()
@tariff_option()
@_tolerance_options
@wide_option
@json_option
@pass_ctx
def check_cmd(ctx: Context, meter: str, tariff: str, wide: bool, json_out: bool, **kw):
    """Compare every bill of a meter with the same period computed from its data and the tariff.

    Exits 0 even when there are findings.
    """
    from auditor.services.bills import check_bills

    d = check_bills(ctx.store, meter, tariff, _tolerances(kw))
    if json_out:
        echo_json(d)
    else:
        click.echo(check_text(d, wide))
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
