"""``auditor import``: meter exports into the database (files, or an inbox folder)."""
from __future__ import annotations

import sys
from pathlib import Path

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import json_option, timezone_option
from auditor.errors import cli_text
from auditor.render import echo_json


def _progress_wanted(ctx: Context) -> bool:
    return not ctx.quiet and sys.stderr.isatty()


@click.command("import")
@click.argument("paths", nargs=-1, type=click.Path(path_type=Path))
@click.option("--site", metavar="NAME", help='Site for meters not yet known (default "default").')
@timezone_option("IANA time zone for timestamps without a UTC offset, and of a new site (default UTC).")
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
@click.option("--inbox", type=click.Path(file_okay=False, path_type=Path), metavar="DIR",
              help="Process every file in DIR, moving each to DIR/done or DIR/rejected.")
@click.option("--wait", "wait_seconds", type=click.FloatRange(0, 86400), default=0, show_default=True,
              help="With --inbox: seconds to wait for another run's lock before giving up.")
@json_option
@pass_ctx
def import_cmd(ctx: Context, paths, site, tz, profile, estimate_gaps, strict, dry_run, force, move, max_kw,
               inbox, wait_seconds, json_out):
    """Import meter exports (plain CSV, day-per-row CSV, or any CSV through --profile)."""
    from auditor.services.ingest import ImportOptions

    if inbox is not None and paths:
        raise click.UsageError("give either --inbox DIR or files, not both")
    if inbox is None and not paths:
        raise click.UsageError("give at least one file to import (or --inbox DIR)")
    options = ImportOptions(site=site, timezone=tz, profile_path=str(profile) if profile else None,
                            estimate_gaps=estimate_gaps, strict=strict, dry_run=dry_run, force=force, move=move,
                            max_kw=max_kw)
    if inbox is not None:
        from auditor.services.inbox import run_inbox

        result = run_inbox(ctx.store, inbox, options, wait_seconds=wait_seconds)
        files = result["files"]
        checks = _checks_after(ctx, files, options)
        if checks:
            result["checks"] = checks
        if json_out:
            echo_json(result)
        else:
            _print_outcomes(ctx, files, result.get("message"))
            for skipped in result.get("skipped", []):
                if isinstance(skipped, dict):
                    skipped = f"{skipped.get('path', '')} ({skipped.get('reason', '')})"
                ctx.say(f"skipped   {skipped}")
            _print_checks(ctx, checks)
        return 1 if any(f["status"] in ("rejected", "older") for f in files) else 0
    from auditor.services.ingest import import_files

    store = ctx.store
    outcomes = []
    for p in paths:
        bar = None
        if _progress_wanted(ctx) and not json_out and p.is_file() and p.stat().st_size > 5_000_000:
            approx_rows = max(1, p.stat().st_size // 60)
            bar = click.progressbar(length=approx_rows, label=f"importing {p.name}", file=sys.stderr)
            bar.__enter__()
        try:
            outcomes.extend(import_files(store, [p], options, bar.update if bar else None))
        finally:
            if bar is not None:
                bar.__exit__(None, None, None)
    files = [o.as_dict() for o in outcomes]
    checks = _checks_after(ctx, files, options)
    if json_out:
        echo_json({"files": files, **({"checks": checks} if checks else {})})
    else:
        _print_outcomes(ctx, files)
        _print_checks(ctx, checks)
    return 1 if any(o.status in ("rejected", "older") for o in outcomes) else 0


def _checks_after(ctx: Context, files: list[dict], options) -> dict | None:
    """The monitoring checks for the meters just imported (auditor.services.alerts)."""
    if options.dry_run:
        return None
    from auditor.services.alerts import checks_after_import

    return checks_after_import(ctx.store, files)


def _print_checks(ctx: Context, checks: dict | None) -> None:
    if checks:
        ctx.say(f"checks: {checks.get('summary') or 'not run: ' + checks.get('error', '')}"
                + (" (auditor alerts lists them)" if checks.get("raised") else ""))


def _print_outcomes(ctx: Context, files: list[dict], message: str | None = None) -> None:
    """One line per file with its warnings; with ``--quiet`` only the rejected files and their
    errors (on stderr)."""
    if message:
        ctx.say(message)
    for f in files:
        rejected = f["status"] in ("rejected", "older")  # an older file changed nothing: said like a rejection
        line = f"{f['status']:<9} {f['path']}"
        if f.get("rows"):
            line += f"  ({f['rows']:,} rows"
            line += f", {f['format']})" if f.get("format") else ")"
        if rejected:
            click.echo(line, err=ctx.quiet)
        else:
            ctx.say(line)
        if f.get("message") and not rejected:
            ctx.say(f"          {cli_text(f['message'], f.get('cli_hint'))}")
        for e in f.get("errors", [])[:20]:
            where = ", ".join(x for x in (f"line {e['line']}" if e.get("line") else "",
                                          f"column {e['column']!r}" if e.get("column") else "") if x)
            click.echo(f"          error: {where + ': ' if where else ''}{cli_text(e['message'], e.get('cli_hint'))}",
                       err=True)
        warnings = f.get("warnings", [])
        for w in warnings[:10]:
            where = f"line {w['line']}: " if w.get("line") else ""
            ctx.say(f"          warning: {where}{cli_text(w['message'], w.get('cli_hint'))}")
        if len(warnings) > 10:
            ctx.say(f"          … {len(warnings) - 10} more warning(s) (see --json)")


commands = [import_cmd]
