#!/usr/bin/env python3
"""Import benchmark, SQLite beside PostgreSQL: the same N meter-years, ``auditor import`` into a
fresh database of each kind, alternating, each run in a child process. Prints every run, then
medians and rows per second as JSON.

    eval "$(bash .ci/postgres.sh)"     # or give --pg-url
    python benchmarks/bench_ingest_pg.py --meters 50 --repeat 3

PostgreSQL runs get a schema of their own (dropped afterwards) in the database the URL names.
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_ingest import child, find_floor  # noqa: E402  (same timing wrapper and generator)


def pg_admin(url: str, sql: str) -> None:
    from sqlalchemy import create_engine

    engine = create_engine(url, isolation_level="AUTOCOMMIT")
    with engine.connect() as conn:
        conn.exec_driver_sql(sql)
    engine.dispose()


def server_settings(url: str) -> dict:
    from sqlalchemy import create_engine

    engine = create_engine(url)
    with engine.connect() as conn:
        out = {k: conn.exec_driver_sql(f"SHOW {k}").scalar() for k in
               ("server_version", "fsync", "synchronous_commit", "shared_buffers", "max_wal_size")}
    engine.dispose()
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--meters", type=int, default=50)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--pg-url", default=os.environ.get("AUDITOR_TEST_PG_URL"))
    ap.add_argument("--floor")
    ap.add_argument("--workdir")
    a = ap.parse_args()
    if not a.pg_url:
        sys.exit("give --pg-url or set AUDITOR_TEST_PG_URL (eval \"$(bash .ci/postgres.sh)\")")
    work = Path(a.workdir or tempfile.mkdtemp(prefix="bench-ingest-pg-"))
    work.mkdir(parents=True, exist_ok=True)
    csv = work / f"meters{a.meters}.csv"
    if not csv.exists():
        t = time.perf_counter()
        subprocess.run([sys.executable, str(find_floor(a.floor)), "make", str(csv), "--meters", str(a.meters)],
                       check=True)
        print(f"wrote {csv.stat().st_size / 1e6:.0f} MB of CSV in {time.perf_counter() - t:.1f} s")
    times: dict[str, list[float]] = {"sqlite": [], "postgresql": []}
    peaks: dict[str, list[float]] = {"sqlite": [], "postgresql": []}
    cmd = [sys.executable, "-m", "auditor", "--quiet", "import", str(csv)]
    for i in range(a.repeat):
        for kind in ("sqlite", "postgresql"):
            if kind == "sqlite":
                db = work / f"run{i}.sqlite3"
                url = f"sqlite:///{db}"
                cleanup = lambda db=db: [p.unlink() for p in db.parent.glob(db.name + "*")]  # noqa: E731
            else:
                schema = f"bench_{uuid.uuid4().hex[:10]}"
                pg_admin(a.pg_url, f'CREATE SCHEMA "{schema}"')
                sep = "&" if "?" in a.pg_url else "?"
                url = f"{a.pg_url}{sep}options=-csearch_path%3D{schema}"
                cleanup = lambda schema=schema: pg_admin(a.pg_url, f'DROP SCHEMA "{schema}" CASCADE')  # noqa: E731
            env = dict(os.environ, AUDITOR_DB_URL=url)
            # migrate first, so both kinds time the import alone
            subprocess.run([sys.executable, "-m", "auditor", "db", "upgrade"], env=env, check=True,
                           capture_output=True)
            try:
                dt, mem = child(cmd, env=env)
            finally:
                cleanup()
            times[kind].append(dt)
            peaks[kind].append(mem)
            print(f"run {i + 1} {kind:<10} {dt:7.2f} s  peak {mem:6.0f} MB", flush=True)
    rows = a.meters * 35040
    med = {k: statistics.median(v) for k, v in times.items()}
    print(json.dumps({
        "meter_years": a.meters, "rows": rows, "repeat": a.repeat,
        "sqlite_median_s": round(med["sqlite"], 2), "postgresql_median_s": round(med["postgresql"], 2),
        "sqlite_rows_per_s": round(rows / med["sqlite"]), "postgresql_rows_per_s": round(rows / med["postgresql"]),
        "postgresql_over_sqlite": round(med["postgresql"] / med["sqlite"], 2),
        "sqlite_peak_mb": round(max(peaks["sqlite"])), "postgresql_peak_mb": round(max(peaks["postgresql"])),
        "postgresql_server": server_settings(a.pg_url),
    }))


if __name__ == "__main__":
    main()
