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
    """The interval frame of one meter (DEVELOPERS.md): UTC index, multiplier applied."""
    conn = session.connection()
    mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    where = [f"meter_id = {mark}"]
    params: list = [meter.id]
    if start_utc is not None:
        where.append(f"start >= {mark}")
        params.append(int(start_utc))
    if end_utc is not None:
        where.append(f"start < {mark}")
        params.append(int(end_utc))
    # COALESCE keeps NULLs (absent channels) out of the rows, so numpy converts them in C;
    # the driver's own cursor skips SQLAlchemy's per-row result processing (3x faster here).
    cols = ", ".join(f"COALESCE({q}, 0)" for q in QUANTITIES)
    sql = f"SELECT start, {cols}, flags FROM reading WHERE {' AND '.join(where)} ORDER BY start"
    cur = conn.connection.driver_connection.cursor()
    try:
        cur.execute(sql, tuple(params))
        rows = cur.fetchall()
    finally:
        cur.close()
    return interval_frame(rows, meter.multiplier)


def interval_frame(rows: list[tuple], multiplier: float = 1.0) -> pd.DataFrame:
    import numpy as np  # here, not at the top: listing meters does without them
    import pandas as pd

    if rows:
        arr = np.array(rows, dtype="float64")
        start = arr[:, 0].astype("int64")
        vals = arr[:, 1:5]
        flags = arr[:, 5].astype("int64")
    else:
        start = np.empty(0, "int64")
        vals = np.empty((0, 4))
        flags = np.empty(0, "int64")
    vals = np.nan_to_num(vals, nan=0.0) * multiplier
    index = pd.DatetimeIndex(pd.to_datetime(start, unit="s", utc=True), name="start")
    frame = pd.DataFrame({q: vals[:, i] for i, q in enumerate(QUANTITIES)}, index=index)
    frame["estimated"] = (flags & (FLAG_ESTIMATED | FLAG_FILLED)) != 0
    return frame


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
