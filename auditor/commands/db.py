"""``auditor db``: the schema revision of the database, upgrades and downgrades."""
from __future__ import annotations

import click

from auditor.commands.context import Context, pass_ctx


@click.group("db")
def db_group():
    """Database schema: upgrade, downgrade, current revision; check a file."""


def _revision_line(d: dict) -> str:
    return f"{d['database']}: schema {d['before'] or 'empty'} → {d['after'] or 'empty'}"


@db_group.command("upgrade")
@click.argument("revision", default="head", required=False)
@click.option("--revision", "revision_option", metavar="REVISION", hidden=True,
              help="Old spelling of the REVISION argument; kept for scripts.")
@pass_ctx
def db_upgrade(ctx: Context, revision: str, revision_option: str | None):
    """Apply the migrations up to REVISION (default: head); creates the database if absent."""
    from auditor.services.database import upgrade_schema

    if revision_option is not None:
        if revision not in ("head", revision_option):
            raise click.UsageError("give the revision once (as an argument)")
        revision = revision_option
    done = upgrade_schema(ctx.db_url, revision)
    ctx.say(_revision_line(done))
    if done["pages_rewritten"]:
        ctx.say("rewrote the file with 16 KiB pages, so that a day's block of readings fits in a page")
    return 0


@db_group.command("downgrade")
@click.argument("revision")
@click.option("--yes", "-y", is_flag=True,
              help="Drop tables and columns that hold rows without asking (an SQLite file is still "
                   "copied first).")
@pass_ctx
def db_downgrade(ctx: Context, revision: str, yes: bool):
    """Revert the schema to REVISION ("base" empties it).

    An SQLite file is copied beside itself first (the copy is named). A downgrade that would
    drop tables or columns holding rows asks first on a terminal, and is refused (exit 2)
    without one unless --yes is given.
    """
    from auditor.services.database import downgrade_refusal, downgrade_schema, plan_downgrade

    allow = yes
    if not yes:
        plan = plan_downgrade(ctx.db_url, revision)
        if plan["lost"]:
            if not _interactive():
                raise downgrade_refusal(plan)
            click.echo(f"The downgrade of {plan['database']} to {revision} would delete:", err=True)
            for item in plan["lost"]:
                click.echo(f"  {item}", err=True)
            first = " (the file is copied first)" if plan["sqlite"] else ""
            if not click.confirm(f"Drop them{first}?", default=False, err=True):
                from auditor.errors import AuditorError

                raise AuditorError("downgrade cancelled; nothing was changed")
            allow = True
    d = downgrade_schema(ctx.db_url, revision, allow_loss=allow)
    if d["backup"]:
        ctx.say(f"copied the database file to {d['backup']} first")
    for item in d["lost"]:
        ctx.say(f"dropped {item}")
    ctx.say(_revision_line(d))
    return 0


def _interactive() -> bool:
    """A person at a terminal can answer a question (a script, cron or a pipe cannot)."""
    import sys

    return sys.stdin is not None and sys.stdin.isatty() and sys.stderr is not None and sys.stderr.isatty()


@db_group.command("current")
@pass_ctx
def db_current(ctx: Context):
    """Print the database URL (password hidden) and its schema revision."""
    from auditor.services.database import schema_status

    d = schema_status(ctx.db_url)
    note = "" if d["known"] else "; unknown to this version: a newer pf-auditor wrote it, upgrade pf-auditor"
    click.echo(f"{d['database']}: {d['revision'] or 'empty'} (head {d['head']}{note})")
    return 0


@db_group.command("check")
@pass_ctx
def db_check(ctx: Context):
    """Check an SQLite file page by page (SQLite's integrity check; reads only). Exit 1 when
    it is damaged."""
    from auditor.services.database import check_database

    d = check_database(ctx.db_url)
    if d["ok"]:
        click.echo(f"{d['database']}: ok")
        return 0
    from auditor.errors import StoreError

    raise StoreError(f"the database {d['database']} is damaged: " + "; ".join(d["problems"][:5]))


commands = [db_group]
