"""The database itself: open it, show its schema revision, upgrade or downgrade the schema.

The commands reach the store only through this module and the other services. Messages name
the database by its URL with any password hidden.
"""
from __future__ import annotations

from contextlib import contextmanager

from auditor.errors import UsageError
from auditor.store import Store, open_store
from auditor.store.engine import APP_DIR_NAME, safe_url

__all__ = ["APP_DIR_NAME", "open_database", "database_label", "schema_status", "upgrade_schema", "downgrade_schema"]


def open_database(url: str | None = None) -> Store:
    """The database named by ``url`` (default: ``AUDITOR_DB_URL`` or the per-user SQLite file),
    created and migrated to the current schema on first use."""
    return open_store(url)


def database_label(store: Store) -> str:
    """The store's URL with any password hidden, for messages."""
    return safe_url(store.url)


def schema_status(url: str | None = None) -> dict:
    """``{"database", "revision", "head"}``: the stored schema revision (None when empty) and
    the newest one this version of the program knows."""
    store = open_store(url, upgrade=False)
    try:
        return {"database": safe_url(store.url), "revision": store.current_revision(),
                "head": store.head_revision()}
    finally:
        store.dispose()


@contextmanager
def _known_revision(revision: str):
    """Alembic's complaint about a revision it does not know, as a usage error."""
    from alembic.util.exc import CommandError

    try:
        yield
    except CommandError as exc:
        raise UsageError(f"schema revision {revision!r}: {exc}") from None


def upgrade_schema(url: str | None = None, revision: str = "head") -> dict:
    """Apply the migrations up to ``revision`` (creating the database if absent).
    Returns ``{"database", "before", "after"}`` (None: empty)."""
    store = open_store(url, upgrade=False)
    try:
        before = store.current_revision()
        with _known_revision(revision):
            store.upgrade(revision)
        return {"database": safe_url(store.url), "before": before, "after": store.current_revision()}
    finally:
        store.dispose()


def downgrade_schema(url: str | None, revision: str) -> dict:
    """Revert the schema to ``revision`` (``"base"`` empties it).
    Returns ``{"database", "before", "after"}`` (None: empty)."""
    store = open_store(url, upgrade=False)
    try:
        before = store.current_revision()
        with _known_revision(revision):
            store.downgrade(revision)
        return {"database": safe_url(store.url), "before": before, "after": store.current_revision()}
    finally:
        store.dispose()
