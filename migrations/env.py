"""Alembic environment. Used by ``auditor db upgrade`` (connection passed in) and by developers
running ``alembic`` with alembic.ini (URL from the ini or AUDITOR_DB_URL)."""
from __future__ import annotations

from alembic import context
from sqlalchemy import create_engine

from auditor.store.models import Base

config = context.config
target_metadata = Base.metadata


def _configure(connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        # SQLite cannot ALTER most things; batch mode rebuilds tables instead.
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )


def run_migrations_offline() -> None:
    context.configure(url=config.get_main_option("sqlalchemy.url"), target_metadata=target_metadata,
                      literal_binds=True, render_as_batch=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _configure(connection)
        with context.begin_transaction():
            context.run_migrations()
        return
    import os

    url = os.environ.get("AUDITOR_DB_URL") or config.get_main_option("sqlalchemy.url")
    engine = create_engine(url)
    with engine.begin() as conn:
        _configure(conn)
        with context.begin_transaction():
            context.run_migrations()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
