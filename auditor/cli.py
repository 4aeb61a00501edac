"""The ``auditor`` command line: parse → service → render a table or ``--json``.

Commands live in ``auditor/commands/`` (one module per area) and register on ``main``.
Exit codes: 0 success, 1 a rejected input or a failed check, 2 a usage error.
"""
from __future__ import annotations

import os
import sys

import click

from auditor import __version__
from auditor.errors import AuditorError


class Context:
    def __init__(self, db_url: str | None, quiet: bool):
        self.db_url = db_url
        self.quiet = quiet
        self._store = None

    @property
    def store(self):
        if self._store is None:
            from auditor.store import open_store

            self._store = open_store(self.db_url)
        return self._store


pass_ctx = click.make_pass_decorator(Context)


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.option("--db", "db_url", metavar="URL", envvar="AUDITOR_DB_URL",
              help="SQLAlchemy database URL (default: an SQLite file in the user's data directory; "
                   "env AUDITOR_DB_URL).")
@click.option("--quiet", "-q", is_flag=True, help="No progress bars.")
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
        sys.exit(130)
    except click.ClickException as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except AuditorError as exc:
        click.echo(f"error: {exc.message}", err=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        sys.exit(130)
    except Exception as exc:  # a bug: one line for the user, the traceback on request
        if os.environ.get("AUDITOR_DEBUG"):
            raise
        click.echo(f"internal error: {type(exc).__name__}: {exc} (set AUDITOR_DEBUG=1 for details)", err=True)
        sys.exit(3)
    sys.exit(rv if isinstance(rv, int) else 0)
