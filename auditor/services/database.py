"""The database itself: open it, show its schema revision, upgrade or downgrade the schema.

The commands reach the store only through this module and the other services. Messages name
the database by its URL with any password hidden.
"""
from __future__ import annotations

import sqlite3
import time
from contextlib import contextmanager
from pathlib import Path

from auditor.errors import StoreError, UsageError
from auditor.store import Store, open_store
from auditor.store.engine import APP_DIR_NAME, DataWouldBeLost, safe_url, sqlite_path

__all__ = ["APP_DIR_NAME", "open_database", "database_label", "schema_status", "upgrade_schema",
           "plan_downgrade", "downgrade_refusal", "downgrade_schema", "check_database"]


def open_database(url: str | None = None) -> Store:
    """The database named by ``url`` (default: ``AUDITOR_DB_URL`` or the per-user SQLite file),
    created and migrated to the current schema on first use."""
    return open_store(url)


def database_label(store: Store) -> str:
    """The store's URL with any password hidden, for messages."""
    return safe_url(store.url)


def schema_status(url: str | None = None) -> dict:
    """``{"database", "revision", "head", "known"}``: the stored schema revision (None when
    empty), the newest one this version of the program knows, and whether it knows the stored
    one (False: a newer version wrote the database)."""
    store = open_store(url, upgrade=False, check=False)
    try:
        revision = store.current_revision()
        known, head = store.known_revisions()
        return {"database": safe_url(store.url), "revision": revision, "head": head,
                "known": revision is None or revision in known}
    finally:
        store.dispose()


def check_database(url: str | None = None) -> dict:
    """``{"database", "ok", "problems"}``: SQLite's full integrity check of the file (read
    only; nothing is migrated or written). A file too damaged to be read raises StoreError."""
    store = open_store(url, upgrade=False, check=False)
    try:
        problems = store.integrity_problems()
        return {"database": safe_url(store.url), "ok": not problems, "problems": problems}
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
    Returns ``{"database", "before", "after", "pages_rewritten"}`` (None: empty; the last True
    when an SQLite file was rewritten with larger pages). A database newer than this program is
    refused (exit 2), a damaged SQLite file too (exit 1), before anything changes."""
    store = open_store(url, upgrade=False)
    try:
        before = store.current_revision()
        with _known_revision(revision):
            rewritten = store.upgrade(revision)
        return {"database": safe_url(store.url), "before": before, "after": store.current_revision(),
                "pages_rewritten": rewritten}
    finally:
        store.dispose()


def plan_downgrade(url: str | None, revision: str) -> dict:
    """What a downgrade to ``revision`` would drop, found by running it in a transaction that
    is rolled back. ``{"database", "before", "revision", "lost": [str, ...]}``."""
    store = open_store(url, upgrade=False)
    try:
        before = store.current_revision()
        with _known_revision(revision):
            lost = store.downgrade(revision, dry_run=True)
        return {"database": safe_url(store.url), "before": before, "revision": revision,
                "lost": [x.describe() for x in lost], "sqlite": sqlite_path(store.url) is not None}
    finally:
        store.dispose()


def downgrade_refusal(plan: dict) -> DataWouldBeLost:
    """The error refusing the downgrade of :func:`plan_downgrade` (nothing was changed)."""
    return _with_hint(DataWouldBeLost(plan["lost"], plan["revision"]), plan["revision"], plan["sqlite"])


def _with_hint(exc: DataWouldBeLost, revision: str, sqlite: bool) -> DataWouldBeLost:
    exc.cli_hint = f"auditor db downgrade {revision} --yes drops them" + (
        ", after copying the file" if sqlite else "")
    return exc


def backup_path(db_file: Path, revision: str | None) -> Path:
    """Where the copy made before a downgrade goes: beside the file, named after the revision
    it holds and the time (``auditor.before-downgrade-from-0003-20250301T101500.sqlite3``)."""
    stamp = time.strftime("%Y%m%dT%H%M%S")
    stem, suffix = db_file.stem, db_file.suffix or ".sqlite3"
    base = f"{stem}.before-downgrade-from-{revision or 'empty'}-{stamp}"
    candidate, n = db_file.with_name(base + suffix), 1
    while candidate.exists():
        n += 1
        candidate = db_file.with_name(f"{base}-{n}{suffix}")
    return candidate


def downgrade_schema(url: str | None, revision: str, *, allow_loss: bool = False) -> dict:
    """Revert the schema to ``revision`` (``"base"`` empties it).

    An SQLite file is copied first (SQLite's backup API, beside the file; ``backup`` in the
    answer names the copy). A downgrade that would drop tables, or columns of tables, that
    hold rows is refused and rolled back unless ``allow_loss`` (:class:`DataWouldBeLost`,
    exit 2). Returns ``{"database", "before", "after", "backup", "lost"}`` (None: empty).
    """
    store = open_store(url, upgrade=False)
    copy: dict[str, Path] = {}
    try:
        before = store.current_revision()
        db_file = sqlite_path(store.url)

        def backup() -> None:
            dest = backup_path(Path(db_file), before)
            try:
                store.backup_copy(dest)
            except (OSError, sqlite3.Error) as exc:
                dest.unlink(missing_ok=True)
                raise StoreError(f"cannot copy the database file {db_file} to {dest} before the "
                                 f"downgrade ({exc}); nothing was changed") from None
            copy["path"] = dest

        try:
            with _known_revision(revision):
                lost = store.downgrade(revision, allow_loss=allow_loss,
                                       backup=backup if db_file else None)
        except DataWouldBeLost as exc:
            if "path" in copy:
                copy.pop("path").unlink(missing_ok=True)
            raise _with_hint(exc, revision, bool(db_file)) from None
        except BaseException:
            if "path" in copy:
                copy.pop("path").unlink(missing_ok=True)
            raise
        return {"database": safe_url(store.url), "before": before, "after": store.current_revision(),
                "backup": str(copy["path"]) if "path" in copy else None,
                "lost": [x.describe() for x in lost]}
    finally:
        store.dispose()
