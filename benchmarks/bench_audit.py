#!/usr/bin/env python3
"""Audit benchmark: 50 meter-years, one tariff, against only reading the same rows into pandas.

Builds (once, in --workdir) an SQLite database of N meter-years imported with ``auditor import``
from the floor generator's CSV, then alternates, --repeat times:
  read   — every meter's interval frame read from the database (auditor.store.queries.read_intervals)
  audit  — the full use case per meter (read + figures + charges: auditor.services.audit.audit_meter)
and prints medians and the ratio audit/read. The ratio's target, ≤ 2, was set while reading
one row per interval was most of an audit's time; the block layout made reading about 14×
faster, so the ratio now rises while the audit itself got faster (0.40 s for 50 meter-years
against 2.65 s): watch ``audit_ms_per_meter_year``, not the ratio.

    python benchmarks/bench_audit.py --meters 50 --repeat 3
"""
from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_ingest import find_floor  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--meters", type=int, default=50)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--tariff", default="harrowgate_industrial_tou")
    ap.add_argument("--floor")
    ap.add_argument("--workdir")
    a = ap.parse_args()
    work = Path(a.workdir or tempfile.mkdtemp(prefix="bench-audit-"))
    work.mkdir(parents=True, exist_ok=True)
    db = work / f"audit{a.meters}.sqlite3"
    url = f"sqlite:///{db}"

    from auditor.ingest.pipeline import import_file
    from auditor.services.audit import audit_meter, resolve_tariff
    from auditor.store import open_store
    from auditor.store.queries import get_meter, read_intervals

    store = open_store(url)
    if not db.exists() or not store.engine.connect().exec_driver_sql("SELECT count(*) FROM reading_block").scalar():
        csv = work / f"meters{a.meters}.csv"
        if not csv.exists():
            subprocess.run([sys.executable, str(find_floor(a.floor)), "make", str(csv), "--meters", str(a.meters)],
                           check=True)
        out = import_file(store, csv)
        assert out.status == "imported", out.message
    with store.session() as s:
        meters = [m for (m,) in s.execute(__import__("sqlalchemy").text("SELECT external_id FROM meter ORDER BY 1"))]
    tariff = resolve_tariff(a.tariff)

    def read_all():
        with store.session() as s:
            return sum(len(read_intervals(s, get_meter(s, m))) for m in meters)

    def audit_all():
        return sum(len(audit_meter(store, m, tariff).result.periods) for m in meters)

    reads, audits = [], []
    rows = periods = 0
    for _ in range(a.repeat):
        t = time.perf_counter()
        rows = read_all()
        reads.append(time.perf_counter() - t)
        t = time.perf_counter()
        periods = audit_all()
        audits.append(time.perf_counter() - t)
        print(f"read {reads[-1]:.2f} s   audit {audits[-1]:.2f} s", flush=True)
    r, q = statistics.median(reads), statistics.median(audits)
    print(json.dumps({"meter_years": len(meters), "rows": rows, "periods": periods, "read_median_s": round(r, 3),
                      "audit_median_s": round(q, 3), "ratio": round(q / r, 2),
                      "audit_ms_per_meter_year": round(1000 * q / len(meters), 1)}))


if __name__ == "__main__":
    main()
