"""Small builders for ingest tests."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from auditor.store import open_store
from auditor.store.engine import Store

HEADER = "meter,start,kwh,kvarh_lag,kvarh_lead"


def new_store(tmp_path: Path) -> Store:
    return open_store(f"sqlite:///{tmp_path / 'test.sqlite3'}")


def write_csv(path: Path, lines: list[str], header: str = HEADER) -> Path:
    path.write_text(header + "\n" + "\n".join(lines) + "\n", encoding="utf-8")
    return path


def day_rows(meter="M1", day="2025-01-06", n=96, kwh=10.0, lag=6.0, lead=0.0, tz="+00:00") -> list[str]:
    t0 = pd.Timestamp(f"{day}T00:00:00{tz}")
    out = []
    for i in range(n):
        t = (t0 + pd.Timedelta(minutes=15 * i)).isoformat()
        out.append(f"{meter},{t},{kwh + i * 0.01:.3f},{lag:.3f},{lead:.3f}")
    return out


def stored_rows(store_or_conn, meter_id: int | None = None) -> list[tuple]:
    """Every stored interval as ``(meter_id, start, kwh, kvarh_lag, kvarh_lead, kwh_received,
    flags, batch_id)`` (None where there is no value), by meter and start: the blocks of
    ``reading_block`` unpacked by the codec."""
    from auditor.store.blocks import STORED_COLUMNS, interval_rows, unpack

    def rows_of(c) -> list[tuple]:
        meters = c.exec_driver_sql("SELECT id, coalesce(interval_minutes, 15) FROM meter ORDER BY id").fetchall()
        out = []
        for mid, minutes in meters:
            if meter_id is not None and mid != meter_id:
                continue
            mark = "?" if c.dialect.paramstyle == "qmark" else "%s"
            blocks = c.exec_driver_sql(f"SELECT {', '.join(STORED_COLUMNS)} FROM reading_block WHERE meter_id = "
                                       f"{mark} ORDER BY block_start", (mid,)).fetchall()
            out += interval_rows(mid, unpack([tuple(b) for b in blocks], minutes))
        return out

    if isinstance(store_or_conn, Store):
        with store_or_conn.engine.connect() as c:
            return rows_of(c)
    return rows_of(store_or_conn)


def reading_count(store: Store) -> int:
    return len(stored_rows(store))


def readings(store: Store) -> pd.DataFrame:
    rows = [r[:5] + (r[6],) for r in stored_rows(store)]
    return pd.DataFrame(rows, columns=["meter_id", "start", "kwh", "kvarh_lag", "kvarh_lead", "flags"])


def epoch(ts: str) -> int:
    return int(pd.Timestamp(ts).tz_convert("UTC").value // 10**9)


__all__ = ["np", "new_store", "write_csv", "day_rows", "reading_count", "readings", "stored_rows", "epoch",
           "HEADER"]
