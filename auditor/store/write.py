"""Bulk writes of validated readings into the block layout, with revisions.

Readings are stored in blocks of 96 intervals (:mod:`auditor.store.blocks`). For each meter of
a file, :func:`write_meter` reads the stored blocks its intervals fall in, unpacks them, sorts
the file's intervals into new (an empty slot), identical (every quantity equal within
``rtol=1e-12, atol=1e-9``, NaN equal to NaN, same flags) and changed, copies the stored values of
changed intervals to ``reading_revision`` (with the batch that wrote them and the batch that
superseded them), lays the new and changed values over the stored ones, packs the touched blocks
again and writes them: new blocks by the driver's ``executemany`` (SQLite) or binary ``COPY``
built by numpy (PostgreSQL), stored ones by ``UPDATE`` on their key; blocks that only hold
identical intervals are not written. Never one ORM object per interval; everything happens
inside the caller's transaction, so a file is wholly stored or not at all.

Revisions are decided by content, interval by interval (README, "Re-imports and revisions"):

* an incoming interval already stored with the same values (and flags) is left alone;
* one whose incoming values were stored before and later replaced (they are in
  ``reading_revision``) is *superseded*: the file replays old content, as a re-saved copy of an
  old export does, and the stored newer values stay (``force`` applies it anyway);
* one stored with other values is a revision: the stored values are copied to
  ``reading_revision`` (with the batch that superseded them) and replaced by the newer ones —
  unless the file is *older* than the file that wrote the stored value: its modification time is
  earlier by more than ``OLDER_SLACK_S``. Then nothing of the meter is written and the counts say
  how many intervals the file would change; the caller rolls the file back (``force`` applies it).

The import pipeline uses only :func:`import_session` (the file's one transaction) and
:func:`write_meter` (one meter's sorted rows as numpy arrays, returning :class:`WriteCounts`).
"""
from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field

import numpy as np
from sqlalchemy import Connection
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from auditor.store.blocks import (
    ABSENT,
    BLOCK_COLUMNS,
    PGCOPY_HEADER,
    PGCOPY_TRAILER,
    STORED_COLUMNS,
    Blocks,
    Intervals,
    block_of,
    block_seconds,
    copy_payload,
    from_rows,
    gather,
    rows,
)
from auditor.store.models import QUANTITIES

# Files whose modification times are this close are taken as written at the same time (a
# checkout, an unpacked archive or a copy without preserved times): neither is older.
OLDER_SLACK_S = 60.0
# a file's blocks that are read with one list of keys (beyond this, or when they are dense, by range)
_KEYS_PER_QUERY = 500


@dataclass
class WriteCounts:
    inserted: int = 0
    revised: int = 0
    unchanged: int = 0
    superseded: int = 0  # incoming values a later import already replaced: kept as stored
    older: int = 0  # intervals an older file would change (nothing written for them)
    newer_batches: set[int] = field(default_factory=set)  # the batches that wrote those values

    def add(self, other: WriteCounts) -> None:
        self.inserted += other.inserted
        self.revised += other.revised
        self.unchanged += other.unchanged
        self.superseded += other.superseded
        self.older += other.older
        self.newer_batches |= other.newer_batches


@contextmanager
def import_session(store) -> Iterator[Session]:
    """A session in one transaction for one file's import: committed whole or rolled back.

    On SQLite the connection's foreign-key enforcement is off while the session lasts (it can
    only change outside a transaction): every row the import writes refers to a meter, site or
    batch that the same transaction selected or created while holding SQLite's write lock, so
    the per-row lookup of the parent key, a sixth of the bulk insert's time, can find nothing
    wrong. Enforcement is back on before the connection returns to the pool; every other writer
    keeps it. PostgreSQL checks the keys as always.
    """
    with store.engine.connect() as conn:
        raw = conn.connection.driver_connection if conn.dialect.name == "sqlite" else None
        if raw is not None:
            raw.execute("PRAGMA foreign_keys=OFF")
        try:
            with Session(bind=conn, expire_on_commit=False) as s, s.begin():
                yield s
        finally:
            if raw is not None:
                try:
                    raw.execute("PRAGMA foreign_keys=ON")
                except conn.dialect.loaded_dbapi.Error:
                    conn.invalidate()  # never back to the pool without enforcement


def _ph(conn: Connection, n: int) -> str:
    mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    return ", ".join([mark] * n)


@contextmanager
def _driver_errors(conn: Connection, what: str) -> Iterator[None]:
    """The raw driver's errors (disk full, read-only, a key another import just wrote) as the
    SQLAlchemy classes every caller handles."""
    try:
        yield
    except conn.dialect.loaded_dbapi.Error as exc:
        raise DBAPIError.instance(what, None, exc, conn.dialect.loaded_dbapi.Error, dialect=conn.dialect) from exc


def insert_blocks(conn: Connection, meter_id: int, b: Blocks) -> int:
    """Insert the blocks ``b`` of a meter (none of them stored yet); returns how many."""
    if not len(b.start):
        return 0
    raw = conn.connection.driver_connection
    with _driver_errors(conn, "INSERT INTO reading_block"):
        if conn.dialect.name == "postgresql":
            with raw.cursor() as cur, cur.copy(
                    f"COPY reading_block ({', '.join(BLOCK_COLUMNS)}) FROM STDIN (FORMAT BINARY)") as copy:
                copy.write(PGCOPY_HEADER)
                for part in copy_payload(meter_id, b):
                    copy.write(part)
                copy.write(PGCOPY_TRAILER)
        else:
            cur = raw.cursor()
            try:
                cur.executemany(f"INSERT INTO reading_block ({', '.join(BLOCK_COLUMNS)}) "
                                f"VALUES ({_ph(conn, len(BLOCK_COLUMNS))})", rows(meter_id, b))
            finally:
                cur.close()
    return len(b.start)


def _update_blocks(conn: Connection, meter_id: int, b: Blocks) -> None:
    if not len(b.start):
        return
    mark = _ph(conn, 1)
    sets = ", ".join(f"{c} = {mark}" for c in BLOCK_COLUMNS[2:])
    params = [(*r[2:], r[0], r[1]) for r in rows(meter_id, b)]
    raw = conn.connection.driver_connection
    with _driver_errors(conn, "UPDATE reading_block"):
        cur = raw.cursor()
        try:
            cur.executemany(f"UPDATE reading_block SET {sets} WHERE meter_id = {mark} AND block_start = {mark}",
                            params)
        finally:
            cur.close()


def stored_blocks(conn: Connection, meter_id: int, starts: np.ndarray, interval_minutes: int) -> Blocks:
    """The stored blocks of a meter among the block starts ``starts`` (sorted, unique): by
    their keys, or by the range they span when they are dense in it."""
    if not len(starts):
        return from_rows([])
    cols = ", ".join(STORED_COLUMNS)
    m = _ph(conn, 1)
    span = block_seconds(interval_minutes)
    found: list[tuple] = []
    if (int(starts[-1]) - int(starts[0])) // span + 1 <= 2 * len(starts):
        found = conn.exec_driver_sql(
            f"SELECT {cols} FROM reading_block WHERE meter_id = {m} AND block_start >= {m} AND block_start <= {m} "
            "ORDER BY block_start", (int(meter_id), int(starts[0]), int(starts[-1]))).fetchall()
        b = from_rows(found)
        return b.take(np.isin(b.start, starts)) if len(b.start) else b
    for lo in range(0, len(starts), _KEYS_PER_QUERY):
        part = [int(x) for x in starts[lo:lo + _KEYS_PER_QUERY]]
        found += conn.exec_driver_sql(
            f"SELECT {cols} FROM reading_block WHERE meter_id = {m} AND block_start IN ({_ph(conn, len(part))}) "
            "ORDER BY block_start", (int(meter_id), *part)).fetchall()
    return from_rows(found)


def _lock_meter(conn: Connection, meter_id: int) -> None:
    """On PostgreSQL, hold the meter's row until the file's transaction ends: two imports of
    the same meter at once would otherwise both read a block and write it back, each without
    the other's intervals. (SQLite has one writer at a time: the import takes the write lock
    with its first statement.)"""
    if conn.dialect.name == "postgresql":
        conn.exec_driver_sql("SELECT id FROM meter WHERE id = %s FOR UPDATE", (int(meter_id),))


def write_meter(conn: Connection, meter_id: int, start: np.ndarray, values: dict[str, np.ndarray],
                flags: np.ndarray, batch_id: int, *, interval_minutes: int | None = None,
                source_mtime: float | None = None, force: bool = False, apply: bool = True) -> WriteCounts:
    """Insert new intervals, revise changed ones, leave identical ones; returns the counts.

    ``start`` is sorted. ``interval_minutes`` is the meter's (read from the meter when not
    given). ``source_mtime`` is the file's modification time (recorded on its batch by the
    caller); with ``force`` superseded and older values are applied too. When the counts say
    ``older``, nothing was written for this meter. ``apply=False`` only counts.
    """
    counts = WriteCounts()
    n = len(start)
    if not n:
        return counts
    start = np.asarray(start, dtype=np.int64)
    flags = np.asarray(flags, dtype=np.int16)
    if interval_minutes is None:
        interval_minutes = conn.exec_driver_sql(
            f"SELECT interval_minutes FROM meter WHERE id = {_ph(conn, 1)}", (int(meter_id),)).scalar()
    minutes = int(interval_minutes or 15)
    step = minutes * 60
    if apply:
        _lock_meter(conn, meter_id)
    block = block_of(start, minutes)
    touched = np.unique(block)
    stored = stored_blocks(conn, meter_id, touched, minutes)
    if not len(stored.start):  # nothing of these blocks is stored: every interval is new
        counts.inserted = n
        if apply:
            insert_blocks(conn, meter_id, gather(Intervals(start, values, flags, np.full(n, batch_id, np.int32)),
                                                 minutes))
        return counts
    cur = Blocks.empty(touched)
    at = np.searchsorted(touched, stored.start)
    for q in QUANTITIES:
        cur.values[q][at] = stored.values[q]
    cur.flags[at] = stored.flags
    cur.batch[at] = stored.batch
    bi = np.searchsorted(touched, block)
    slot = (start - block) // step
    old_flags = cur.flags[bi, slot]
    pos = np.flatnonzero(old_flags != ABSENT)  # incoming intervals already stored
    old_values = {q: cur.values[q][bi[pos], slot[pos]] for q in QUANTITIES}
    old_batch = cur.batch[bi[pos], slot[pos]]
    same = _same_rows(old_values, old_flags[pos], {q: values[q][pos] for q in QUANTITIES}, flags[pos])
    changed = ~same
    counts.unchanged = int(same.sum())
    if changed.any() and not force:
        replayed = _superseded(conn, meter_id, start, values, flags, pos[changed])
        counts.superseded = int(replayed.sum())
        keep = np.flatnonzero(changed)[replayed]
        changed[keep] = False
        if changed.any() and source_mtime is not None:
            newer = _newer_batches(conn, old_batch[changed], source_mtime)
            if newer:
                counts.older = int(np.isin(old_batch[changed], list(newer)).sum())
                counts.newer_batches = newer
                return counts
    new_idx = np.flatnonzero(old_flags == ABSENT)
    counts.revised = int(changed.sum())
    counts.inserted = len(new_idx)
    if not apply or not (counts.inserted or counts.revised):
        return counts
    if counts.revised:
        _keep_revisions(conn, meter_id, start[pos[changed]], {q: v[changed] for q, v in old_values.items()},
                        old_flags[pos[changed]], old_batch[changed], batch_id)
    write = np.concatenate([new_idx, pos[changed]])
    wb, ws = bi[write], slot[write]
    for q in QUANTITIES:
        cur.values[q][wb, ws] = values[q][write]
    cur.flags[wb, ws] = flags[write]
    cur.batch[wb, ws] = batch_id
    dirty = np.zeros(len(touched), bool)
    dirty[wb] = True
    existed = np.zeros(len(touched), bool)
    existed[at] = True
    insert_blocks(conn, meter_id, cur.take(dirty & ~existed))
    _update_blocks(conn, meter_id, cur.take(dirty & existed))
    return counts


def _keep_revisions(conn: Connection, meter_id: int, start: np.ndarray, values: dict[str, np.ndarray],
                    flags: np.ndarray, batch: np.ndarray, superseded_by: int) -> None:
    """The stored values of revised intervals, into ``reading_revision`` (NaN: no value)."""
    cols = ("meter_id", "start", *QUANTITIES, "flags", "batch_id", "superseded_by")
    vals = [[None if np.isnan(x) else x for x in values[q].tolist()] for q in QUANTITIES]
    params = [(int(meter_id), s, *v, f, b, int(superseded_by))
              for s, *v, f, b in zip(start.tolist(), *vals, flags.tolist(), batch.tolist(), strict=True)]
    conn.exec_driver_sql(f"INSERT INTO reading_revision ({', '.join(cols)}) VALUES ({_ph(conn, len(cols))})",
                         params)


def _same_rows(a: dict[str, np.ndarray], a_flags: np.ndarray, b: dict[str, np.ndarray],
               b_flags: np.ndarray) -> np.ndarray:
    same = a_flags == b_flags
    for q in QUANTITIES:
        same &= np.isclose(a[q].astype("float64"), b[q], rtol=1e-12, atol=1e-9, equal_nan=True)
    return same


def _superseded(conn: Connection, meter_id: int, start: np.ndarray, values: dict[str, np.ndarray],
                flags: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """For the incoming rows ``idx`` (which differ from the stored ones): True where the incoming
    values and flags equal a value stored before and since replaced (in ``reading_revision``)."""
    out = np.zeros(len(idx), bool)
    sql = (f"SELECT start, {', '.join(QUANTITIES)}, flags FROM reading_revision WHERE meter_id = {_ph(conn, 1)} "
           f"AND start >= {_ph(conn, 1)} AND start <= {_ph(conn, 1)}")
    rows = conn.exec_driver_sql(sql, (int(meter_id), int(start[idx[0]]), int(start[idx[-1]]))).fetchall()
    if not rows:
        return out
    rev = np.array(rows, dtype=np.float64)  # None (no value) becomes NaN
    rev_start = rev[:, 0].astype(np.int64)
    where = np.searchsorted(start[idx], rev_start)
    ok = where < len(idx)
    ok[ok] = start[idx][where[ok]] == rev_start[ok]
    at = idx[where[ok]]
    match = _same_rows({q: rev[ok, 1 + i] for i, q in enumerate(QUANTITIES)}, rev[ok, -1].astype(np.int64),
                       {q: values[q][at] for q in QUANTITIES}, flags[at])
    out[np.isin(idx, at[match])] = True
    return out


def _newer_batches(conn: Connection, batch_ids: np.ndarray, source_mtime: float) -> set[int]:
    """The batches among ``batch_ids`` whose file was modified clearly after ``source_mtime``."""
    ids = sorted({int(b) for b in np.unique(batch_ids)})
    if not ids:
        return set()
    sql = f"SELECT id, source_mtime FROM import_batch WHERE id IN ({_ph(conn, len(ids))})"
    return {int(i) for i, m in conn.exec_driver_sql(sql, tuple(ids)).fetchall()
            if m is not None and source_mtime < float(m) - OLDER_SLACK_S}
