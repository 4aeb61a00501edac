"""Engine, sessions and schema upgrades.

The database is named by a SQLAlchemy URL: ``--db URL``, else ``AUDITOR_DB_URL``, else an SQLite
file ``auditor.sqlite3`` in the user's data directory (``platformdirs.user_data_dir("pf-auditor")``,
on Linux ``~/.local/share/pf-auditor/``). The schema is created and upgraded only by the Alembic
migrations, on first use and by ``auditor db upgrade``.

Opening a store checks the schema cheaply: one query reads the stored revision
(:meth:`Store.stored_revision`) and the head is read from the version files' ``revision`` and
``down_revision`` lines (:func:`quick_head_revision`); Alembic (and its templating and
highlighting libraries) is loaded only when the two differ or the files cannot be read that
simply, which keeps every command's start-up short.
"""
from __future__ import annotations

import os
import re
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import platformdirs
from sqlalchemy import Engine, create_engine, event, inspect
from sqlalchemy.exc import (
    ArgumentError,
    DBAPIError,
    NoSuchModuleError,
    OperationalError,
    SQLAlchemyError,
)
from sqlalchemy.orm import Session, sessionmaker

from auditor.errors import StoreError

APP_DIR_NAME = "pf-auditor"
SQLITE_BUSY_TIMEOUT_MS = 30_000


def default_db_url() -> str:
    env = os.environ.get("AUDITOR_DB_URL")
    if env:
        return env
    folder = Path(platformdirs.user_data_dir(APP_DIR_NAME))
    return f"sqlite:///{folder / 'auditor.sqlite3'}"


def _sqlite_pragmas(dbapi_conn, _record) -> None:
    # WAL lets readers (the dashboard) run beside an import; the busy timeout makes a second
    # writer wait instead of failing; NORMAL sync is safe in WAL mode (a crash loses at most the
    # last transactions, never consistency).
    cur = dbapi_conn.cursor()
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cur.execute("PRAGMA synchronous=NORMAL")
    cur.execute("PRAGMA foreign_keys=ON")
    cur.close()


def make_engine(url: str) -> Engine:
    try:
        if url.startswith("sqlite"):
            path = url.split("///", 1)[1] if "///" in url else ""
            if path.startswith("file:"):
                # an SQLite URI (sqlite:///file:PATH?mode=ro&uri=true): its folder is PATH's
                path = path[5:].split("?", 1)[0]
            if path and path != ":memory:" and "mode=memory" not in url:
                try:
                    Path(path).parent.mkdir(parents=True, exist_ok=True)
                except OSError as exc:
                    raise StoreError(f"cannot create the database folder for {path}: {exc.strerror}") from exc
            engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000})
            # Take the transaction ourselves so that BEGIN is emitted (pysqlite's legacy mode
            # would delay it and break the one-transaction-per-file rule).
            event.listen(engine, "connect", _sqlite_pragmas)

            @event.listens_for(engine, "connect")
            def _no_autobegin(dbapi_conn, _rec):
                dbapi_conn.isolation_level = None

            @event.listens_for(engine, "begin")
            def _begin(conn):
                # BEGIN IMMEDIATE (asked for with execution_options(sqlite_begin="IMMEDIATE")) takes
                # the write lock at once, waiting through the busy timeout: a deferred transaction
                # that reads first and writes later fails at once (no waiting) when another writer
                # committed in between, which is what two processes migrating one file would do.
                mode = conn.get_execution_options().get("sqlite_begin", "")
                conn.exec_driver_sql(f"BEGIN {mode}".strip())

        else:
            engine = create_engine(url, pool_pre_ping=True)
    except (ArgumentError, NoSuchModuleError) as exc:
        raise StoreError(f"bad database URL {url!r}: {exc}") from exc
    return engine


def migrations_dir() -> str:
    return str(resources.files("auditor.migrations"))


_REVISION_LINE = re.compile(
    r"""^(down_revision|revision)\s*(?::[^=]+)?=\s*(None|'[^']*'|"[^"]*")\s*$""", re.MULTILINE)


def quick_head_revision(folder: str | Path | None = None) -> str | None:
    """The head revision read from the version files' ``revision = "..."`` and
    ``down_revision = "..."`` lines, without loading Alembic.

    Returns None whenever the answer is not plain (a file without both lines, a merge
    revision, a branch with two heads): the caller then asks Alembic, which is always right.
    """
    versions = Path(folder or migrations_dir()) / "versions"
    revisions: set[str] = set()
    parents: set[str] = set()
    try:
        files = sorted(versions.glob("*.py"))
        for f in files:
            if f.name == "__init__.py":
                continue
            found = dict((k, v) for k, v in _REVISION_LINE.findall(f.read_text(encoding="utf-8")))
            if "revision" not in found or "down_revision" not in found:
                return None
            revisions.add(found["revision"].strip("'\""))
            if found["down_revision"] != "None":
                parents.add(found["down_revision"].strip("'\""))
    except OSError:
        return None
    heads = revisions - parents
    return next(iter(heads)) if len(heads) == 1 and parents <= revisions else None


def alembic_config(url: str):
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", migrations_dir())
    cfg.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return cfg


@dataclass
class Store:
    url: str
    engine: Engine

    def __post_init__(self) -> None:
        self._sessions = sessionmaker(self.engine, expire_on_commit=False)

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A session in one transaction: committed on success, rolled back on any error."""
        with self._sessions() as s:
            with s.begin():
                yield s

    @property
    def is_sqlite(self) -> bool:
        return self.engine.dialect.name == "sqlite"

    def _migration_connection(self):
        conn = self.engine.connect()
        if self.is_sqlite:
            conn.execution_options(sqlite_begin="IMMEDIATE")
        return conn

    def upgrade(self, revision: str = "head") -> None:
        from alembic import command

        cfg = alembic_config(self.url)
        # concurrent first uses: the second waits for the lock, then finds the schema at head
        with self._migration_connection() as conn, conn.begin():
            cfg.attributes["connection"] = conn
            command.upgrade(cfg, revision)

    def downgrade(self, revision: str) -> None:
        from alembic import command

        cfg = alembic_config(self.url)
        with self._migration_connection() as conn, conn.begin():
            cfg.attributes["connection"] = conn
            command.downgrade(cfg, revision)

    def current_revision(self) -> str | None:
        from alembic.runtime.migration import MigrationContext

        with self.engine.connect() as conn:
            return MigrationContext.configure(conn).get_current_revision()

    def stored_revision(self) -> tuple[str | None, bool]:
        """The revision in ``alembic_version`` by one plain query, without Alembic.

        Returns ``(revision, plain)``: ``plain`` is False when the table holds more than one
        row (branches), and the caller must ask Alembic. An absent table is an empty schema.
        """
        with self.engine.connect() as conn:
            try:
                rows = conn.exec_driver_sql("SELECT version_num FROM alembic_version").all()
            except DBAPIError as exc:
                if isinstance(exc, OperationalError) and self._unreachable(exc):
                    raise
                return None, True  # no such table: nothing migrated yet
        if len(rows) > 1:
            return None, False
        return (rows[0][0] if rows else None), True

    @staticmethod
    def _unreachable(exc: OperationalError) -> bool:
        """An error opening the database itself (not a missing table)."""
        text = str(exc.orig).lower()
        return "no such table" not in text and "does not exist" not in text

    def schema_is_current(self) -> bool:
        """True when the stored revision is the head, decided without Alembic when possible."""
        stored, plain = self.stored_revision()
        head = quick_head_revision() if plain else None
        if head is not None:
            return stored == head
        return self.current_revision() == self.head_revision()

    def head_revision(self) -> str:
        from alembic.script import ScriptDirectory

        return ScriptDirectory.from_config(alembic_config(self.url)).get_current_head()

    def dispose(self) -> None:
        self.engine.dispose()


def open_store(url: str | None = None, *, upgrade: bool = True) -> Store:
    """Open (and, on first use, migrate) the database named by ``url``."""
    url = url or default_db_url()
    store = Store(url, make_engine(url))
    try:
        if upgrade and not store.schema_is_current():
            store.upgrade()
    except OperationalError as exc:
        raise StoreError(f"cannot open the database {safe_url(url)}: {exc.orig}") from exc
    except SQLAlchemyError as exc:
        raise StoreError(f"database error on {safe_url(url)}: {exc}") from exc
    return store


def safe_url(url: str) -> str:
    """The URL with any password masked, for messages."""
    try:
        from sqlalchemy.engine import make_url

        return make_url(url).render_as_string(hide_password=True)
    except Exception:  # a URL too broken to parse is shown as it is
        return url


def table_names(store: Store) -> list[str]:
    return sorted(inspect(store.engine).get_table_names())
