"""Queries that return DataFrames or plain dicts for the service layer."""
from __future__ import annotations

from datetime import UTC, datetime
from typing import TYPE_CHECKING

from sqlalchemy import select
from sqlalchemy.orm import Session

from auditor.errors import NotFoundError
from auditor.store.models import (
    FLAG_ESTIMATED,
    FLAG_FILLED,
    QUANTITIES,
    ImportBatch,
    Meter,
    QualityFlag,
    Site,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def now_utc() -> datetime:
    return datetime.now(UTC)


def get_meter(session: Session, external_id: str) -> Meter:
    meter = session.scalar(select(Meter).where(Meter.external_id == external_id))
    if meter is None:
        known = session.scalars(select(Meter.external_id).order_by(Meter.external_id).limit(20)).all()
        hint = f"; known meters: {', '.join(known)}" if known else "; the database has no meters yet"
        raise NotFoundError(f"no meter {external_id!r}{hint}", cli_hint=None if known else "auditor import FILE")
    return meter


def read_intervals(session: Session, meter: Meter, start_utc: int | None = None,
                   end_utc: int | None = None) -> pd.DataFrame:
    """The interval frame of one meter (DEVELOPERS.md): UTC index, multiplier applied.

    No Python object per interval where the driver allows it: the block layout
    (:mod:`auditor.store.blocks`, used when the store has ``reading_block``) reads one row per
    block; PostgreSQL sends each column packed into one ``bytea``, which numpy reads whole; SQLite
    rows come through the driver's own cursor (SQLAlchemy's per-row processing skipped) into
    one flat numpy array.
    """
    conn = session.connection()
    if has_blocks(conn):
        return _read_blocks(conn, meter, start_utc, end_utc)
    where, params = _range_where(conn, meter, start_utc, end_utc)
    # COALESCE keeps NULLs (absent channels) out of the rows: numpy converts every value in C,
    # and on PostgreSQL every packed value has the same length.
    cols = ", ".join(f"COALESCE({q}, 0)" for q in QUANTITIES)
    sql = f"SELECT start, {cols}, flags FROM reading WHERE {where} ORDER BY start"
    if conn.dialect.name == "postgresql":
        start, vals, flags = _read_pg_packed(conn, sql, params)
    else:
        start, vals, flags = _read_rows(conn, sql, params)
    return _frame(start, vals, flags, meter.multiplier)


def _range_where(conn, meter: Meter, start_utc: int | None, end_utc: int | None) -> tuple[str, list]:
    mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    where = [f"meter_id = {mark}"]
    params: list = [meter.id]
    if start_utc is not None:
        where.append(f"start >= {mark}")
        params.append(int(start_utc))
    if end_utc is not None:
        where.append(f"start < {mark}")
        params.append(int(end_utc))
    return " AND ".join(where), params


def _read_rows(conn, sql: str, params: list):
    import itertools

    import numpy as np

    cur = conn.connection.driver_connection.cursor()
    try:
        cur.execute(sql, tuple(params))
        rows = cur.fetchall()
    finally:
        cur.close()
    width = 2 + len(QUANTITIES)
    # one flat pass over the tuples (np.array of a list of tuples inspects each one first)
    arr = np.fromiter(itertools.chain.from_iterable(rows), dtype=np.float64, count=len(rows) * width)
    arr = arr.reshape(len(rows), width)
    return arr[:, 0].astype(np.int64), arr[:, 1:1 + len(QUANTITIES)], arr[:, -1].astype(np.int64)


def _read_pg_packed(conn, sql: str, params: list):
    """Rows of ``sql`` (int8 start, float8 quantities, int2 flags, never NULL) as one packed
    ``bytea`` per column: the server concatenates each value's binary form (``int8send``,
    ``float8send``, ``int2send``) with ``string_agg``, and numpy reads each column in one piece
    (big-endian, PostgreSQL's binary format). The client builds no object per row; binary
    ``COPY`` would, since the driver hands over one message per row.

    The aggregates read a subquery sorted by start, which PostgreSQL's documentation says
    "usually" keeps the order; the starts are checked and the arrays sorted if it did not.
    """
    import numpy as np

    n = len(QUANTITIES)
    names = ["start", *[f"q{i}" for i in range(n)], "flags"]
    inner = sql.replace(f"SELECT start, {', '.join(f'COALESCE({q}, 0)' for q in QUANTITIES)}, flags",
                        "SELECT start, " + ", ".join(f"COALESCE({q}, 0) AS q{i}" for i, q in enumerate(QUANTITIES))
                        + ", flags", 1)
    send = {"start": "int8send", "flags": "int2send"}
    packed = ", ".join(f"string_agg({send.get(c, 'float8send')}({c}), ''::bytea)" for c in names)
    raw = conn.connection.driver_connection
    with raw.cursor(binary=True) as cur:
        cur.execute(f"SELECT {packed} FROM ({inner}) AS rows_in_order", params)
        row = cur.fetchone()
    if row is None or row[0] is None:
        return np.empty(0, np.int64), np.empty((0, n)), np.empty(0, np.int64)
    start = np.frombuffer(row[0], ">i8").astype(np.int64)
    vals = np.column_stack([np.frombuffer(row[1 + i], ">f8") for i in range(n)]).astype(np.float64)
    flags = np.frombuffer(row[-1], ">i2").astype(np.int64)
    if len(start) > 1 and not (np.diff(start) > 0).all():
        order = np.argsort(start, kind="stable")
        start, vals, flags = start[order], vals[order], flags[order]
    return start, vals, flags


def has_blocks(conn) -> bool:
    """Whether the store keeps readings in the block layout (``reading_block``), asked once per
    engine (the answer is kept on the engine itself)."""
    engine = conn.engine
    found = engine.__dict__.get("_auditor_has_blocks")
    if found is None:
        from sqlalchemy import inspect

        found = engine.__dict__["_auditor_has_blocks"] = inspect(conn).has_table("reading_block")
    return found


def _read_blocks(conn, meter: Meter, start_utc: int | None, end_utc: int | None) -> pd.DataFrame:
    import numpy as np

    from auditor.store.blocks import block_seconds, unpack

    minutes = meter.interval_minutes or 15
    span = block_seconds(minutes)
    mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    where, params = [f"meter_id = {mark}"], [meter.id]
    if start_utc is not None:
        where.append(f"block_start > {mark}")
        params.append(int(start_utc) - span)
    if end_utc is not None:
        where.append(f"block_start < {mark}")
        params.append(int(end_utc))
    sql = (f"SELECT block_start, {', '.join(QUANTITIES)}, flags, batch_id, batch_ids FROM reading_block "
           f"WHERE {' AND '.join(where)} ORDER BY block_start")
    cur = conn.connection.driver_connection.cursor()
    try:
        cur.execute(sql, tuple(params))
        rows = cur.fetchall()
    finally:
        cur.close()
    iv = unpack(rows, minutes, start_utc, end_utc)
    return _frame(iv.start, iv.values, iv.flags.astype(np.int64), meter.multiplier)


def _frame(start, vals, flags, multiplier: float = 1.0) -> pd.DataFrame:
    """The interval frame from starts, values (an (n, 4) array or one array per quantity) and flags."""
    import numpy as np  # here, not at the top: listing meters does without them
    import pandas as pd

    columns = {}
    for i, q in enumerate(QUANTITIES):
        v = (vals[q] if isinstance(vals, dict) else vals[:, i]) * multiplier  # a new array
        v[np.isnan(v)] = 0.0  # an absent value counts as zero energy
        columns[q] = v
    columns["estimated"] = (flags & (FLAG_ESTIMATED | FLAG_FILLED)) != 0
    index = pd.DatetimeIndex(pd.to_datetime(start, unit="s", utc=True), name="start")
    return pd.DataFrame(columns, index=index, copy=False)


def interval_frame(rows: list[tuple], multiplier: float = 1.0) -> pd.DataFrame:
    """The interval frame of rows ``(start, kwh, kvarh_lag, kvarh_lead, kwh_received, flags)``."""
    import numpy as np

    if rows:
        arr = np.array(rows, dtype="float64")
        return _frame(arr[:, 0].astype("int64"), arr[:, 1:5], arr[:, 5].astype("int64"), multiplier)
    return _frame(np.empty(0, "int64"), np.empty((0, 4)), np.empty(0, "int64"), multiplier)


def meter_summaries(session: Session) -> list[dict]:
    """Every meter by site with the span, count and coverage of its readings (from
    ``meter_data``: one row per meter, no scan of ``reading``)."""
    from auditor.store.meter_data import ensure_current, versions

    conn = session.connection()
    ensure_current(conn)
    by_meter = versions(conn)
    out = []
    for meter, site in session.execute(select(Meter, Site).join(Site).order_by(Site.name, Meter.external_id)):
        _, lo, hi, n = by_meter.get(meter.id, (None, None, None, 0))
        step = (meter.interval_minutes or 15) * 60
        expected = (hi - lo) // step + 1 if n else 0
        out.append({
            "meter": meter.external_id,
            "site": site.name,
            "timezone": site.timezone,
            "interval_minutes": meter.interval_minutes,
            "multiplier": meter.multiplier,
            "first": _iso(lo),
            "last": _iso(hi + step) if hi is not None else None,
            "intervals": int(n),
            "coverage": round(n / expected, 6) if expected else None,
        })
    return out


def _iso(epoch: int | None) -> str | None:
    if epoch is None:
        return None
    return datetime.fromtimestamp(int(epoch), UTC).isoformat().replace("+00:00", "Z")


def batches(session: Session, limit: int = 200) -> list[ImportBatch]:
    return list(session.scalars(select(ImportBatch).order_by(ImportBatch.id.desc()).limit(limit)))


def quality_flags(session: Session, meter: Meter) -> list[QualityFlag]:
    return list(session.scalars(select(QualityFlag).where(QualityFlag.meter_id == meter.id)
                                .order_by(QualityFlag.start)))
