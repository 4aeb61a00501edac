"""Each meter's data version: the span and count of its stored readings and the import batch
that last changed them (table ``meter_data``).

The import calls :func:`record_write` for every meter whose readings it inserted or revised,
inside the file's transaction, so the version moves exactly when the data do. Listing meters and
keeping portfolio summaries then read one small row per meter instead of scanning the readings
(``reading_block``).

:func:`ensure_current` is the safety net for data written any other way (a database from before
the table existed is filled by its migration): when an import batch that changed readings is
newer than every recorded version, the versions are rebuilt from ``reading_block`` in one pass.
"""
from __future__ import annotations

from collections.abc import Iterable

from sqlalchemy import Connection

CHANGED_STATUSES = ("imported", "revised")


def _mark(conn: Connection) -> str:
    return "?" if conn.dialect.paramstyle == "qmark" else "%s"


def record_write(conn: Connection, meter_id: int, batch_id: int, *, inserted: int, revised: int,
                 first_start: int, last_start: int) -> None:
    """Note that ``batch_id`` inserted ``inserted`` new intervals and revised ``revised`` stored
    ones of a meter, between ``first_start`` and ``last_start`` (UTC epoch seconds). A write that
    changed nothing leaves the version alone."""
    if not inserted and not revised:
        return
    m = _mark(conn)
    cur = conn.exec_driver_sql(
        f"UPDATE meter_data SET data_batch_id = {m}, intervals = intervals + {m}, "
        f"first_start = CASE WHEN first_start < {m} THEN first_start ELSE {m} END, "
        f"last_start = CASE WHEN last_start > {m} THEN last_start ELSE {m} END WHERE meter_id = {m}",
        (int(batch_id), int(inserted), int(first_start), int(first_start), int(last_start), int(last_start),
         int(meter_id)))
    if cur.rowcount == 0:
        conn.exec_driver_sql(
            f"INSERT INTO meter_data (meter_id, data_batch_id, first_start, last_start, intervals) "
            f"VALUES ({m}, {m}, {m}, {m}, {m})",
            (int(meter_id), int(batch_id), int(first_start), int(last_start), int(inserted)))


def spans(conn: Connection, meter_ids: Iterable[int] | None = None,
          size: int | None = None) -> dict[int, tuple[int, int, int, int]]:
    """``{meter_id: (newest batch, first start, last start, intervals)}`` computed from the stored
    blocks (all meters, or the given ones; blocks of ``size`` intervals, default the current
    layout's): one aggregate per meter, and the flags of the blocks that have empty slots (only
    those can hold fewer than a block's intervals or start late)."""
    import numpy as np

    from auditor.store.blocks import ABSENT, BLOCK

    per_block = size or BLOCK
    m = _mark(conn)
    ids = None if meter_ids is None else sorted({int(x) for x in meter_ids})
    if ids is not None and not ids:
        return {}
    where = "" if ids is None else f" WHERE b.meter_id IN ({', '.join([m] * len(ids))})"
    params = () if ids is None else tuple(ids)
    agg = conn.exec_driver_sql(
        "SELECT b.meter_id, max(b.batch_id), min(b.block_start), max(b.block_start), count(*), "
        "coalesce(max(x.interval_minutes), 15) FROM reading_block b JOIN meter x ON x.id = b.meter_id"
        f"{where} GROUP BY b.meter_id", params).all()
    # newest batch, first start, last start, intervals, interval seconds; full blocks assumed
    out = {}
    for mid, newest, lo, hi, n, minutes in agg:
        step = 60 * int(minutes)
        out[int(mid)] = [int(newest), int(lo), int(hi) + (per_block - 1) * step, per_block * int(n), step, int(lo), int(hi)]
    partial = conn.exec_driver_sql(
        f"SELECT b.meter_id, b.block_start, b.flags FROM reading_block b{where}"
        f"{' AND' if where else ' WHERE'} b.flags IS NOT NULL", params)
    for mid, bs, fl in partial:
        present = np.flatnonzero(np.frombuffer(fl, "<i2") != ABSENT)
        o = out[int(mid)]
        o[3] -= per_block - len(present)
        if len(present) and int(bs) == o[5]:
            o[1] = int(bs) + int(present[0]) * o[4]
        if len(present) and int(bs) == o[6]:
            o[2] = int(bs) + int(present[-1]) * o[4]
    return {k: (v[0], v[1], v[2], v[3]) for k, v in out.items()}


def rebuild(conn: Connection, meter_ids: Iterable[int] | None = None) -> None:
    """Recompute the versions from the stored blocks (all meters, or the given ones)."""
    m = _mark(conn)
    ids = None if meter_ids is None else [int(x) for x in meter_ids]
    found = spans(conn, ids)
    if ids is None:
        conn.exec_driver_sql("DELETE FROM meter_data")
    else:
        for mid in ids:
            conn.exec_driver_sql(f"DELETE FROM meter_data WHERE meter_id = {m}", (mid,))
    if found:
        conn.exec_driver_sql(
            "INSERT INTO meter_data (meter_id, data_batch_id, first_start, last_start, intervals) "
            f"VALUES ({m}, {m}, {m}, {m}, {m})", [(k, *v) for k, v in sorted(found.items())])


def ensure_current(conn: Connection) -> bool:
    """Rebuild the versions when a batch that changed readings is newer than all of them (data
    written without :func:`record_write`). Returns True when it rebuilt. Two small queries."""
    newest_change = conn.exec_driver_sql(
        "SELECT max(id) FROM import_batch WHERE status IN ('imported', 'revised')").scalar()
    if newest_change is None:
        return False
    recorded = conn.exec_driver_sql("SELECT max(data_batch_id) FROM meter_data").scalar()
    if recorded is not None and recorded >= newest_change:
        return False
    rebuild(conn)
    return True


def versions(conn: Connection) -> dict[int, tuple[int, int, int, int]]:
    """``{meter_id: (data_batch_id, first_start, last_start, intervals)}`` of every meter with readings."""
    rows = conn.exec_driver_sql(
        "SELECT meter_id, data_batch_id, first_start, last_start, intervals FROM meter_data").all()
    return {r[0]: (r[1], r[2], r[3], r[4]) for r in rows}
