"""``auditor alerts`` (run the checks, list, mark seen, send the digest) and
``auditor meters set-tariff``."""
from __future__ import annotations

from pathlib import Path

import click

from auditor.commands.context import Context, pass_ctx
from auditor.render import echo_json, fmt

KIND_CHOICE = click.Choice(["projected_charge", "correction_loss", "leading_at_light_load", "data_stopped",
                            "data_quality", "multiplier_change"])


def _settings(path):
    from auditor.services.notify import load_settings

    return load_settings(path)


def _print_alert(a: dict) -> None:
    since = (a["since"] or "?")[:16].replace("T", " ")
    if since.endswith(" 00:00"):
        since = since[:10]
    money = f"  {fmt(a['money_per_month'], 0)} {a.get('currency') or ''}/month" if a["money_per_month"] is not None else ""
    click.echo(f"#{a['id']:<4} {a['state']:<8} {a['severity']:<8} {a['meter']}  {a['kind']}  since {since}{money}")
    click.echo(f"      {a['message']}")


@click.group("alerts", invoke_without_command=True)
@click.option("--as-of", "as_of", metavar="DATETIME",
              help="Judge as if it were this moment (ISO date or date-time; UTC unless it has an offset). Default: now.")
@click.option("--since", "since", type=click.DateTime(["%Y-%m-%d"]), metavar="DATE",
              help="List alerts that began on or after DATE, resolved ones included.")
@click.option("--meter", "meter", metavar="M", help="Only meter M.")
@click.option("--kind", "kind", type=KIND_CHOICE, help="Only alerts of this kind.")
@click.option("--no-check", is_flag=True, help="List the stored alerts without running the checks.")
@click.option("--settings", "settings_path", type=click.Path(dir_okay=False, path_type=Path),
              help="Monitoring settings TOML (default: $AUDITOR_ALERTS_SETTINGS or alerts.toml in the user's config folder).")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output.")
@click.pass_context
def alerts_group(cctx: click.Context, as_of, since, meter, kind, no_check, settings_path, json_out):
    """Run the monitoring checks and list the open alerts.

    \b
    Subcommands: seen (mark alerts seen), digest (send the digest by email and webhook).
    Exit code 0 whether or not there are alerts.
    """
    if cctx.invoked_subcommand is not None:
        cctx.meta["alerts_settings"] = settings_path
        return 0
    ctx: Context = cctx.find_object(Context)
    from auditor.services.alerts import evaluate, list_alerts

    run = None
    if not no_check:
        settings = _settings(settings_path)
        run = evaluate(ctx.store, as_of, [meter] if meter else None, settings.checks, trigger="command")
    elif as_of:
        raise click.UsageError("--as-of needs the checks (leave out --no-check)")
    states = None if since else ("new", "seen")
    alerts = list_alerts(ctx.store, states=states, meter=meter, since=since.date() if since else None, kind=kind)
    if json_out:
        doc = {"alerts": alerts}
        if run is not None:
            doc["run"] = run.to_dict()
        echo_json(doc)
        return 0
    if run is not None:
        click.echo(run.summary())
    if not alerts:
        click.echo("no alerts" + (" since " + since.date().isoformat() if since else " open"))
    for a in alerts:
        _print_alert(a)
    return 0


@alerts_group.command("seen")
@click.argument("ids", nargs=-1, type=int)
@click.option("--meter", "meter", metavar="M", help="Every new alert of meter M.")
@click.option("--all", "every", is_flag=True, help="Every new alert.")
@pass_ctx
def alerts_seen(ctx: Context, ids, meter, every):
    """Mark alerts seen (by id, by meter or all); they stay open until their cause ends."""
    from auditor.services.alerts import mark_seen

    n = mark_seen(ctx.store, list(ids), meter=meter, every=every)
    click.echo(f"{n} alert{'s' if n != 1 else ''} marked seen")
    return 0


@alerts_group.command("digest")
@click.option("--dry-run", is_flag=True, help="Show the digest and where it would go; send nothing.")
@click.option("--settings", "settings_path", type=click.Path(dir_okay=False, path_type=Path),
              help="Monitoring settings TOML (as for `auditor alerts`).")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output.")
@click.pass_context
def alerts_digest(cctx: click.Context, dry_run, settings_path, json_out):
    """Send the alerts not yet sent (and those resolved since) by email and webhook.

    Nothing is sent when nothing changed (unless [digest] always = true). Exit code 1 when a
    channel could not be reached; the alerts then go with the next digest.
    """
    ctx: Context = cctx.find_object(Context)
    from auditor.services.notify import send_digest

    settings = _settings(settings_path or cctx.meta.get("alerts_settings"))
    result = send_digest(ctx.store, settings, dry_run=dry_run)
    if json_out:
        echo_json(result)
        return 0
    if dry_run:
        for line in settings.describe():
            click.echo(line)
        click.echo("")
        click.echo(result["text"].rstrip())
        return 0
    if not result["sent"]:
        click.echo(f"nothing sent: {result.get('reason')} ({result['open']} open)")
        return 0
    click.echo(f"sent \"{result['subject']}\" by {', '.join(result['channels'])}")
    return 0


@click.command("set-tariff")
@click.argument("meter")
@click.argument("tariff", required=False)
@click.option("--billing-day", type=click.IntRange(1, 28), help="Day of month billing periods start (default: calendar months).")
@click.option("--clear", is_flag=True, help="Remove the meter's own tariff.")
@pass_ctx
def set_tariff_cmd(ctx: Context, meter, tariff, billing_day, clear):
    """Give meter METER its own tariff (a TOML file or a shipped example's name).

    Audits, the portfolio and the checks use it whenever no --tariff is given. The file is
    validated and its text kept: set it again after editing the file.
    """
    from auditor.services.meter_tariff import clear_meter_tariff, set_meter_tariff

    if clear:
        if tariff:
            raise click.UsageError("give either TARIFF or --clear")
        had = clear_meter_tariff(ctx.store, meter)
        click.echo(f"meter {meter}: own tariff removed" if had else f"meter {meter} had no tariff of its own")
        return 0
    if not tariff:
        raise click.UsageError("give the tariff file (or a shipped example's name), or --clear")
    own = set_meter_tariff(ctx.store, meter, tariff, billing_day)
    cycle = f", billing periods from day {own.billing_day}" if own.billing_day else ", calendar months"
    click.echo(f"meter {meter}: tariff {own.tariff.name!r} ({own.source_name}){cycle}")
    return 0


commands = [alerts_group]
#: commands this module adds to another module's noun group
subcommands = [("meters", set_tariff_cmd)]
