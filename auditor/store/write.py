"""Bulk writes of validated readings, with revisions.

Volume path: rows go through the DBAPI driver's ``executemany`` with plain tuples (SQLite), or
binary ``COPY`` built by numpy (PostgreSQL), never one ORM object per interval. Everything happens inside the caller's
transaction, so a file is wholly stored or not at all.

Revisions are decided by content, interval by interval (README, "Re-imports and revisions"):

* an incoming interval already stored with the same values (and flags) is left alone;
* one whose incoming values were stored before and later replaced (they are in
  ``reading_revision``) is *superseded*: the file replays old content, as a re-saved copy of an
  old export does, and the stored newer values stay (``force`` applies it anyway);
* one stored with other values is a revision: the stored row is copied to ``reading_revision``
  (with the batch that superseded it) and replaced by the newer value — unless the file is
  *older* than the file that wrote the stored value: its modification time is earlier by more
  than ``OLDER_SLACK_S``. Then nothing of the meter is written and the counts say how many
  intervals the file would change; the caller rolls the file back (``force`` applies it).

The import pipeline uses only :func:`import_session` (the file's one transaction) and
:func:`write_meter` (one meter's sorted rows as numpy arrays, returning :class:`WriteCounts`):
a different storage layout for ``reading`` changes this module, not the pipeline.
"""
from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sqlalchemy import Connection
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from auditor.store.models import QUANTITIES

READING_COLUMNS = ("meter_id", "start", *QUANTITIES, "flags", "batch_id")
BATCH_ROWS = 100_000
# Files whose modification times are this close are taken as written at the same time (a
# checkout, an unpacked archive or a copy without preserved times): neither is older.
OLDER_SLACK_S = 60.0


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


def insert_rows(conn: Connection, meter_id: int, start: np.ndarray, values: dict[str, np.ndarray],
                flags: np.ndarray, batch_id: int) -> int:
    if not len(start):
        return 0
    try:
        if conn.dialect.name == "postgresql":
            return _copy_rows(conn, meter_id, start, values, flags, batch_id)
        return _executemany_rows(conn, meter_id, start, values, flags, batch_id)
    except conn.dialect.loaded_dbapi.Error as exc:
        # the raw driver's errors (disk full, read-only, a key another import just wrote) as the
        # SQLAlchemy classes every caller handles
        raise DBAPIError.instance("INSERT INTO reading", None, exc, conn.dialect.loaded_dbapi.Error,
                                  dialect=conn.dialect) from exc


def _executemany_rows(conn, meter_id, start, values, flags, batch_id) -> int:
    """The SQLite bulk path: one prepared INSERT, rows bound as tuples.

    Columns that are the same for every row of the call (the meter, the batch, an absent
    channel, flags when none is set) are written into the statement as literals, so each row
    binds only what varies: in the common case 4 values instead of 8, which is most of the cost.
    All literals are integers or NULL produced here, never text from a file.
    """
    n = len(start)
    exprs: list[str] = []
    varying: list[np.ndarray] = []
    mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    for col in READING_COLUMNS:
        if col == "meter_id":
            exprs.append(str(int(meter_id)))
        elif col == "batch_id":
            exprs.append(str(int(batch_id)))
        elif col == "flags":
            if n and (flags == flags[0]).all():
                exprs.append(str(int(flags[0])))
            else:
                exprs.append(mark)
                varying.append(flags)
        elif col == "start":
            exprs.append(mark)
            varying.append(start)
        else:
            v = values[col]
            if np.isnan(v).all():
                exprs.append("NULL")
            else:
                # SQLite stores a bound NaN as NULL, which is what a missing value means
                exprs.append(mark)
                varying.append(v)
    sql = f"INSERT INTO reading ({', '.join(READING_COLUMNS)}) VALUES ({', '.join(exprs)})"
    raw = conn.connection.driver_connection
    cur = raw.cursor()
    try:
        for lo in range(0, n, BATCH_ROWS):
            cols = [a[lo:lo + BATCH_ROWS].tolist() for a in varying]
            cur.executemany(sql, zip(*cols, strict=True))
    finally:
        cur.close()
    return n


# PostgreSQL binary COPY: the fixed binary header, and the trailer (a field count of -1)
_PGCOPY_HEADER = b"PGCOPY\n\xff\r\n\x00" + b"\x00" * 8
_PGCOPY_TRAILER = b"\xff\xff"
_NULL = -1


def copy_payload(meter_id: int, start: np.ndarray, values: dict[str, np.ndarray], flags: np.ndarray,
                 batch_id: int) -> list[bytes]:
    """Rows of ``reading`` in PostgreSQL's binary COPY format, built with numpy, no loop over rows.

    Each tuple is a big-endian int16 field count, then per field an int32 byte length and the
    value (length -1 and no bytes for NULL). The column types must match the table exactly:
    int4 meter_id, int8 start, float8 quantities, int2 flags, int4 batch_id (migration 0001).
    A NaN (a channel the file does not have) becomes NULL. Rows are grouped by which quantities
    are NULL, since that changes a tuple's length; row order does not matter to a table.

    References
    ----------
    PostgreSQL documentation, "COPY", section "Binary Format".
    """
    nan = np.column_stack([np.isnan(values[q]) for q in QUANTITIES])
    pattern = nan.astype(np.int8) @ (1 << np.arange(len(QUANTITIES), dtype=np.int8))
    out = []
    for code in np.unique(pattern):
        rows = np.flatnonzero(pattern == code) if len(np.unique(pattern)) > 1 else slice(None)
        null = [bool(code >> i & 1) for i in range(len(QUANTITIES))]
        fields = [("n", ">i2"), ("l_meter", ">i4"), ("meter", ">i4"), ("l_start", ">i4"), ("start", ">i8")]
        for q, is_null in zip(QUANTITIES, null, strict=True):
            fields.append((f"l_{q}", ">i4"))
            if not is_null:
                fields.append((q, ">f8"))
        fields += [("l_flags", ">i4"), ("flags", ">i2"), ("l_batch", ">i4"), ("batch", ">i4")]
        st = start[rows]
        rec = np.empty(len(st), dtype=np.dtype(fields))
        rec["n"] = len(READING_COLUMNS)
        rec["l_meter"], rec["meter"] = 4, meter_id
        rec["l_start"], rec["start"] = 8, st
        for q, is_null in zip(QUANTITIES, null, strict=True):
            rec[f"l_{q}"] = _NULL if is_null else 8
            if not is_null:
                rec[q] = values[q][rows]
        rec["l_flags"], rec["flags"] = 2, flags[rows]
        rec["l_batch"], rec["batch"] = 4, batch_id
        out.append(rec.tobytes())
    return out


def _copy_rows(conn, meter_id, start, values, flags, batch_id) -> int:
    raw = conn.connection.driver_connection
    sql = f"COPY reading ({', '.join(READING_COLUMNS)}) FROM STDIN (FORMAT BINARY)"
    with raw.cursor() as cur:
        with cur.copy(sql) as copy:
            copy.write(_PGCOPY_HEADER)
            for lo in range(0, len(start), BATCH_ROWS):
                sl = slice(lo, lo + BATCH_ROWS)
                for block in copy_payload(meter_id, start[sl], {q: v[sl] for q, v in values.items()},
                                          flags[sl], batch_id):
                    copy.write(block)
            copy.write(_PGCOPY_TRAILER)
    return len(start)


_EMPTY = pd.DataFrame(columns=["start", *QUANTITIES, "flags", "batch_id"])


def existing_rows(conn: Connection, meter_id: int, first: int, last: int) -> pd.DataFrame:
    sql = (f"SELECT start, {', '.join(QUANTITIES)}, flags, batch_id FROM reading "
           f"WHERE meter_id = {_ph(conn, 1)} AND start >= {_ph(conn, 1)} AND start <= {_ph(conn, 1)} ORDER BY start")
    cur = conn.exec_driver_sql(sql, (meter_id, int(first), int(last)))
    rows = cur.fetchall()
    if not rows:
        return _EMPTY
    return pd.DataFrame(rows, columns=["start", *QUANTITIES, "flags", "batch_id"]).astype(
        {"start": "int64", **{q: "float64" for q in QUANTITIES}})


def write_meter(conn: Connection, meter_id: int, start: np.ndarray, values: dict[str, np.ndarray],
                flags: np.ndarray, batch_id: int, *, source_mtime: float | None = None, force: bool = False,
                apply: bool = True) -> WriteCounts:
    """Insert new intervals, revise changed ones, leave identical ones; returns the counts.

    ``start`` is sorted. ``source_mtime`` is the file's modification time (recorded on its batch
    by the caller); with ``force`` superseded and older values are applied too. When the counts
    say ``older``, nothing was written for this meter. ``apply=False`` only counts.
    """
    counts = WriteCounts()
    if not len(start):
        return counts
    old = existing_rows(conn, meter_id, int(start[0]), int(start[-1]))
    if old.empty:
        counts.inserted = insert_rows(conn, meter_id, start, values, flags, batch_id) if apply else len(start)
        return counts
    old_start = old["start"].to_numpy()
    pos = np.searchsorted(start, old_start)
    pos_ok = (pos < len(start))
    pos_ok[pos_ok] = start[pos[pos_ok]] == old_start[pos_ok]
    old = old.loc[pos_ok]
    pos = pos[pos_ok]
    is_old = np.zeros(len(start), bool)
    is_old[pos] = True
    same = _same_rows({q: old[q].to_numpy() for q in QUANTITIES}, old["flags"].to_numpy(),
                      {q: values[q][pos] for q in QUANTITIES}, flags[pos])
    changed = ~same
    counts.unchanged = int(same.sum())
    if changed.any() and not force:
        replayed = _superseded(conn, meter_id, start, values, flags, pos[changed])
        counts.superseded = int(replayed.sum())
        keep = np.flatnonzero(changed)[replayed]
        changed[keep] = False
        if changed.any() and source_mtime is not None:
            newer = _newer_batches(conn, old["batch_id"].to_numpy()[changed], source_mtime)
            if newer:
                counts.older = int(np.isin(old["batch_id"].to_numpy()[changed], list(newer)).sum())
                counts.newer_batches = newer
                return counts
    new_idx = np.flatnonzero(~is_old)
    counts.revised = int(changed.sum())
    if not apply:
        counts.inserted = len(new_idx)
        return counts
    counts.inserted = insert_rows(conn, meter_id, start[new_idx], {q: v[new_idx] for q, v in values.items()},
                                  flags[new_idx], batch_id)
    if changed.any():
        prev = old.loc[changed]
        rev_cols = ("meter_id", "start", *QUANTITIES, "flags", "batch_id", "superseded_by")
        rev_rows = [
            (meter_id, int(r.start), *[None if pd.isna(getattr(r, q)) else float(getattr(r, q)) for q in QUANTITIES],
             int(r.flags), int(r.batch_id), batch_id)
            for r in prev.itertuples(index=False)
        ]
        conn.exec_driver_sql(
            f"INSERT INTO reading_revision ({', '.join(rev_cols)}) VALUES ({_ph(conn, len(rev_cols))})", rev_rows)
        idx = pos[changed]
        upd = [(*[None if np.isnan(values[q][i]) else float(values[q][i]) for q in QUANTITIES], int(flags[i]),
                batch_id, meter_id, int(start[i])) for i in idx]
        sets = ", ".join(f"{c} = {_ph(conn, 1)}" for c in (*QUANTITIES, "flags", "batch_id"))
        conn.exec_driver_sql(
            f"UPDATE reading SET {sets} WHERE meter_id = {_ph(conn, 1)} AND start = {_ph(conn, 1)}", upd)
    return counts


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
    rows = conn.exec_driver_sql(sql, (meter_id, int(start[idx[0]]), int(start[idx[-1]]))).fetchall()
    if not rows:
        return out
    rev = pd.DataFrame(rows, columns=["start", *QUANTITIES, "flags"]).astype(
        {"start": "int64", **{q: "float64" for q in QUANTITIES}})
    where = np.searchsorted(start[idx], rev["start"].to_numpy())
    ok = where < len(idx)
    ok[ok] = start[idx][where[ok]] == rev["start"].to_numpy()[ok]
    at = idx[where[ok]]
    match = _same_rows({q: rev[q].to_numpy()[ok] for q in QUANTITIES}, rev["flags"].to_numpy()[ok],
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
