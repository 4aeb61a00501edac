#!/usr/bin/env python3
"""Import benchmark: ``auditor import`` against the bare-insert floor, same file, same run.

Writes N meter-years of plain CSV with the floor's own generator (shared/bench/floor_ingest.py
beside the project, or --floor PATH), then alternates runs of the floor and of ``auditor import``
into fresh SQLite files, each in a child process so that its peak memory (max RSS) is its own.
Prints medians and the ratio of the medians. Target: ratio ≤ 1.5 at 50 meter-years, peak ≤ 500 MB.

    python benchmarks/bench_ingest.py --meters 50 --repeat 3
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


def find_floor(given: str | None) -> Path:
    for cand in ([Path(given)] if given else []) + [HERE.parent.parent / "shared" / "bench" / "floor_ingest.py",
                                                    HERE.parent / ".." / "shared" / "bench" / "floor_ingest.py"]:
        if cand.is_file():
            return cand.resolve()
    sys.exit("floor_ingest.py not found; give --floor PATH")


def child(cmd: list[str], env=None) -> tuple[float, float]:
    """Run cmd; return (wall seconds, peak RSS MB of that child)."""
    wrapper = [sys.executable, "-c",
               "import resource,subprocess,sys,time;t=time.perf_counter();"
               "r=subprocess.run(sys.argv[1:]);dt=time.perf_counter()-t;"
               "m=resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss/1024;"
               "print('BENCH',dt,m,r.returncode,file=sys.stderr)", *cmd]
    out = subprocess.run(wrapper, capture_output=True, text=True, env=env)
    line = [x for x in out.stderr.splitlines() if x.startswith("BENCH")][-1].split()
    if int(line[3]) != 0:
        sys.exit(f"failed: {' '.join(cmd)}\n{out.stderr[-2000:]}")
    return float(line[1]), float(line[2])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--meters", type=int, default=50)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--floor")
    ap.add_argument("--workdir")
    a = ap.parse_args()
    floor = find_floor(a.floor)
    work = Path(a.workdir or tempfile.mkdtemp(prefix="bench-ingest-"))
    work.mkdir(parents=True, exist_ok=True)
    csv = work / f"meters{a.meters}.csv"
    if not csv.exists():
        t = time.perf_counter()
        subprocess.run([sys.executable, str(floor), "make", str(csv), "--meters", str(a.meters)], check=True)
        print(f"wrote {csv.stat().st_size / 1e6:.0f} MB of CSV in {time.perf_counter() - t:.1f} s")
    floor_t, floor_m, ours_t, ours_m = [], [], [], []
    for i in range(a.repeat):
        for which in ("floor", "auditor"):
            db = work / f"{which}{i}.sqlite3"
            for p in work.glob(f"{which}{i}.sqlite3*"):
                p.unlink()
            if which == "floor":
                dt, mem = child([sys.executable, str(floor), "run", str(csv), str(db)])
                floor_t.append(dt)
                floor_m.append(mem)
            else:
                env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
                dt, mem = child([sys.executable, "-m", "auditor", "--quiet", "import", str(csv)], env=env)
                ours_t.append(dt)
                ours_m.append(mem)
            print(f"run {i + 1} {which:<8} {dt:7.2f} s  peak {mem:6.0f} MB", flush=True)
            for p in work.glob(f"{which}{i}.sqlite3*"):
                p.unlink()
    result = {
        "meter_years": a.meters, "rows": a.meters * 35040, "repeat": a.repeat,
        "floor_median_s": round(statistics.median(floor_t), 2),
        "auditor_median_s": round(statistics.median(ours_t), 2),
        "ratio": round(statistics.median(ours_t) / statistics.median(floor_t), 2),
        "floor_peak_mb": round(max(floor_m)), "auditor_peak_mb": round(max(ours_m)),
        "auditor_rows_per_s": round(a.meters * 35040 / statistics.median(ours_t)),
    }
    print(json.dumps(result))


if __name__ == "__main__":
    main()
