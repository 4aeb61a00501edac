#!/usr/bin/env python3
"""Import benchmark: ``auditor import`` against the bare-insert floor, same file, same run.

For each size (meter-years, default 50 and 200) writes N meter-years of plain CSV with the
floor's own generator (shared/bench/floor_ingest.py beside the project, or --floor PATH), then
alternates runs of the floor and of ``auditor import`` into fresh SQLite files, each in a child
process so that its peak memory (max RSS) and its CPU time are its own. Prints per size the
median wall times, the ratio of the medians (target ≤ 1.2) and the peak RSS of both (target for
``auditor import``: ≤ 400 MB at 200 meter-years, flat in the file's size). On a machine that
other work shares, wall times swing with the load; the CPU time (user + system) of each child
and the ratio of its medians are printed beside them as the steadier figure.

    python benchmarks/bench_ingest.py --meters 50 200 --repeat 3
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
from pathlib import Path

HERE = Path(__file__).resolve().parent
TARGET_RATIO = 1.2
TARGET_PEAK_MB = 400


def find_floor(given: str | None) -> Path:
    for cand in ([Path(given)] if given else []) + [HERE.parent.parent / "shared" / "bench" / "floor_ingest.py",
                                                    HERE.parent.parent.parent / "shared" / "bench" / "floor_ingest.py"]:
        if cand.is_file():
            return cand.resolve()
    sys.exit("floor_ingest.py not found; give --floor PATH")


def child(cmd: list[str], env=None, cpu: list | None = None) -> tuple[float, float]:
    """Run cmd; return (wall seconds, peak RSS MB of that child); append its CPU seconds to ``cpu``."""
    wrapper = [sys.executable, "-c",
               "import resource,subprocess,sys,time;t=time.perf_counter();"
               "r=subprocess.run(sys.argv[1:]);dt=time.perf_counter()-t;"
               "u=resource.getrusage(resource.RUSAGE_CHILDREN);m=u.ru_maxrss/1024;"
               "print('BENCH',dt,m,r.returncode,u.ru_utime+u.ru_stime,file=sys.stderr)", *cmd]
    out = subprocess.run(wrapper, capture_output=True, text=True, env=env)
    line = [x for x in out.stderr.splitlines() if x.startswith("BENCH")][-1].split()
    if int(line[3]) != 0:
        sys.exit(f"failed: {' '.join(cmd)}\n{out.stderr[-2000:]}")
    if cpu is not None:
        cpu.append(float(line[4]))
    return float(line[1]), float(line[2])


def one_size(floor: Path, work: Path, meters: int, repeat: int) -> dict:
    csv = work / f"meters{meters}.csv"
    if not csv.exists():
        t = time.perf_counter()
        subprocess.run([sys.executable, str(floor), "make", str(csv), "--meters", str(meters)], check=True)
        print(f"wrote {csv.stat().st_size / 1e6:.0f} MB of CSV ({meters} meter-years) in "
              f"{time.perf_counter() - t:.1f} s", flush=True)
    floor_t, floor_m, ours_t, ours_m, floor_c, ours_c = [], [], [], [], [], []
    for i in range(repeat):
        for which in ("floor", "auditor"):
            db = work / f"{which}{meters}-{i}.sqlite3"
            for p in work.glob(f"{db.name}*"):
                p.unlink()
            if which == "floor":
                dt, mem = child([sys.executable, str(floor), "run", str(csv), str(db)], cpu=floor_c)
                floor_t.append(dt)
                floor_m.append(mem)
            else:
                env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
                dt, mem = child([sys.executable, "-m", "auditor", "--quiet", "import", str(csv)], env=env, cpu=ours_c)
                ours_t.append(dt)
                ours_m.append(mem)
            cpu = (floor_c if which == "floor" else ours_c)[-1]
            print(f"{meters:>4} meter-years run {i + 1} {which:<8} {dt:7.2f} s  cpu {cpu:7.2f} s  peak {mem:6.0f} MB",
                  flush=True)
            for p in work.glob(f"{db.name}*"):
                p.unlink()
    ratio = statistics.median(ours_t) / statistics.median(floor_t)
    return {
        "meter_years": meters, "rows": meters * 35040, "repeat": repeat,
        "floor_median_s": round(statistics.median(floor_t), 2),
        "auditor_median_s": round(statistics.median(ours_t), 2),
        "ratio": round(ratio, 2),
        "floor_cpu_median_s": round(statistics.median(floor_c), 2),
        "auditor_cpu_median_s": round(statistics.median(ours_c), 2),
        "cpu_ratio": round(statistics.median(ours_c) / statistics.median(floor_c), 2),
        "floor_peak_mb": round(max(floor_m)), "auditor_peak_mb": round(max(ours_m)),
        "auditor_rows_per_s": round(meters * 35040 / statistics.median(ours_t)),
        "ratio_ok": ratio <= TARGET_RATIO, "peak_ok": max(ours_m) <= TARGET_PEAK_MB,
    }


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--meters", type=int, nargs="+", default=[50, 200], help="sizes in meter-years")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--floor")
    ap.add_argument("--workdir")
    a = ap.parse_args()
    floor = find_floor(a.floor)
    work = Path(a.workdir or tempfile.mkdtemp(prefix="bench-ingest-"))
    work.mkdir(parents=True, exist_ok=True)
    results = [one_size(floor, work, m, a.repeat) for m in a.meters]
    print()
    print(f"{'meter-years':>11} {'floor s':>8} {'import s':>9} {'ratio':>6} {'cpu ratio':>9} {'floor MB':>9} "
          f"{'import MB':>10}")
    for r in results:
        print(f"{r['meter_years']:>11} {r['floor_median_s']:>8.2f} {r['auditor_median_s']:>9.2f} {r['ratio']:>6.2f} "
              f"{r['cpu_ratio']:>9.2f} {r['floor_peak_mb']:>9} {r['auditor_peak_mb']:>10}")
    print(f"targets: ratio ≤ {TARGET_RATIO}, import peak ≤ {TARGET_PEAK_MB} MB")
    print(json.dumps({"results": results}))


if __name__ == "__main__":
    main()
