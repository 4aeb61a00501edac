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
  unknown meter, a database that cannot be opened or is damaged, a file that cannot be read
  or written, output closed early by its reader);
* 2 — a usage error: a bad or missing option, options that contradict each other, a bad
  setting such as an unknown time zone, a database driver that is not installed, a database
  written by a newer version, a downgrade that would drop data without ``--yes``;
* 3 — an internal error, which is a bug: one line names the crash log holding the traceback
  (``auditor/commands/crash.py``: the per-user log directory); ``AUDITOR_DEBUG=1`` shows the
  traceback instead;
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
from auditor.errors import AuditorError, cli_text

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
    ctx.call_on_close(ctx.obj.close)  # the store's connections closed when the command ends


def _load_commands() -> None:
    from auditor.commands import register

    register(group)


def main(argv: list[str] | None = None) -> None:
    try:
        _main(list(sys.argv[1:] if argv is None else argv))
    finally:
        if argv is None:  # this process runs one command and ends
            _leave_objects_to_exit()


def _leave_objects_to_exit() -> None:
    """Spare the interpreter's last garbage collections over the modules a command loaded.

    At exit Python collects garbage over every object still alive; with pandas, numpy and
    SQLAlchemy loaded that alone costs about 0.3 s on every command, more than the work of
    many. ``gc.freeze`` moves those objects out of the collector's sight; their memory goes
    back with the process, and what needed closing was closed when the command ended (the
    store's connections: :meth:`Context.close`). Only for the process's own command line: a
    caller of :func:`main` with its own arguments (a test) keeps its collector as it was.
    """
    import gc

    gc.freeze()


def _main(args: list[str]) -> None:
    _load_commands()
    try:
        rv = group.main(args=args, prog_name="auditor", standalone_mode=False)
        sys.stdout.flush()  # a closed pipe shows here, not in Python's own exit
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(EXIT_INTERRUPTED)
    except click.ClickException as exc:  # usage errors (exit 2) and click's own
        exc.show()
        sys.exit(exc.exit_code)
    except AuditorError as exc:
        click.echo(f"error: {cli_text(exc.message, getattr(exc, 'cli_hint', None))}", err=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        sys.exit(EXIT_INTERRUPTED)
    except BrokenPipeError:
        _output_closed()
    except OSError as exc:
        if not _users_file(exc) or os.environ.get("AUDITOR_DEBUG"):
            _bug(exc, args)
        # a file the command was given or writes (a folder instead of a file, no permission,
        # a full disk): the user's to fix, not a bug
        click.echo(f"error: {exc.filename}: {exc.strerror or exc}", err=True)
        sys.exit(EXIT_REJECTED)
    except Exception as exc:
        _bug(exc, args)
    sys.exit(rv if isinstance(rv, int) else EXIT_OK)


def _users_file(exc: OSError) -> bool:
    """An OSError about a file of the user's (not one of the program's own files)."""
    if exc.filename is None:
        return False
    own = os.path.dirname(os.path.abspath(__file__))
    try:
        return not os.path.abspath(os.fsdecode(exc.filename)).startswith(own + os.sep)
    except (TypeError, ValueError):
        return False


def _output_closed() -> None:
    """The reader of our output went away (``auditor meters | head``): stop quietly, exit 1.
    Python would complain once more when flushing stdout at exit, so point it at /dev/null."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass
    sys.exit(EXIT_REJECTED)


def _bug(exc: BaseException, args: list[str]) -> None:
    """A bug: one line on screen naming the crash log that holds the traceback; exit 3.
    ``AUDITOR_DEBUG=1`` raises instead, traceback and all."""
    if os.environ.get("AUDITOR_DEBUG"):
        raise exc
    from auditor.commands.crash import one_line, write_crash_log

    path, why = write_crash_log(exc, args)
    where = (f"the details are in {path}" if path else
             f"the details could not be saved ({why}); AUDITOR_DEBUG=1 shows them")
    click.echo(f"internal error (a bug, please report it): {one_line(exc)}; {where}", err=True)
    sys.exit(EXIT_BUG)
