#!/usr/bin/env python3
"""Portfolio benchmark at 50 / 200 / 500 meter-years: import, ``audit --all``, the portfolio page,
database size, against the floors, in one run.

For each size N (meter-years, 15-minute data, the floor generator's file
``shared/bench/floor_ingest.py``), in ``--workdir`` (default /tmp/pf-bench-portfolio; generated
files are kept there and reused between runs; delete the folder when done):

* **import** — ``auditor import`` of the file into a fresh SQLite database against the bare-insert
  floor (``floor_ingest.py run``), each in a child process: wall time and peak memory (max RSS);
* **database bytes per meter-year** — the SQLite file after a WAL checkpoint (PostgreSQL: the
  tables and indexes, ``pg_total_relation_size``), beside the reference engine's file;
* **audit --all** — ``auditor audit --all --tariff T`` as a whole process with the default workers
  (one per CPU) and the table printed, against the reference engine computing the same monthly
  figures per meter (kWh, kvarh lagging and leading, peak kW, energy PF) from its own table
  (DuckDB, installed for the benchmark only: ``pip install duckdb``), with as many threads.
  The CPU use of the audit (user + system of the command and its workers over wall time and
  cores) says whether the cores were busy. The ``--json`` output is checked figure by figure
  against the reference engine's;
* **read and compute per meter-year** in one process: reading the interval frame vs the audit's
  own computation, which says where the time goes;
* **block layout prototype** — the same database with ``reading`` moved into ``reading_block``
  (:mod:`auditor.store.blocks`, the codec a migration would use), ``audit --all`` and bytes again;
* **portfolio page** — ``GET /`` through the dashboard's WSGI app: cold (no summaries stored),
  warm (median of ``--repeat``), and the first view after an import that revises one meter
  (how many meters it audited again).

With ``--pg URL`` the import, bytes, ``audit --all`` and the portfolio page are also measured on
PostgreSQL (a schema of its own per size, dropped afterwards).

    python benchmarks/bench_portfolio.py --meters 50 200 500 [--pg URL] [--repeat 3]
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import time
import uuid
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_ingest import child, find_floor  # noqa: E402

TARIFF = "harrowgate_industrial_tou"
PAGE_BUDGET_MS = 300.0
AUDIT_TARGET_RATIO = 3.0


def cpu_count() -> int:
    return len(os.sched_getaffinity(0))


def _tree_cpu(root: int, seen: dict[int, float]) -> None:
    """Add the CPU seconds (user + system) of ``root`` and its descendants to ``seen`` (by pid)."""
    tick = os.sysconf("SC_CLK_TCK")
    parents: dict[int, int] = {}
    cpu: dict[int, float] = {}
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open(f"/proc/{d}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        parents[int(d)] = int(fields[1])
        cpu[int(d)] = (int(fields[11]) + int(fields[12])) / tick
    for pid, c in cpu.items():
        p = pid
        while p in parents and p != root:
            p = parents[p]
        if p == root:
            seen[pid] = max(seen.get(pid, 0.0), c)


def run_timed(cmd: list[str], env: dict, out_path: Path | None = None) -> dict:
    """Wall time, CPU seconds of the process tree (sampled from /proc every 0.1 s, since the
    pool's workers are not children the command waits for) and the exit code."""
    seen: dict[int, float] = {}
    t0 = time.perf_counter()
    with open(out_path or os.devnull, "wb") as out, open(os.devnull, "wb") as err_sink:
        del err_sink
        proc = subprocess.Popen(cmd, env=env, stdout=out, stderr=subprocess.PIPE)
        errs = []
        import threading

        reader = threading.Thread(target=lambda: errs.append(proc.stderr.read()), daemon=True)
        reader.start()
        while proc.poll() is None:
            _tree_cpu(proc.pid, seen)
            time.sleep(0.1)
        reader.join()
    wall = time.perf_counter() - t0
    return {"wall": wall, "cpu": sum(seen.values()), "rc": proc.returncode, "stderr": b"".join(errs).decode()[-2000:]}


def auditor_cmd(*args: str) -> list[str]:
    return [sys.executable, "-m", "auditor", "--quiet", *args]


def env_for(url: str) -> dict:
    """The command's environment: the database, and byte-code caching as an installed package
    has it (a shell that sets PYTHONDONTWRITEBYTECODE would compile every module at each start)."""
    env = dict(os.environ, AUDITOR_DB_URL=url)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


# --------------------------------------------------------------------------------------------
# the reference engine
# --------------------------------------------------------------------------------------------
DUCK_QUERY = """
SELECT meter, strftime(make_timestamp(start * 1000000), '%Y-%m') AS month,
       sum(kwh) AS kwh, sum(kvarh_lag) AS kvarh_lag, sum(kvarh_lead) AS kvarh_lead,
       max(kwh) * 4 AS peak_kw, sum(kwh) / sqrt(sum(kwh) ^ 2 + sum(kvarh_lag) ^ 2) AS pf
FROM reading GROUP BY ALL ORDER BY 1, 2
"""


def duck_table(work: Path, csv: Path, n: int):
    import duckdb

    path = work / f"reference{n}.duckdb"
    fresh = not path.exists()
    con = duckdb.connect(str(path))
    if fresh:
        con.execute(f"""CREATE TABLE reading AS SELECT meter, epoch(CAST(start AS TIMESTAMPTZ))::BIGINT AS start,
                        kwh, kvarh_lag, kvarh_lead FROM read_csv('{csv}', header = true) ORDER BY meter, start""")
        con.execute("CHECKPOINT")
    con.execute(f"SET threads = {cpu_count()}")
    return con, path


def duck_monthly(con, repeat: int) -> tuple[float, float, list]:
    """Median wall seconds and CPU seconds (every thread of this process) of the monthly query."""
    times, cpus, rows = [], [], []
    for _ in range(repeat):
        c0 = time.process_time()
        t0 = time.perf_counter()
        rows = con.execute(DUCK_QUERY).fetchall()
        times.append(time.perf_counter() - t0)
        cpus.append(time.process_time() - c0)
    return statistics.median(times), statistics.median(cpus), rows


def check_figures(audit_json: Path, reference: list) -> dict:
    """The audit's per-meter, per-month figures against the reference engine's."""
    doc = json.loads(audit_json.read_text())
    ref = {(m, month): (kwh, lag, lead, peak, pf) for m, month, kwh, lag, lead, peak, pf in reference}
    worst, where = 0.0, None
    compared = 0
    for a in doc["audits"]:
        for p in a["periods"]:
            key = (a["meter"], p["start"][:7])
            r = ref[key]
            for ours, theirs in zip((p["kwh"], p["kvarh_lag"], p["kvarh_lead"], p["peak_kw"], p["pf"]), r, strict=True):
                d = abs(ours - theirs) / max(abs(theirs), 1e-9)
                if d > worst:
                    worst, where = d, key
                compared += 1
    return {"figures_compared": compared, "max_relative_difference": worst, "at": where, "failed": len(doc["failed"])}


# --------------------------------------------------------------------------------------------
# the store
# --------------------------------------------------------------------------------------------
def sqlite_bytes(path: Path) -> int:
    import sqlite3

    con = sqlite3.connect(path)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    size = con.execute("PRAGMA page_count").fetchone()[0] * con.execute("PRAGMA page_size").fetchone()[0]
    con.close()
    return size


def pg_bytes(url: str) -> int:
    from sqlalchemy import create_engine

    e = create_engine(url)
    with e.connect() as c:
        tables = [r[0] for r in c.exec_driver_sql(
            "SELECT tablename FROM pg_tables WHERE schemaname = current_schema()")]
        total = sum(c.exec_driver_sql(f"SELECT pg_total_relation_size('{t}')").scalar() for t in tables)
    e.dispose()
    return total


def build_blocks(src: Path, dst: Path) -> None:
    """The block-layout prototype: a copy of the database with ``reading`` moved into
    ``reading_block`` through :func:`auditor.store.blocks.pack` (what a migration would do)."""
    import sqlite3

    import numpy as np

    from auditor.store.blocks import BLOCK_COLUMNS, Intervals, pack
    from auditor.store.models import QUANTITIES

    shutil.copyfile(src, dst)
    con = sqlite3.connect(dst)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("""CREATE TABLE reading_block (meter_id INTEGER NOT NULL REFERENCES meter (id),
                   block_start BIGINT NOT NULL, kwh BLOB, kvarh_lag BLOB, kvarh_lead BLOB, kwh_received BLOB,
                   flags BLOB, batch_id INTEGER NOT NULL, batch_ids BLOB,
                   PRIMARY KEY (meter_id, block_start)) WITHOUT ROWID""")
    marks = ", ".join("?" * len(BLOCK_COLUMNS))
    for mid, minutes in con.execute("SELECT id, coalesce(interval_minutes, 15) FROM meter").fetchall():
        rows = con.execute(f"SELECT start, {', '.join(QUANTITIES)}, flags, batch_id FROM reading "
                           "WHERE meter_id = ? ORDER BY start", (mid,)).fetchall()
        if not rows:
            continue
        a = np.array(rows, dtype=float)
        iv = Intervals(a[:, 0].astype(np.int64), {q: a[:, 1 + i] for i, q in enumerate(QUANTITIES)},
                       a[:, -2].astype(np.int16), a[:, -1].astype(np.int32))
        con.executemany(f"INSERT INTO reading_block VALUES ({marks})", pack(mid, minutes, iv))
    con.execute("DELETE FROM reading")
    con.commit()
    con.execute("VACUUM")
    con.close()


def read_and_compute(url: str, meters: int) -> dict:
    """Per meter-year, in this process: reading the interval frame vs the audit's computation."""
    from auditor.audit import audit
    from auditor.services.audit import resolve_tariff
    from auditor.services.meters import load_meter
    from auditor.store import open_store

    store = open_store(url)
    tariff = resolve_tariff(TARIFF)
    names = [f"M{i:04d}" for i in range(min(meters, 20))]
    reads, comps = [], []
    for m in names:
        t0 = time.process_time()
        d = load_meter(store, m)
        t1 = time.process_time()
        audit(d.frame, tariff, tz=d.timezone, interval_minutes=d.interval_minutes).to_dict()
        t2 = time.process_time()
        reads.append(t1 - t0)
        comps.append(t2 - t1)
    store.dispose()
    return {"read_ms": 1000 * statistics.median(reads), "compute_ms": 1000 * statistics.median(comps)}


def audit_all(url: str, work: Path, tag: str, repeat: int, reference: list | None) -> dict:
    times, cpus = [], []
    for _ in range(repeat):
        r = run_timed(auditor_cmd("audit", "--all", "--tariff", TARIFF), env_for(url), work / f"table-{tag}.txt")
        if r["rc"] != 0:
            sys.exit(f"audit --all failed on {tag}:\n{r['stderr']}")
        times.append(r["wall"])
        cpus.append(r["cpu"] / r["wall"] / cpu_count())
    out = {"median_s": statistics.median(times), "cpu_busy": statistics.median(cpus),
           "cpu_s": statistics.median(x * y * cpu_count() for x, y in zip(times, cpus, strict=True))}
    if reference is not None:
        js = work / f"audit-{tag}.json"
        r = run_timed(auditor_cmd("audit", "--all", "--tariff", TARIFF, "--json"), env_for(url), js)
        out["json_s"] = r["wall"]
        out["check"] = check_figures(js, reference)
        js.unlink()
    return out


# --------------------------------------------------------------------------------------------
# the portfolio page
# --------------------------------------------------------------------------------------------
def page_times(url: str, work: Path, repeat: int) -> dict:
    from auditor.services.ingest import import_files
    from auditor.store import open_store
    from auditor.web import create_app

    store = open_store(url)
    app = create_app({"INSTANCE_PATH": str(work / "instance"), "WARM_CACHE": False}, store=store)
    client = app.test_client()

    def get() -> float:
        t0 = time.perf_counter()
        r = client.get(f"/?tariff={TARIFF}")
        assert r.status_code == 200, r.status_code
        return time.perf_counter() - t0

    with store.engine.begin() as c:
        c.exec_driver_sql("DELETE FROM meter_summary")
    cold = get()
    warm = statistics.median(get() for _ in range(repeat))
    # a nightly file revising one day of one meter
    revision = work / f"revision-{uuid.uuid4().hex[:8]}.csv"
    k = time.time() % 1000
    revision.write_text("meter,start,kwh,kvarh_lag,kvarh_lead\n" + "".join(
        f"M0001,2025-03-04T{h:02d}:{q * 15:02d}:00+00:00,{50 + k + h:.3f},{20 + h:.3f},0.0\n"
        for h in range(24) for q in range(4)))
    import_files(store, [revision])
    revision.unlink()
    def stamps() -> dict:
        with store.engine.connect() as c:
            return dict(c.exec_driver_sql("SELECT meter_id, computed_at FROM meter_summary").all())

    before = stamps()
    after = get()
    recomputed = sum(1 for k, v in stamps().items() if before.get(k) != v)
    store.dispose()
    return {"cold_s": cold, "warm_ms": 1000 * warm, "after_import_s": after, "recomputed": recomputed}


# --------------------------------------------------------------------------------------------
def make_csv(work: Path, n: int, floor: Path) -> Path:
    csv = work / f"meters{n}.csv"
    if not csv.exists():
        t0 = time.perf_counter()
        subprocess.run([sys.executable, str(floor), "make", str(csv), "--meters", str(n)], check=True)
        print(f"  wrote {csv.stat().st_size / 1e6:.0f} MB of CSV in {time.perf_counter() - t0:.0f} s", flush=True)
    return csv


def import_sqlite(work: Path, csv: Path, n: int, floor: Path, timed: bool) -> tuple[Path, dict]:
    db = work / f"auditor{n}.sqlite3"
    out: dict = {}
    if timed or not db.exists():
        fdb = work / f"floor{n}.sqlite3"
        for p in work.glob(f"floor{n}.sqlite3*"):
            p.unlink()
        if timed:
            out["floor_s"], out["floor_mb"] = child([sys.executable, str(floor), "run", str(csv), str(fdb)])
            for p in work.glob(f"floor{n}.sqlite3*"):
                p.unlink()
        for p in work.glob(f"auditor{n}.sqlite3*"):
            p.unlink()
        out["auditor_s"], out["auditor_mb"] = child(auditor_cmd("import", str(csv)), env=env_for(f"sqlite:///{db}"))
    return db, out


def pg_schema(base: str) -> tuple[str, str]:
    from sqlalchemy import create_engine

    schema = f"bench_{uuid.uuid4().hex[:10]}"
    e = create_engine(base, isolation_level="AUTOCOMMIT")
    with e.connect() as c:
        c.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
    e.dispose()
    sep = "&" if "?" in base else "?"
    return schema, f"{base}{sep}options=-csearch_path%3D{schema}"


def pg_drop(base: str, schema: str) -> None:
    from sqlalchemy import create_engine

    e = create_engine(base, isolation_level="AUTOCOMMIT")
    with e.connect() as c:
        c.exec_driver_sql(f'DROP SCHEMA "{schema}" CASCADE')
    e.dispose()


def fmt_ratio(a: float, b: float) -> str:
    return f"{a / b:.2f}×" if b else "-"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--meters", type=int, nargs="+", default=[50, 200, 500])
    ap.add_argument("--repeat", type=int, default=3, help="runs of audit --all and the reference query (median)")
    ap.add_argument("--page-repeat", type=int, default=11, help="warm portfolio requests (median)")
    ap.add_argument("--no-import-timing", action="store_true",
                    help="reuse the imported SQLite database of an earlier run (skip the import and floor timing)")
    ap.add_argument("--layouts", nargs="+", choices=("rows", "blocks"), default=["rows", "blocks"],
                    help="SQLite layouts to run audit --all on (default both)")
    ap.add_argument("--no-page", action="store_true", help="skip the portfolio page")
    ap.add_argument("--import-only", action="store_true", help="measure only the import against the floor")
    ap.add_argument("--pg", metavar="URL", help="also measure on this PostgreSQL server")
    ap.add_argument("--pg-meters", type=int, nargs="+", help="sizes to measure on PostgreSQL (default: --meters)")
    ap.add_argument("--floor")
    ap.add_argument("--workdir", default="/tmp/pf-bench-portfolio")
    a = ap.parse_args()
    floor = find_floor(a.floor)
    work = Path(a.workdir)
    work.mkdir(parents=True, exist_ok=True)
    load = os.getloadavg()
    print(f"{cpu_count()} CPUs; load average {load[0]:.1f} {load[1]:.1f} {load[2]:.1f}; workdir {work}", flush=True)
    results = []
    for n in a.meters:
        print(f"\n== {n} meter-years ({n * 35040:,} rows) ==", flush=True)
        r: dict = {"meter_years": n}
        csv = make_csv(work, n, floor)
        db, imp = import_sqlite(work, csv, n, floor, not a.no_import_timing)
        r["import"] = imp
        if imp.get("floor_s"):
            print(f"  import: floor {imp['floor_s']:.1f} s / {imp['floor_mb']:.0f} MB; auditor {imp['auditor_s']:.1f} s "
                  f"/ {imp['auditor_mb']:.0f} MB ({fmt_ratio(imp['auditor_s'], imp['floor_s'])} the floor)", flush=True)
        if a.import_only:
            r["bytes_per_meter_year"] = {"sqlite": sqlite_bytes(db) / n}
            print(f"  database: {r['bytes_per_meter_year']['sqlite'] / 1e6:.2f} MB per meter-year", flush=True)
            results.append(r)
            continue
        url = f"sqlite:///{db}"
        duck, duck_path = duck_table(work, csv, n)
        r["duckdb_s"], r["duckdb_cpu_s"], reference = duck_monthly(duck, a.repeat)
        duck.close()
        r["bytes_per_meter_year"] = {"sqlite": sqlite_bytes(db) / n, "duckdb": duck_path.stat().st_size / n}
        print(f"  reference engine monthly figures: {r['duckdb_s']:.2f} s ({r['duckdb_cpu_s']:.2f} CPU s)", flush=True)
        if "rows" in a.layouts:
            r["split_rows"] = read_and_compute(url, n)
            r["audit_rows"] = audit_all(url, work, f"rows{n}", a.repeat, reference)
            ar = r["audit_rows"]
            print(f"  audit --all (rows): {ar['median_s']:.1f} s, {fmt_ratio(ar['median_s'], r['duckdb_s'])} the reference; "
                  f"{ar['cpu_s']:.1f} CPU s, {fmt_ratio(ar['cpu_s'], r['duckdb_cpu_s'])} its CPU; cores "
                  f"{100 * ar['cpu_busy']:.0f} % busy; figures: {ar['check']}", flush=True)
        bdb = work / f"blocks{n}.sqlite3"
        if not bdb.exists() or bdb.stat().st_mtime < db.stat().st_mtime:
            t0 = time.perf_counter()
            build_blocks(db, bdb)
            r["blocks_build_s"] = time.perf_counter() - t0
        burl = f"sqlite:///{bdb}"
        r["bytes_per_meter_year"]["sqlite_blocks"] = sqlite_bytes(bdb) / n
        if "blocks" in a.layouts:
            r["split_blocks"] = read_and_compute(burl, n)
            r["audit_blocks"] = audit_all(burl, work, f"blocks{n}", a.repeat, reference)
            ab = r["audit_blocks"]
            print(f"  audit --all (blocks): {ab['median_s']:.1f} s, {fmt_ratio(ab['median_s'], r['duckdb_s'])} the reference; "
                  f"{ab['cpu_s']:.1f} CPU s, {fmt_ratio(ab['cpu_s'], r['duckdb_cpu_s'])} its CPU; cores "
                  f"{100 * ab['cpu_busy']:.0f} % busy; figures: {ab['check']}", flush=True)
        if not a.no_page:
            page_db = work / f"page{n}.sqlite3"  # the page step imports a revision: on a copy
            for x in work.glob(f"page{n}.sqlite3*"):
                x.unlink()
            shutil.copyfile(db, page_db)
            r["page"] = page_times(f"sqlite:///{page_db}", work, a.page_repeat)
            for x in work.glob(f"page{n}.sqlite3*"):
                x.unlink()
            p = r["page"]
            print(f"  portfolio page: cold {p['cold_s']:.1f} s, warm {p['warm_ms']:.0f} ms "
                  f"({fmt_ratio(p['warm_ms'], PAGE_BUDGET_MS)} the budget), after a one-meter import "
                  f"{p['after_import_s']:.2f} s ({p['recomputed']} meter audited again)", flush=True)
        if a.pg and n in (a.pg_meters or a.meters):
            schema, purl = pg_schema(a.pg)
            try:
                pg: dict = {}
                pg["import_s"], pg["import_mb"] = child(auditor_cmd("import", str(csv)), env=env_for(purl))
                pg["bytes_per_meter_year"] = pg_bytes(purl) / n
                pg["split"] = read_and_compute(purl, n)
                pg["audit"] = audit_all(purl, work, f"pg{n}", a.repeat, reference)
                pg["page"] = page_times(purl, work, a.page_repeat)
                r["postgresql"] = pg
                print(f"  PostgreSQL: import {pg['import_s']:.1f} s / {pg['import_mb']:.0f} MB, "
                      f"{pg['bytes_per_meter_year'] / 1e6:.2f} MB per meter-year, audit --all {pg['audit']['median_s']:.1f} s "
                      f"({fmt_ratio(pg['audit']['median_s'], r['duckdb_s'])} the reference; {pg['audit']['cpu_s']:.1f} CPU s, "
                      f"{fmt_ratio(pg['audit']['cpu_s'], r['duckdb_cpu_s'])} its CPU), page cold "
                      f"{pg['page']['cold_s']:.1f} s / warm {pg['page']['warm_ms']:.0f} ms", flush=True)
            finally:
                pg_drop(a.pg, schema)
        results.append(r)

    if a.import_only:
        print(json.dumps(results, default=float))
        return
    print("\n== side by side ==")
    nan = float("nan")
    print(f"{'meter-years':>11} {'import s':>9} {'floor s':>8} {'ratio':>6} {'peak MB':>8} {'floor MB':>8} "
          f"{'ref s':>6} {'rows s':>7} {'ratio':>6} {'blocks s':>8} {'ratio':>6} {'cpu×':>5} "
          f"{'page cold s':>11} {'warm ms':>8} {'MB/my':>6} {'blocks':>6} {'ref':>5}")
    for r in results:
        i, b = r["import"], r["bytes_per_meter_year"]
        rows, blocks, page = r.get("audit_rows", {}), r.get("audit_blocks", {}), r.get("page", {})
        print(f"{r['meter_years']:>11} {i.get('auditor_s', nan):>9.1f} {i.get('floor_s', nan):>8.1f} "
              f"{i.get('auditor_s', nan) / i.get('floor_s', nan):>6.2f} {i.get('auditor_mb', nan):>8.0f} "
              f"{i.get('floor_mb', nan):>8.0f} {r['duckdb_s']:>6.2f} {rows.get('median_s', nan):>7.1f} "
              f"{rows.get('median_s', nan) / r['duckdb_s']:>6.1f} {blocks.get('median_s', nan):>8.1f} "
              f"{blocks.get('median_s', nan) / r['duckdb_s']:>6.1f} {blocks.get('cpu_s', nan) / r['duckdb_cpu_s']:>5.1f} "
              f"{page.get('cold_s', nan):>11.1f} {page.get('warm_ms', nan):>8.0f} {b['sqlite'] / 1e6:>6.2f} "
              f"{b['sqlite_blocks'] / 1e6:>6.2f} {b['duckdb'] / 1e6:>5.2f}")
    print("\nper meter-year in one process (CPU ms): read / compute")
    for r in results:
        parts = [f"{name} {r[key]['read_ms']:.1f} / {r[key]['compute_ms']:.1f}"
                 for name, key in (("rows", "split_rows"), ("blocks", "split_blocks")) if key in r]
        if "postgresql" in r:
            parts.append(f"PostgreSQL rows {r['postgresql']['split']['read_ms']:.1f} / "
                         f"{r['postgresql']['split']['compute_ms']:.1f}")
        print(f"  {r['meter_years']:>4}: " + "; ".join(parts))
    print(json.dumps(results, default=float))


if __name__ == "__main__":
    main()
