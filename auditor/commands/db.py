"""``auditor db``: the schema revision of the database, upgrades and downgrades."""
from __future__ import annotations

import click

from auditor.commands.context import Context, pass_ctx


@click.group("db")
def db_group():
    """Database schema: upgrade, downgrade, current revision."""


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
    ctx.say(_revision_line(upgrade_schema(ctx.db_url, revision)))
    return 0


@db_group.command("downgrade")
@click.argument("revision")
@pass_ctx
def db_downgrade(ctx: Context, revision: str):
    """Revert the schema to REVISION ("base" empties it)."""
    from auditor.services.database import downgrade_schema

    ctx.say(_revision_line(downgrade_schema(ctx.db_url, revision)))
    return 0


@db_group.command("current")
@pass_ctx
def db_current(ctx: Context):
    """Print the database URL (password hidden) and its schema revision."""
    from auditor.services.database import schema_status

    d = schema_status(ctx.db_url)
    click.echo(f"{d['database']}: {d['revision'] or 'empty'} (head {d['head']})")
    return 0


commands = [db_group]
