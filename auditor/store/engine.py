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
from collections.abc import Callable, Iterator
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

from auditor import APP_DIR_NAME, __version__
from auditor.errors import StoreError

SQLITE_BUSY_TIMEOUT_MS = 30_000
#: The page size of a new SQLite file: a block of readings (up to 3.7 kB, ``store.blocks``)
#: then fits in its page (SQLite's default of 4 KiB would put each row's tail on a page of its own).
SQLITE_PAGE_SIZE = 16_384


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
    cur.execute(f"PRAGMA page_size={SQLITE_PAGE_SIZE}")  # takes effect in a new file only
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cur.execute("PRAGMA synchronous=NORMAL")
    cur.execute("PRAGMA foreign_keys=ON")
    cur.close()


class DatabaseSettingError(StoreError):
    """A database the program cannot use as it is configured: its driver is not installed, or
    its schema is newer than this version knows. A bad setting: exit 2."""

    exit_code = 2


# SQLite result codes (sqlite3 exceptions carry them as ``sqlite_errorcode``)
_SQLITE_DAMAGED = {11: "damaged (database disk image is malformed)", 26: "not an SQLite database or damaged"}
_SQLITE_TROUBLE = {
    5: "is locked by another process beyond the waiting time",
    8: "is read-only (check the file's and its folder's permissions)",
    10: "cannot be read or written (disk I/O error)",
    13: "cannot grow: the disk is full",
    14: "cannot be opened (check the path and the permissions)",
}
_DAMAGED_TEXT = ("file is not a database", "malformed", "file is encrypted")


def sqlite_path(url: str) -> str | None:
    """The file an SQLite URL names (None for an in-memory database or another dialect)."""
    if not url.startswith("sqlite"):
        return None
    path = url.split("///", 1)[1] if "///" in url else ""
    if path.startswith("file:"):
        # an SQLite URI (sqlite:///file:PATH?mode=ro&uri=true)
        path = path[5:].split("?", 1)[0]
    if not path or path == ":memory:" or "mode=memory" in url:
        return None
    return path


def database_label(url: str) -> str:
    """How messages name a database: an SQLite file by its path, a server by its URL (password hidden)."""
    return sqlite_path(url) or safe_url(url)


def _sqlite_code(exc: BaseException) -> int | None:
    code = getattr(exc, "sqlite_errorcode", None)
    return code & 0xFF if isinstance(code, int) else None  # extended codes keep the primary in the low byte


def damage_of(exc: BaseException) -> str | None:
    """What an SQLite error says about a damaged file, or None when it says nothing of the kind."""
    code = _sqlite_code(exc)
    if code in _SQLITE_DAMAGED:
        return _SQLITE_DAMAGED[code]
    text = str(exc).lower()
    if any(t in text for t in _DAMAGED_TEXT):
        return "damaged or not an SQLite database"
    return None


def _listen_sqlite_errors(engine: Engine, label: str) -> None:
    """Turn SQLite's errors about the file itself into one-line :class:`StoreError` messages
    naming the file, and mark the store damaged so that nothing more is written to it.

    Every such message begins "database error on": the inbox tells a failure of the database
    (the file stays in the inbox) from a bad file (moved to ``rejected/``) by that prefix.
    """

    @event.listens_for(engine, "handle_error")
    def _explain(ctx):
        orig = ctx.original_exception
        damage = damage_of(orig)
        if damage:
            engine.pf_damaged = damage
            return StoreError(f"database error on {label}: the file is {damage}; it was not changed. "
                              "Restore it from a backup or name another database file")
        code = _sqlite_code(orig)
        if code in _SQLITE_TROUBLE:
            return StoreError(f"database error on {label}: the file {_SQLITE_TROUBLE[code]}: {first_line(orig)}")
        return None


def _listen_server_errors(engine: Engine, label: str) -> None:
    @event.listens_for(engine, "handle_error")
    def _explain(ctx):
        if ctx.is_disconnect and not ctx.is_pre_ping:
            return StoreError(f"database error on {label}: the connection was lost: "
                              f"{first_line(ctx.original_exception)}")
        return None


_DEFAULT_DRIVERS = {"postgresql": "postgresql+psycopg", "postgres": "postgresql+psycopg"}
POSTGRES_INSTALL = "pip install 'pf-auditor[postgres]'"


def _with_driver(url: str) -> str:
    """A PostgreSQL URL without a driver (``postgresql://``) uses psycopg 3, the driver this
    program installs with its ``postgres`` extra (SQLAlchemy alone would pick psycopg2)."""
    scheme, sep, rest = url.partition("://")
    if sep and scheme in _DEFAULT_DRIVERS:
        return f"{_DEFAULT_DRIVERS[scheme]}://{rest}"
    return url


def _missing_driver(url: str, exc: ImportError) -> StoreError:
    scheme = url.partition("://")[0]
    module = exc.name or str(exc)
    if scheme.startswith("postgresql"):
        advice = POSTGRES_INSTALL
        if scheme != "postgresql+psycopg":
            advice += " and name that driver in the URL: postgresql+psycopg://USER@HOST/DATABASE"
        return DatabaseSettingError(f"the database URL {safe_url(url)} needs the PostgreSQL driver "
                                    f"{module!r}, which is not installed: {advice}")
    return DatabaseSettingError(f"the database URL {safe_url(url)} needs the Python module {module!r}, "
                                "which is not installed")


def make_engine(url: str) -> Engine:
    url = _with_driver(url)
    label = database_label(url)
    try:
        if url.startswith("sqlite"):
            path = sqlite_path(url)
            if path:
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

            _listen_sqlite_errors(engine, label)
        else:
            engine = create_engine(url, pool_pre_ping=True)
            _listen_server_errors(engine, label)
    except (ArgumentError, NoSuchModuleError) as exc:
        raise StoreError(f"bad database URL {safe_url(url)!r}: {exc}") from exc
    except ImportError as exc:  # the dialect's driver (psycopg, ...) is not installed
        raise _missing_driver(url, exc) from None
    engine.pf_damaged = None
    return engine


def migrations_dir() -> str:
    return str(resources.files("auditor.migrations"))


_REVISION_LINE = re.compile(
    r"""^(down_revision|revision)\s*(?::[^=]+)?=\s*(None|'[^']*'|"[^"]*")\s*$""", re.MULTILINE)


def quick_revisions(folder: str | Path | None = None) -> tuple[frozenset[str], str] | None:
    """``(every revision, the head)`` read from the version files' ``revision = "..."`` and
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
    if len(heads) == 1 and parents <= revisions:
        return frozenset(revisions), next(iter(heads))
    return None


def quick_head_revision(folder: str | Path | None = None) -> str | None:
    """The head revision from the version files without Alembic (None: ask Alembic)."""
    found = quick_revisions(folder)
    return found[1] if found else None


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
        self.refuse_if_damaged()
        with self._sessions() as s:
            with s.begin():
                yield s

    @property
    def is_sqlite(self) -> bool:
        return self.engine.dialect.name == "sqlite"

    @property
    def label(self) -> str:
        """The database as messages name it: an SQLite file by its path, a server by its URL."""
        return database_label(self.url)

    def refuse_if_damaged(self) -> None:
        damage = getattr(self.engine, "pf_damaged", None)
        if damage:
            raise StoreError(f"database error on {self.label}: the file is {damage}; nothing more is read from "
                             "or written to it")

    def check_integrity(self, conn) -> None:
        """SQLite's ``quick_check`` before a migration writes: a damaged file is refused, never changed."""
        if not self.is_sqlite:
            return
        rows = [r[0] for r in conn.exec_driver_sql("PRAGMA quick_check").fetchmany(3)]
        if rows != ["ok"]:
            self.engine.pf_damaged = "damaged"
            raise StoreError(f"database error on {self.label}: the file is damaged ({'; '.join(map(str, rows))}); it "
                             "was not changed. Restore it from a backup or name another database file")

    def backup_copy(self, dest: Path) -> None:
        """Copy an SQLite file to ``dest`` with SQLite's backup API (a consistent copy even
        beside a running import), reading through a read-only connection of its own."""
        import sqlite3
        from urllib.parse import quote

        path = sqlite_path(self.url)
        if path is None:
            raise StoreError(f"{self.label} is not an SQLite file; it cannot be copied")
        src = sqlite3.connect(f"file:{quote(str(Path(path).resolve()))}?mode=ro", uri=True,
                              timeout=SQLITE_BUSY_TIMEOUT_MS / 1000)
        try:
            dst = sqlite3.connect(str(dest))
            try:
                src.backup(dst)
            finally:
                dst.close()
        finally:
            src.close()

    def integrity_problems(self, limit: int = 20) -> list[str]:
        """SQLite's full ``integrity_check`` of the file (empty: sound); a server database
        checks its own pages, and answers an empty list once it can be queried."""
        with self.engine.connect() as conn:
            if not self.is_sqlite:
                conn.exec_driver_sql("SELECT 1").scalar()
                return []
            rows = [str(r[0]) for r in conn.exec_driver_sql(f"PRAGMA integrity_check({int(limit)})")]
        return [] if rows == ["ok"] else rows

    @contextmanager
    def _migration_connection(self) -> Iterator:
        """A connection for migrations. On SQLite, batch migrations rebuild a table (copy, drop,
        rename), so foreign keys are switched off for the connection outside the transaction and
        checked before it commits (:meth:`_check_foreign_keys`): SQLite's documented procedure
        for schema changes it cannot make in place (sqlite.org, "ALTER TABLE", section 7)."""
        conn = self.engine.connect()
        raw = None
        try:
            if self.is_sqlite:
                conn.execution_options(sqlite_begin="IMMEDIATE")
                raw = conn.connection.driver_connection
                raw.execute("PRAGMA foreign_keys=OFF")  # a no-op inside a transaction: none is open yet
            yield conn
        finally:
            if raw is not None:
                raw.execute("PRAGMA foreign_keys=ON")
            conn.close()

    def _check_foreign_keys(self, conn) -> None:
        if self.is_sqlite:
            broken = conn.exec_driver_sql("PRAGMA foreign_key_check").fetchmany(3)
            if broken:
                raise StoreError(f"the migration would leave rows of table {broken[0][0]!r} without the "
                                 f"row of {broken[0][2]!r} they refer to; nothing was changed")

    def upgrade(self, revision: str = "head") -> bool:
        """Migrate to ``revision``; True when an SQLite file was then rewritten with larger
        pages (:meth:`_larger_pages`)."""
        from alembic import command

        self.refuse_if_damaged()
        cfg = alembic_config(self.url)
        # concurrent first uses: the second waits for the lock, then finds the schema at head
        with self._migration_connection() as conn, conn.begin():
            self.check_integrity(conn)
            cfg.attributes["connection"] = conn
            command.upgrade(cfg, revision)
            self._check_foreign_keys(conn)
        return self._larger_pages()

    def _larger_pages(self) -> bool:
        """Rewrite an SQLite file made with smaller pages than :data:`SQLITE_PAGE_SIZE`
        (``VACUUM``, outside the write-ahead log, which cannot change the page size), so that a
        block of readings fits in its page. Only when no other connection holds the file: the
        database works either way (rows spill to overflow pages), so a file in use is left as it
        is until a later upgrade. True when the file was rewritten."""
        import sqlite3

        if not self.is_sqlite or self.url.endswith(":memory:"):
            return False
        self.engine.dispose()  # this process's pooled connections would hold the file
        with self.engine.connect() as conn:
            raw = conn.connection.driver_connection
            if raw.execute("PRAGMA page_size").fetchone()[0] >= SQLITE_PAGE_SIZE:
                return False
            if raw.execute("SELECT count(*) FROM sqlite_master WHERE name = 'reading_block'").fetchone()[0] == 0:
                return False
            raw.execute("PRAGMA busy_timeout=0")  # another process in the file: give up at once
            try:
                if str(raw.execute("PRAGMA journal_mode=DELETE").fetchone()[0]).lower() != "delete":
                    return False  # another connection keeps the log
                raw.execute(f"PRAGMA page_size={SQLITE_PAGE_SIZE}")
                raw.execute("VACUUM")
                return True
            except sqlite3.OperationalError:
                return False
            finally:
                raw.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
                raw.execute("PRAGMA journal_mode=WAL")  # waits, as every connection of the store does

    def downgrade(self, revision: str, *, allow_loss: bool = False, dry_run: bool = False,
                  backup: Callable[[], None] | None = None) -> list[LostData]:
        """Revert the schema to ``revision`` in one transaction and return the data it drops:
        tables that held rows, and columns dropped from tables that held rows.

        Without ``allow_loss`` a downgrade that would drop data is rolled back and raises
        :class:`DataWouldBeLost`; ``dry_run`` always rolls back (the answer is the list).
        ``backup`` runs inside the transaction, after the write lock is taken and before
        anything changes, so the copy it makes is of exactly what the downgrade starts from.
        """
        from alembic import command

        self.refuse_if_damaged()
        cfg = alembic_config(self.url)
        with self._migration_connection() as conn:
            trans = conn.begin()
            try:
                self.check_integrity(conn)
                before = _holdings(conn)
                if backup is not None and not dry_run:
                    backup()
                cfg.attributes["connection"] = conn
                command.downgrade(cfg, revision)
                self._check_foreign_keys(conn)
                lost = _lost(conn, before)
                if dry_run or (lost and not allow_loss):
                    trans.rollback()
                    if not dry_run:
                        raise DataWouldBeLost(lost, revision)
                    return lost
                trans.commit()
                return lost
            except BaseException:
                if trans.is_active:
                    trans.rollback()
                raise

    def current_revision(self) -> str | None:
        from alembic.runtime.migration import MigrationContext

        with self.engine.connect() as conn:
            return MigrationContext.configure(conn).get_current_revision()

    def stored_revision(self) -> tuple[str | None, bool]:
        """The revision in ``alembic_version`` by one plain query, without Alembic.

        Returns ``(revision, plain)``: ``plain`` is False when the table holds more than one
        row (branches), and the caller must ask Alembic. An absent table is an empty schema;
        any other error (an unreachable server, a damaged file) is raised.
        """
        with self.engine.connect() as conn:
            try:
                rows = conn.exec_driver_sql("SELECT version_num FROM alembic_version").all()
            except DBAPIError as exc:
                if _missing_table(exc):
                    return None, True  # nothing migrated yet
                raise
        if len(rows) > 1:
            return None, False
        return (rows[0][0] if rows else None), True

    def known_revisions(self) -> tuple[frozenset[str], str]:
        """``(every revision this program knows, the head)``, from the files when plain."""
        found = quick_revisions()
        if found is not None:
            return found
        from alembic.script import ScriptDirectory

        script = ScriptDirectory.from_config(alembic_config(self.url))
        return frozenset(r.revision for r in script.walk_revisions()), script.get_current_head()

    def check_schema(self) -> bool:
        """True when the stored schema is the head, False when it is older (or empty); raises
        :class:`DatabaseSettingError` when it is a revision this program does not know, which
        a newer version of it wrote. Decided without Alembic when the answer is plain."""
        stored, plain = self.stored_revision()
        if not plain:
            stored = self.current_revision()
        known, head = self.known_revisions()
        if stored is not None and stored not in known:
            raise DatabaseSettingError(
                f"the database {self.label} has schema revision {stored!r}, which this version of "
                f"pf-auditor ({__version__}, schema {head}) does not know: a newer version wrote it. "
                "Upgrade pf-auditor to use this database (pip install --upgrade pf-auditor)")
        return stored == head

    def schema_is_current(self) -> bool:
        """True when the stored revision is the head (see :meth:`check_schema`)."""
        return self.check_schema()

    def head_revision(self) -> str:
        return self.known_revisions()[1]

    def dispose(self) -> None:
        self.engine.dispose()


@dataclass(frozen=True)
class LostData:
    """Data a downgrade drops: a table with its rows, or a column of a table with rows."""

    table: str
    rows: int
    column: str | None = None
    noun: str = "row"  # what ``rows`` counts: the readings of ``reading_block``, rows elsewhere

    def describe(self) -> str:
        what = f"column {self.column} of table {self.table}" if self.column else f"table {self.table}"
        return f"{what} ({self.rows:,} {self.noun}{'s' if self.rows != 1 else ''})"


class DataWouldBeLost(StoreError):
    """A downgrade that would drop tables or columns holding rows, refused and rolled back."""

    exit_code = 2

    def __init__(self, lost: list[LostData] | list[str], revision: str | None = None):
        self.lost = [x if isinstance(x, str) else x.describe() for x in lost]
        to = f" to {revision}" if revision else ""
        super().__init__(f"the downgrade{to} would delete " + ", ".join(self.lost) + "; nothing was changed")


def _missing_table(exc: DBAPIError) -> bool:
    text = str(exc.orig).lower()
    return "no such table" in text or "does not exist" in text or "undefined table" in text


# Tables whose rows a migration moves into another table rather than deleting them: a downgrade
# that drops the first leaves the data in the second (migration 0010: the blocks back into rows).
_MOVED_TO = {"reading_block": "reading"}
# Tables whose content is counted in readings (intervals), not rows, when a downgrade reports it.
_READINGS = ("reading_block",)


# Revisions whose blocks hold another number of intervals than the current layout's.
_BLOCK_SIZE_AT = {"0010": 24}


def _block_size_at(conn) -> int | None:
    """Intervals per block at the stored revision (None: the current layout's)."""
    try:
        found = [r[0] for r in conn.exec_driver_sql("SELECT version_num FROM alembic_version").all()]
    except DBAPIError:
        return None
    return _BLOCK_SIZE_AT.get(found[0]) if len(found) == 1 else None


def _holdings(conn) -> dict[str, tuple[int, dict[str, int]]]:
    """Every table's row count and, per column, how many rows hold a value (one scan a table;
    the schema's bookkeeping table left out). A column that is dropped while it holds no value
    loses nothing. The block table counts its readings (intervals) instead of its rows."""
    insp = inspect(conn)
    quote = conn.dialect.identifier_preparer.quote
    out = {}
    for t in insp.get_table_names():
        if t == "alembic_version":
            continue
        cols = [c["name"] for c in insp.get_columns(t)]
        counts = conn.exec_driver_sql(
            f"SELECT count(*){''.join(f', count({quote(c)})' for c in cols)} FROM {quote(t)}").one()
        rows = int(counts[0])
        if t in _READINGS and rows:
            from auditor.store.meter_data import spans

            rows = sum(v[3] for v in spans(conn, size=_block_size_at(conn)).values())
        out[t] = (rows, {c: int(n) for c, n in zip(cols, counts[1:], strict=True)})
    return out


def _lost(conn, before: dict[str, tuple[int, dict[str, int]]]) -> list[LostData]:
    insp = inspect(conn)  # a new inspector: the schema changed within this transaction
    after = set(insp.get_table_names())
    lost = []
    for t, (rows, cols) in sorted(before.items()):
        if not rows:
            continue
        if t not in after:
            into = _MOVED_TO.get(t)
            if into in after and conn.exec_driver_sql(f"SELECT count(*) FROM {into}").scalar() >= rows:
                continue  # moved, not dropped
            lost.append(LostData(t, rows, noun="reading" if t in _READINGS else "row"))
            continue
        kept = {c["name"] for c in insp.get_columns(t)}
        lost += [LostData(t, cols[c], c) for c in sorted(set(cols) - kept) if cols[c]]
    return lost


def open_store(url: str | None = None, *, upgrade: bool = True, check: bool = True) -> Store:
    """Open (and, on first use, migrate) the database named by ``url``.

    A schema newer than this program knows is refused (:class:`DatabaseSettingError`, exit 2)
    unless ``check`` is False (``auditor db current`` shows it); a damaged SQLite file raises
    :class:`StoreError` naming it, before anything is written.
    """
    url = url or default_db_url()
    store = Store(url, make_engine(url))
    try:
        if check or upgrade:
            current = store.check_schema()
            if upgrade and not current:
                store.upgrade()
    except OperationalError as exc:
        store.dispose()
        raise StoreError(f"cannot open the database {database_label(url)}: {first_line(getattr(exc, 'orig', None) or exc)}") from exc
    except SQLAlchemyError as exc:
        store.dispose()
        raise StoreError(f"database error on {database_label(url)}: {first_line(getattr(exc, 'orig', None) or exc)}") from exc
    except BaseException:
        store.dispose()
        raise
    return store


def first_line(exc: BaseException | None) -> str:
    """The first line of an error's text (drivers add hints and links on further lines)."""
    return (str(exc).strip().splitlines() or [""])[0]


def safe_url(url: str) -> str:
    """The URL with any password masked, for messages."""
    try:
        from sqlalchemy.engine import make_url

        return make_url(url).render_as_string(hide_password=True)
    except Exception:  # a URL too broken to parse is shown as it is
        return url


def table_names(store: Store) -> list[str]:
    return sorted(inspect(store.engine).get_table_names())
