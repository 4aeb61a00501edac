#!/usr/bin/env python3
"""Portfolio benchmark at 50 / 200 / 500 meter-years: import, ``audit --all``, the portfolio page,
database size, against the floors, in one run.

For each size N (meter-years, 15-minute data, the floor generator's file
``shared/bench/floor_ingest.py``), in ``--workdir`` (default /tmp/pf-bench-portfolio; generated
files are kept there and reused between runs; delete the folder when done):

* **import** — ``auditor import`` of the file into a fresh SQLite database against the bare-insert
  floor (``floor_ingest.py run``), each in a child process: wall time, CPU time and peak memory
  (max RSS);
* **database bytes per meter-year** — the SQLite file after a WAL checkpoint (PostgreSQL: the
  tables and indexes, ``pg_total_relation_size``), beside the reference engine's file;
* **audit --all** — ``auditor audit --all --tariff T`` as a whole process with the default workers
  (one per CPU) and the table printed, against the reference engine computing the same monthly
  figures per meter (kWh, kvarh lagging and leading, peak kW, energy PF) from its own table
  (DuckDB, installed for the benchmark only: ``pip install duckdb``), with as many threads. The
  two alternate, run for run, so that both see the same load; the ratio of each pair and the
  ratio of the medians are printed. The CPU time of the audit (user + system of the command
  and its workers) over its wall time and the cores says whether the cores were busy — the
  same figure is printed for the reference engine — and the busy share of the machine from
  ``/proc/stat`` during each run (all processes, ours and others') says how much of the
  machine other work took. The ``--json`` output is checked figure by figure against the
  reference engine's. Like for like, the reference also runs as a whole command (start, import,
  open its file, query) against ``audit --all``, and the batch audit runs in this warm process
  (its worker pool, the libraries loaded) against the query in its warm process;
* **read and compute per meter-year** in one process: reading the interval frame vs the audit's
  own computation, which says where the time goes;
* **portfolio page** — ``GET /`` through the dashboard's WSGI app: cold (no summaries stored),
  warm (median of ``--page-repeat``), and the first view after an import that revises one meter
  (how many meters it audited again).

With ``--pg URL`` the import, bytes, ``audit --all`` and the portfolio page are also measured on
PostgreSQL (a schema of its own per size, dropped afterwards).

    python benchmarks/bench_portfolio.py --meters 50 200 500 [--pg URL --pg-meters 50 200] [--repeat 3]
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


def _machine_ticks() -> tuple[int, int]:
    """(busy, total) jiffies of every CPU since boot, from /proc/stat."""
    with open("/proc/stat") as fh:
        f = [int(x) for x in fh.readline().split()[1:]]
    idle = f[3] + (f[4] if len(f) > 4 else 0)
    return sum(f) - idle, sum(f)


def run_timed(cmd: list[str], env: dict, out_path: Path | None = None) -> dict:
    """Wall time, CPU seconds of the process tree (sampled from /proc every 0.1 s, since the
    pool's workers are not children the command waits for), the machine's busy share during
    the run (every process) and the exit code. The end is taken by a thread waiting for the
    process, not by the sampling loop, so the wall time carries no part of a sampling pause."""
    import threading

    seen: dict[int, float] = {}
    b0, t0_ticks = _machine_ticks()
    t0 = time.perf_counter()
    ended: list[float] = []
    with open(out_path or os.devnull, "wb") as out:
        proc = subprocess.Popen(cmd, env=env, stdout=out, stderr=subprocess.PIPE)
        errs = []
        reader = threading.Thread(target=lambda: errs.append(proc.stderr.read()), daemon=True)
        reader.start()
        done = threading.Event()

        def wait() -> None:
            proc.wait()
            ended.append(time.perf_counter())
            done.set()

        threading.Thread(target=wait, daemon=True).start()
        while not done.wait(0.1):
            _tree_cpu(proc.pid, seen)
        reader.join()
    wall = ended[0] - t0
    b1, t1_ticks = _machine_ticks()
    return {"wall": wall, "cpu": sum(seen.values()), "rc": proc.returncode,
            "machine_busy": (b1 - b0) / max(1, t1_ticks - t0_ticks), "stderr": b"".join(errs).decode()[-2000:]}


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
    con.close()
    con = duckdb.connect(str(path), read_only=True)  # read-only: the whole-command runs open it too
    con.execute(f"SET threads = {cpu_count()}")
    return con, path


#: the reference engine as a whole command: start, import, open its file, the query, the rows
DUCK_COMMAND = (
    "import sys, duckdb\n"
    "con = duckdb.connect(sys.argv[1], read_only=True)\n"
    "con.execute(f'SET threads = {sys.argv[2]}')\n"
    "rows = con.execute(sys.argv[3]).fetchall()\n"
    "print(len(rows))\n"
)


def duck_once(con) -> tuple[float, float, float, list]:
    """One run of the monthly query: wall seconds, CPU seconds (every thread of this process),
    the machine's busy share during it, and the rows."""
    b0, t0_ticks = _machine_ticks()
    c0 = time.process_time()
    t0 = time.perf_counter()
    rows = con.execute(DUCK_QUERY).fetchall()
    wall = time.perf_counter() - t0
    b1, t1_ticks = _machine_ticks()
    return wall, time.process_time() - c0, (b1 - b0) / max(1, t1_ticks - t0_ticks), rows


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


def read_and_compute(url: str, meters: int) -> dict:
    """Per meter-year, in this process (with the allocator settings of the batch audit's
    workers): reading the interval frame (one meter at a time as the single audit reads it, and
    16 at a time as the batch audit's workers do) vs the audit's computation (median CPU
    milliseconds)."""
    from auditor.audit import audit
    from auditor.services.audit import resolve_tariff
    from auditor.services.batch import _keep_freed_memory
    from auditor.services.meters import load_meter, load_meters
    from auditor.store import open_store

    _keep_freed_memory()  # the allocator settings the batch audit's workers run with
    store = open_store(url)
    tariff = resolve_tariff(TARIFF)
    names = [f"M{i:04d}" for i in range(min(meters, 32))]
    reads, comps, chunked = [], [], []
    for m in names:
        t0 = time.process_time()
        d = load_meter(store, m)
        t1 = time.process_time()
        audit(d.frame, tariff, tz=d.timezone, interval_minutes=d.interval_minutes).to_dict()
        t2 = time.process_time()
        reads.append(t1 - t0)
        comps.append(t2 - t1)
    for k in range(0, len(names), 16):
        t0 = time.process_time()
        got = load_meters(store, names[k:k + 16])
        chunked.append((time.process_time() - t0) / len(got))
    store.dispose()
    return {"read_ms": 1000 * statistics.median(reads), "compute_ms": 1000 * statistics.median(comps),
            "read_chunk_ms": 1000 * statistics.median(chunked)}


def audit_all(url: str, work: Path, tag: str, repeat: int, duck, duck_path: Path) -> dict:
    """``audit --all`` and the reference engine's monthly query, alternating, ``repeat`` times
    each; then the ``--json`` document checked against the reference engine's figures. Beside
    them, like for like: the reference engine as a whole command (``cmd_*``: a Python process
    that imports it, opens its file and runs the query) against ``audit --all``, and the batch
    audit in this warm process (``warm_*``: :func:`auditor.services.batch.audit_meters` with its
    worker pool, the libraries already loaded) against the query in its warm process."""
    from auditor.services.audit import resolve_tariff
    from auditor.services.batch import audit_meters, same_tariff, select_meters
    from auditor.store import open_store

    times, cpus, busy, machine = [], [], [], []
    ref_t, ref_c, ref_busy, ref_machine, pairs = [], [], [], [], []
    cmd_t, warm_t = [], []
    reference: list = []
    store = open_store(url)
    meters = select_meters(store, all_meters=True)
    tariff = resolve_tariff(TARIFF)
    for _ in range(repeat):
        c = run_timed([sys.executable, "-c", DUCK_COMMAND, str(duck_path), str(cpu_count()), DUCK_QUERY], os.environ.copy())
        if c["rc"] != 0:
            sys.exit(f"the reference command failed:\n{c['stderr']}")
        cmd_t.append(c["wall"])
        t0 = time.perf_counter()
        batch = audit_meters(store, meters, same_tariff(tariff))
        warm_t.append(time.perf_counter() - t0)
        if batch.failed:
            sys.exit(f"the batch audit failed on {tag}: {batch.failed[:3]}")
        dw, dc, dm, reference = duck_once(duck)
        ref_t.append(dw)
        ref_c.append(dc)
        ref_busy.append(dc / dw / cpu_count())
        ref_machine.append(dm)
        r = run_timed(auditor_cmd("audit", "--all", "--tariff", TARIFF), env_for(url), work / f"table-{tag}.txt")
        if r["rc"] != 0:
            sys.exit(f"audit --all failed on {tag}:\n{r['stderr']}")
        times.append(r["wall"])
        cpus.append(r["cpu"])
        busy.append(r["cpu"] / r["wall"] / cpu_count())
        machine.append(r["machine_busy"])
        pairs.append(r["wall"] / dw)
    med = statistics.median
    out = {"median_s": med(times), "cpu_s": med(cpus), "cpu_busy": med(busy), "machine_busy": med(machine),
           "runs_s": times, "ref_s": med(ref_t), "ref_cpu_s": med(ref_c), "ref_cpu_busy": med(ref_busy),
           "ref_machine_busy": med(ref_machine), "ref_runs_s": ref_t, "pair_ratios": pairs,
           "ratio": med(times) / med(ref_t), "cpu_ratio": med(cpus) / med(ref_c),
           "cmd_ref_s": med(cmd_t), "cmd_ratio": med(times) / med(cmd_t),
           "warm_s": med(warm_t), "warm_ratio": med(warm_t) / med(ref_t)}
    store.dispose()
    js = work / f"audit-{tag}.json"
    r = run_timed(auditor_cmd("audit", "--all", "--tariff", TARIFF, "--json"), env_for(url), js)
    out["json_s"] = r["wall"]
    out["check"] = check_figures(js, reference)
    js.unlink()
    return out


def audit_line(label: str, a: dict) -> str:
    return (f"  audit --all ({label}): {a['median_s']:.2f} s (runs {', '.join(f'{x:.2f}' for x in a['runs_s'])}), "
            f"{a['ratio']:.2f}× the reference's {a['ref_s']:.2f} s (pairs {', '.join(f'{x:.2f}' for x in a['pair_ratios'])}); "
            f"CPU {a['cpu_s']:.2f} s, {a['cpu_ratio']:.2f}× the reference's {a['ref_cpu_s']:.2f} s; cores busy "
            f"{100 * a['cpu_busy']:.0f} % (reference {100 * a['ref_cpu_busy']:.0f} %); machine busy with everything "
            f"{100 * a['machine_busy']:.0f} % (during the reference {100 * a['ref_machine_busy']:.0f} %); "
            f"figures: {a['check']}\n"
            f"    like for like: whole command against the reference as a whole command "
            f"{a['cmd_ref_s']:.2f} s: {a['cmd_ratio']:.2f}×; the batch audit in a warm process "
            f"{a['warm_s']:.2f} s against the query in its warm process: {a['warm_ratio']:.2f}×")


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
        cpu: list[float] = []
        if timed:
            out["floor_s"], out["floor_mb"] = child([sys.executable, str(floor), "run", str(csv), str(fdb)], cpu=cpu)
            out["floor_cpu_s"] = cpu[-1]
            for p in work.glob(f"floor{n}.sqlite3*"):
                p.unlink()
        for p in work.glob(f"auditor{n}.sqlite3*"):
            p.unlink()
        out["auditor_s"], out["auditor_mb"] = child(auditor_cmd("import", str(csv)), env=env_for(f"sqlite:///{db}"),
                                                    cpu=cpu)
        out["auditor_cpu_s"] = cpu[-1]
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
    ap.add_argument("--repeat", type=int, default=3, help="alternating runs of audit --all and the reference query")
    ap.add_argument("--page-repeat", type=int, default=11, help="warm portfolio requests (median)")
    ap.add_argument("--no-import-timing", action="store_true",
                    help="reuse the imported SQLite database of an earlier run (skip the import and floor timing)")
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
            print(f"  import: floor {imp['floor_s']:.1f} s ({imp['floor_cpu_s']:.1f} CPU s) / {imp['floor_mb']:.0f} MB; "
                  f"auditor {imp['auditor_s']:.1f} s ({imp['auditor_cpu_s']:.1f} CPU s) / {imp['auditor_mb']:.0f} MB "
                  f"({fmt_ratio(imp['auditor_s'], imp['floor_s'])} the floor, CPU "
                  f"{fmt_ratio(imp['auditor_cpu_s'], imp['floor_cpu_s'])})", flush=True)
        r["bytes_per_meter_year"] = {"sqlite": sqlite_bytes(db) / n}
        if a.import_only:
            print(f"  database: {r['bytes_per_meter_year']['sqlite'] / 1e6:.2f} MB per meter-year", flush=True)
            results.append(r)
            continue
        url = f"sqlite:///{db}"
        duck, duck_path = duck_table(work, csv, n)
        r["bytes_per_meter_year"]["duckdb"] = duck_path.stat().st_size / n
        r["split"] = read_and_compute(url, n)
        r["audit"] = audit_all(url, work, f"sqlite{n}", a.repeat, duck, duck_path)
        print(audit_line("SQLite", r["audit"]), flush=True)
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
                cpu: list[float] = []
                pg["import_s"], pg["import_mb"] = child(auditor_cmd("import", str(csv)), env=env_for(purl), cpu=cpu)
                pg["import_cpu_s"] = cpu[-1]
                pg["bytes_per_meter_year"] = pg_bytes(purl) / n
                pg["split"] = read_and_compute(purl, n)
                pg["audit"] = audit_all(purl, work, f"pg{n}", a.repeat, duck, duck_path)
                print(f"  PostgreSQL: import {pg['import_s']:.1f} s ({pg['import_cpu_s']:.1f} CPU s of the command) / "
                      f"{pg['import_mb']:.0f} MB, {pg['bytes_per_meter_year'] / 1e6:.2f} MB per meter-year", flush=True)
                print(audit_line("PostgreSQL", pg["audit"]), flush=True)
                if not a.no_page:
                    pg["page"] = page_times(purl, work, a.page_repeat)
                    print(f"  PostgreSQL portfolio page: cold {pg['page']['cold_s']:.1f} s, warm "
                          f"{pg['page']['warm_ms']:.0f} ms, after a one-meter import {pg['page']['after_import_s']:.2f} s "
                          f"({pg['page']['recomputed']} meter audited again)", flush=True)
                r["postgresql"] = pg
            finally:
                pg_drop(a.pg, schema)
        duck.close()
        results.append(r)

    if a.import_only:
        print(json.dumps(results, default=float))
        return
    print("\n== side by side (medians) ==")
    nan = float("nan")
    print(f"{'meter-years':>11} {'import s':>9} {'floor s':>8} {'ratio':>6} {'peak MB':>8} {'floor MB':>8} "
          f"{'ref s':>6} {'audit s':>8} {'ratio':>6} {'cpu×':>5} {'busy':>5} {'page cold s':>11} {'warm ms':>8} "
          f"{'MB/my':>6} {'ref':>5}")
    for r in results:
        i, b, au, page = r["import"], r["bytes_per_meter_year"], r.get("audit", {}), r.get("page", {})
        print(f"{r['meter_years']:>11} {i.get('auditor_s', nan):>9.1f} {i.get('floor_s', nan):>8.1f} "
              f"{i.get('auditor_s', nan) / i.get('floor_s', nan):>6.2f} {i.get('auditor_mb', nan):>8.0f} "
              f"{i.get('floor_mb', nan):>8.0f} {au.get('ref_s', nan):>6.2f} {au.get('median_s', nan):>8.2f} "
              f"{au.get('ratio', nan):>6.2f} {au.get('cpu_ratio', nan):>5.2f} {100 * au.get('cpu_busy', nan):>4.0f}% "
              f"{page.get('cold_s', nan):>11.1f} {page.get('warm_ms', nan):>8.0f} {b['sqlite'] / 1e6:>6.2f} "
              f"{b.get('duckdb', nan) / 1e6:>5.2f}")
        if "postgresql" in r:
            pg = r["postgresql"]
            print(f"{'  PostgreSQL':>11} {pg['import_s']:>9.1f} {'':>8} {pg['import_s'] / i.get('floor_s', nan):>6.2f} "
                  f"{pg['import_mb']:>8.0f} {'':>8} {pg['audit']['ref_s']:>6.2f} {pg['audit']['median_s']:>8.2f} "
                  f"{pg['audit']['ratio']:>6.2f} {pg['audit']['cpu_ratio']:>5.2f} {100 * pg['audit']['cpu_busy']:>4.0f}% "
                  f"{pg.get('page', {}).get('cold_s', nan):>11.1f} {pg.get('page', {}).get('warm_ms', nan):>8.0f} "
                  f"{pg['bytes_per_meter_year'] / 1e6:>6.2f}")
    print(f"target: audit --all ≤ {AUDIT_TARGET_RATIO:.0f}× the reference; page warm ≤ {PAGE_BUDGET_MS:.0f} ms")
    print("\nper meter-year in one process (CPU ms): read (one meter at a time; 16 at a time) / compute")
    for r in results:
        parts = [f"SQLite {r['split']['read_ms']:.1f} (16 at a time {r['split']['read_chunk_ms']:.1f}) / "
                 f"{r['split']['compute_ms']:.1f}"] if "split" in r else []
        if "postgresql" in r:
            sp = r["postgresql"]["split"]
            parts.append(f"PostgreSQL {sp['read_ms']:.1f} (16 at a time {sp['read_chunk_ms']:.1f}) / {sp['compute_ms']:.1f}")
        print(f"  {r['meter_years']:>4}: " + "; ".join(parts))
    print(json.dumps(results, default=float))


if __name__ == "__main__":
    main()
