"""What every command receives: the database URL, ``--quiet``, and the store opened on first use.

Commands reach the store only through services; the context opens it through
:func:`auditor.services.database.open_database` the first time a command asks for it, so a
command that never touches the database (``--help``, ``serve --help``) loads neither
SQLAlchemy nor Alembic.
"""
from __future__ import annotations

from typing import TYPE_CHECKING

import click

if TYPE_CHECKING:  # pragma: no cover
    from auditor.store import Store


class Context:
    """The ``auditor`` group's settings, passed to every command with :data:`pass_ctx`."""

    def __init__(self, db_url: str | None, quiet: bool):
        self.db_url = db_url
        self.quiet = quiet
        self._store: Store | None = None

    @property
    def store(self) -> Store:
        if self._store is None:
            from auditor.services.database import open_database

            self._store = open_database(self.db_url)
        return self._store

    def use_store(self, store: Store) -> None:
        """Hand the commands an already opened store (``auditor demo`` opens its own)."""
        self._store = store
        self.db_url = store.url

    def close(self) -> None:
        """Close the store's pooled connections (when the command ends): an SQLite file in WAL
        mode is checkpointed by its last connection's close."""
        if self._store is not None:
            self._store.dispose()

    def say(self, message: str = "", **kw) -> None:
        """A progress or confirmation line: printed unless ``--quiet``. Results a command was
        asked for (tables, ``--json``) and errors are printed with ``click.echo`` regardless."""
        if not self.quiet:
            click.echo(message, **kw)


pass_ctx = click.make_pass_decorator(Context)
