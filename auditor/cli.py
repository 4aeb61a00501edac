"""The ``auditor`` command line: parse → service → render a table or ``--json``.

Commands live in ``auditor/commands/`` (one module per area) and register on the group here;
what they share (the :class:`~auditor.commands.context.Context`, common options) lives there
too, so nothing imports this module back.

Grammar: a verb for each job (``import``, ``audit``, ``size``, ``report``, ``serve``,
``demo``) and a group for each noun (``meters``, ``sites``, ``scenarios``, ``bills``, ``db``);
a bare noun lists (``auditor meters``). DEVELOPERS.md has the whole table.

Exit codes:

* 0 — done (a bill check with findings is done too);
* 1 — an input was rejected or a check failed (a bad file, tariff, profile, site file, an
  unknown meter, a database that cannot be opened);
* 2 — a usage error: a bad or missing option, options that contradict each other, a bad
  setting such as an unknown time zone;
* 3 — an internal error, which is a bug (``AUDITOR_DEBUG=1`` shows the traceback);
* 130 — interrupted (Ctrl+C).

Start-up stays short: this module and the command modules import only click and the standard
library at the top; each command imports its services when it runs.
"""
from __future__ import annotations

import os
import sys

import click

from auditor import __version__
from auditor.commands.context import Context
from auditor.errors import AuditorError

EXIT_OK, EXIT_REJECTED, EXIT_USAGE, EXIT_BUG, EXIT_INTERRUPTED = 0, 1, 2, 3, 130


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.option("--db", "db_url", metavar="URL", envvar="AUDITOR_DB_URL",
              help="SQLAlchemy database URL (default: an SQLite file in the user's data directory; "
                   "env AUDITOR_DB_URL).")
@click.option("--quiet", "-q", is_flag=True,
              help="Print only what was asked for (tables, --json) and errors: no progress bars, "
                   "no line per imported file, no confirmations.")
@click.version_option(__version__, prog_name="auditor")
@click.pass_context
def group(ctx: click.Context, db_url: str | None, quiet: bool) -> None:
    """Power factor audit: import meter data, audit reactive charges, size correction."""
    ctx.obj = Context(db_url, quiet)


def _load_commands() -> None:
    from auditor.commands import register

    register(group)


def main(argv: list[str] | None = None) -> None:
    _load_commands()
    try:
        rv = group.main(args=argv, prog_name="auditor", standalone_mode=False)
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(EXIT_INTERRUPTED)
    except click.ClickException as exc:  # usage errors (exit 2) and click's own
        exc.show()
        sys.exit(exc.exit_code)
    except AuditorError as exc:
        hint = f" ({exc.cli_hint})" if getattr(exc, "cli_hint", None) else ""
        click.echo(f"error: {exc.message}{hint}", err=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        sys.exit(EXIT_INTERRUPTED)
    except Exception as exc:  # a bug: one line for the user, the traceback on request
        if os.environ.get("AUDITOR_DEBUG"):
            raise
        click.echo(f"internal error: {type(exc).__name__}: {exc} (set AUDITOR_DEBUG=1 for details)", err=True)
        sys.exit(EXIT_BUG)
    sys.exit(rv if isinstance(rv, int) else EXIT_OK)
