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


def reading_count(store: Store) -> int:
    with store.engine.connect() as c:
        return c.exec_driver_sql("SELECT count(*) FROM reading").scalar()


def readings(store: Store) -> pd.DataFrame:
    with store.engine.connect() as c:
        rows = c.exec_driver_sql("SELECT meter_id, start, kwh, kvarh_lag, kvarh_lead, flags FROM reading "
                                 "ORDER BY meter_id, start").fetchall()
    return pd.DataFrame(rows, columns=["meter_id", "start", "kwh", "kvarh_lag", "kvarh_lead", "flags"])


def epoch(ts: str) -> int:
    return int(pd.Timestamp(ts).tz_convert("UTC").value // 10**9)


__all__ = ["np", "new_store", "write_csv", "day_rows", "reading_count", "readings", "epoch", "HEADER"]
