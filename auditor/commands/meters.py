"""``auditor meters`` and ``auditor sites``: what is stored, the meter multiplier, site facts."""
from __future__ import annotations

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import NounGroup, json_option, timezone_option, wide_option
from auditor.render import echo_json, local_time, table

#: Column headings of the data span: both ends are instants, the end exclusive (the end of the
#: last interval), as in the JSON keys ``first`` and ``last``.
SPAN_HEADERS = ("data from", "data until")


@click.group("meters", cls=NounGroup)
def meters_group():
    """Meters: list them (the default) and set their CT × VT multiplier."""


def meters_table(meters: list[dict], wide: bool = False) -> str:
    """Meters with their data span in each site's local time (zone named on every time);
    ``wide`` adds the time zone, interval length, multiplier and interval count."""
    headers = ["meter", "site", "timezone", *SPAN_HEADERS, "minutes", "multiplier", "intervals", "coverage %"]
    detail = [False, False, True, False, False, True, True, False, False]
    rows = [[m["meter"], m["site"], m["timezone"], local_time(m["first"], m["timezone"]),
             local_time(m["last"], m["timezone"]), m.get("interval_minutes"), m.get("multiplier"),
             m["intervals"], None if m["coverage"] is None else 100 * m["coverage"]] for m in meters]
    return table(headers, rows, [0, 0, 0, 0, 0, 0, 3, 0, 2], detail=detail, wide=wide)


@meters_group.command("list")
@wide_option
@json_option
@pass_ctx
def meters_list(ctx: Context, wide: bool, json_out: bool):
    """List meters with their data span (from the first interval's start until the last
    interval's end) and coverage."""
    from auditor.services.meters import list_meters

    meters = list_meters(ctx.store)
    if json_out:
        echo_json({"meters": meters})
        return 0
    if not meters:
        click.echo("no meters yet: auditor import FILE")
        return 0
    click.echo(meters_table(meters, wide))
    return 0


@meters_group.command("set-multiplier")
@click.argument("meter", metavar="M")
@click.argument("value", type=click.FloatRange(min=0, min_open=True), metavar="VALUE")
@pass_ctx
def meters_set_multiplier(ctx: Context, meter: str, value: float):
    """Set meter M's CT × VT multiplier to VALUE (applied when its readings are read, so a wrong
    multiplier is corrected without re-importing)."""
    from auditor.services.meters import set_multiplier

    set_multiplier(ctx.store, meter, value)
    ctx.say(f"meter {meter}: multiplier {value:g}")
    return 0


@click.command("multiplier", hidden=True)
@click.option("--meter", required=True, metavar="M", help="Meter id as imported.")
@click.argument("value", type=click.FloatRange(min=0, min_open=True), metavar="VALUE")
@click.pass_context
def multiplier_alias(click_ctx: click.Context, meter: str, value: float):
    """Old spelling of ``meters set-multiplier M VALUE``; kept for scripts."""
    return click_ctx.invoke(meters_set_multiplier, meter=meter, value=value)


@click.group("sites", cls=NounGroup)
def sites_group():
    """Sites: time zone, nominal voltage and the supply transformer (for screening)."""


@sites_group.command("list")
@json_option
@pass_ctx
def sites_list(ctx: Context, json_out: bool):
    """List sites and their meters."""
    from auditor.services.meters import list_sites

    sites = list_sites(ctx.store)
    if json_out:
        echo_json({"sites": sites})
        return 0
    click.echo(table(["site", "timezone", "voltage V", "transformer kVA", "impedance %", "meters"],
                     [[x["site"], x["timezone"], x["nominal_voltage_v"], x["transformer_kva"],
                       x["transformer_impedance_percent"], " ".join(x["meters"])] for x in sites]))
    return 0


def _site_line(site: dict) -> str:
    return f"site {site['site']}: {site['timezone']}, meters {' '.join(site['meters']) or '-'}"


@sites_group.command("set")
@click.argument("name")
@timezone_option("IANA time zone the site is billed in.")
@click.option("--voltage", "nominal_voltage_v", type=float, metavar="V", help="Nominal voltage, V.")
@click.option("--transformer-kva", type=float, metavar="KVA", help="Supply transformer rating, kVA.")
@click.option("--impedance", "transformer_impedance_percent", type=float, metavar="PCT",
              help="Transformer impedance, %.")
@click.option("--meter", "meters", multiple=True, metavar="M", help="Put meter M on this site (repeatable).")
@pass_ctx
def sites_set(ctx: Context, name, meters, tz, **values):
    """Create or update site NAME."""
    from auditor.services.meters import set_site

    ctx.say(_site_line(set_site(ctx.store, name, list(meters), timezone=tz, **values)))
    return 0


@sites_group.command("load")
@click.argument("path", type=click.Path(exists=True, dir_okay=False), metavar="FILE")
@pass_ctx
def sites_load(ctx: Context, path):
    """Create or update sites from a TOML FILE of [[site]] tables."""
    from auditor.services.meters import load_sites_file

    for site in load_sites_file(ctx.store, path):
        ctx.say(_site_line(site))
    return 0


commands = [meters_group, multiplier_alias, sites_group]
