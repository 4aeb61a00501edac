"""``auditor import``, ``auditor meters``, ``auditor db``."""
from __future__ import annotations

import sys
from pathlib import Path

import click

from auditor.cli import Context, pass_ctx
from auditor.ingest.pipeline import ImportOptions
from auditor.render import echo_json, table


def _progress_wanted(ctx: Context, json_out: bool) -> bool:
    return not ctx.quiet and sys.stderr.isatty()


@click.command("import")
@click.argument("paths", nargs=-1, type=click.Path(path_type=Path))
@click.option("--site", metavar="NAME", help='Site for meters not yet known (default "default").')
@click.option("--timezone", "tz", metavar="TZ",
              help="IANA time zone for timestamps without a UTC offset, and of a new site (default UTC).")
@click.option("--profile", "profile", type=click.Path(dir_okay=False, path_type=Path),
              help="TOML mapping profile for a CSV of another layout.")
@click.option("--estimate-gaps", is_flag=True, help="Fill missing intervals; filled values are flagged.")
@click.option("--strict", is_flag=True, help="Reject files with spikes or duplicate rows instead of flagging them.")
@click.option("--dry-run", is_flag=True, help="Read and validate only; write nothing.")
@click.option("--force", is_flag=True,
              help="Apply a file older than the stored data, and values later imports had replaced.")
@click.option("--move", is_flag=True, help="With --site: move meters already on another site to it.")
@click.option("--max-kw", type=float, metavar="KW",
              help="Plausible maximum average power of the file's meters (kept for later imports; "
                   "default 2,000,000 kW).")
@click.option("--inbox", type=click.Path(file_okay=False, path_type=Path),
              help="Process every file in DIR, moving each to DIR/done or DIR/rejected.")
@click.option("--wait", "wait_seconds", type=click.FloatRange(0, 86400), default=0, show_default=True,
              help="With --inbox: seconds to wait for another run's lock before giving up.")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output.")
@pass_ctx
def import_cmd(ctx: Context, paths, site, tz, profile, estimate_gaps, strict, dry_run, force, move, max_kw,
               inbox, wait_seconds, json_out):
    """Import meter exports (plain CSV, day-per-row CSV, or any CSV through --profile)."""
    options = ImportOptions(site=site, timezone=tz, profile_path=str(profile) if profile else None,
                            estimate_gaps=estimate_gaps, strict=strict, dry_run=dry_run, force=force, move=move,
                            max_kw=max_kw)
    if inbox is not None:
        from auditor.services.inbox import run_inbox

        if paths:
            raise click.UsageError("give either --inbox DIR or files, not both")
        result = run_inbox(ctx.store, inbox, options, wait_seconds=wait_seconds)
        files = result["files"]
        if json_out:
            echo_json(result)
        else:
            _print_outcomes(files, result.get("message"))
            for skipped in result.get("skipped", []):
                if isinstance(skipped, dict):
                    skipped = f"{skipped.get('path', '')} ({skipped.get('reason', '')})"
                click.echo(f"skipped   {skipped}")
        return 1 if any(f["status"] in ("rejected", "older") for f in files) else 0
    if not paths:
        raise click.UsageError("give at least one file to import (or --inbox DIR)")
    from auditor.services.ingest import import_files

    store = ctx.store
    outcomes = []
    for p in paths:
        bar = None
        if _progress_wanted(ctx, json_out) and p.is_file() and p.stat().st_size > 5_000_000:
            approx_rows = max(1, p.stat().st_size // 60)
            bar = click.progressbar(length=approx_rows, label=f"importing {p.name}", file=sys.stderr)
            bar.__enter__()
        try:
            outcomes.extend(import_files(store, [p], options, bar.update if bar else None))
        finally:
            if bar is not None:
                bar.__exit__(None, None, None)
    files = [o.as_dict() for o in outcomes]
    if json_out:
        echo_json({"files": files})
    else:
        _print_outcomes(files)
    return 1 if any(o.status in ("rejected", "older") for o in outcomes) else 0


def _print_outcomes(files: list[dict], message: str | None = None) -> None:
    if message:
        click.echo(message)
    for f in files:
        line = f"{f['status']:<9} {f['path']}"
        if f.get("rows"):
            line += f"  ({f['rows']:,} rows"
            line += f", {f['format']})" if f.get("format") else ")"
        click.echo(line)
        if f.get("message") and f["status"] not in ("rejected", "older"):
            click.echo(f"          {f['message']}")
        for e in f.get("errors", [])[:20]:
            where = ", ".join(x for x in (f"line {e['line']}" if e.get("line") else "",
                                          f"column {e['column']!r}" if e.get("column") else "") if x)
            click.echo(f"          error: {where + ': ' if where else ''}{e['message']}", err=True)
        warnings = f.get("warnings", [])
        for w in warnings[:10]:
            where = f"line {w['line']}: " if w.get("line") else ""
            click.echo(f"          warning: {where}{w['message']}")
        if len(warnings) > 10:
            click.echo(f"          … {len(warnings) - 10} more warning(s) (see --json)")


@click.command("meters")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output.")
@pass_ctx
def meters_cmd(ctx: Context, json_out: bool):
    """List meters with their data span and coverage."""
    from auditor.services.ingest import list_meters

    meters = list_meters(ctx.store)
    if json_out:
        echo_json({"meters": meters})
        return 0
    if not meters:
        click.echo("no meters yet: auditor import FILE")
        return 0
    click.echo(table(["meter", "site", "timezone", "first", "last", "intervals", "coverage %"],
                     [[m["meter"], m["site"], m["timezone"], m["first"] or "-", m["last"] or "-",
                       m["intervals"], None if m["coverage"] is None else 100 * m["coverage"]] for m in meters]))
    return 0


@click.group("db")
def db_group():
    """Database schema: upgrade, downgrade, current revision."""


@db_group.command("upgrade")
@click.option("--revision", default="head", show_default=True)
@pass_ctx
def db_upgrade(ctx: Context, revision: str):
    """Apply the migrations up to REVISION (creates the database if absent)."""
    from auditor.store import open_store
    from auditor.store.engine import safe_url

    store = open_store(ctx.db_url, upgrade=False)
    before = store.current_revision()
    store.upgrade(revision)
    click.echo(f"{safe_url(store.url)}: schema {before or 'empty'} → {store.current_revision()}")
    return 0


@db_group.command("downgrade")
@click.argument("revision")
@pass_ctx
def db_downgrade(ctx: Context, revision: str):
    """Revert the schema to REVISION ("base" empties it)."""
    from auditor.store import open_store

    store = open_store(ctx.db_url, upgrade=False)
    store.downgrade(revision)
    click.echo(f"schema now at {store.current_revision() or 'base'}")
    return 0


@db_group.command("current")
@pass_ctx
def db_current(ctx: Context):
    """Print the database URL (password hidden) and its schema revision."""
    from auditor.store import open_store
    from auditor.store.engine import safe_url

    store = open_store(ctx.db_url, upgrade=False)
    click.echo(f"{safe_url(store.url)}: {store.current_revision() or 'empty'} (head {store.head_revision()})")
    return 0


@click.group("sites")
def sites_group():
    """Sites: time zone, nominal voltage and the supply transformer (for screening)."""


@sites_group.command("list")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output.")
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


@sites_group.command("set")
@click.argument("name")
@click.option("--timezone", "timezone", metavar="TZ", help="IANA time zone the site is billed in.")
@click.option("--voltage", "nominal_voltage_v", type=float, help="Nominal voltage, V.")
@click.option("--transformer-kva", type=float, help="Supply transformer rating, kVA.")
@click.option("--impedance", "transformer_impedance_percent", type=float, help="Transformer impedance, %.")
@click.option("--meter", "meters", multiple=True, metavar="M", help="Put meter M on this site (repeatable).")
@pass_ctx
def sites_set(ctx: Context, name, meters, **values):
    """Create or update site NAME."""
    from auditor.services.meters import set_site

    site = set_site(ctx.store, name, list(meters), **values)
    click.echo(f"site {site['site']}: {site['timezone']}, meters {' '.join(site['meters']) or '-'}")
    return 0


@sites_group.command("load")
@click.argument("path", type=click.Path(exists=True, dir_okay=False))
@pass_ctx
def sites_load(ctx: Context, path):
    """Create or update sites from a TOML file of [[site]] tables."""
    from auditor.services.meters import load_sites_file

    for site in load_sites_file(ctx.store, path):
        click.echo(f"site {site['site']}: {site['timezone']}, meters {' '.join(site['meters']) or '-'}")
    return 0


@click.command("multiplier")
@click.option("--meter", required=True, metavar="M")
@click.argument("value", type=float)
@pass_ctx
def multiplier_cmd(ctx: Context, meter: str, value: float):
    """Set meter M's CT × VT multiplier (applied when its readings are read)."""
    from auditor.services.meters import set_multiplier

    set_multiplier(ctx.store, meter, value)
    click.echo(f"meter {meter}: multiplier {value:g}")
    return 0


commands = [import_cmd, meters_cmd, db_group, sites_group, multiplier_cmd]
