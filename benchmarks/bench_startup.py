#!/usr/bin/env python3
"""Start-up time of the command line: wall time of whole processes, medians.

Times, alternating, ``--repeat`` times each:
  python -c pass          — the interpreter alone (the floor)
  auditor --help          — target ≤ 0.3 s
  auditor meters          — on an empty database (created and migrated before timing), target ≤ 0.6 s
  auditor --version

and prints each median, its ratio to the target and to bare Python. The modules that
``auditor --help`` loads are checked in ``tests/test_cli_grammar.py`` (no pandas, numpy,
SQLAlchemy or Alembic); this script only measures.

    python benchmarks/bench_startup.py [--repeat N]
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGETS = {"auditor --help": 0.3, "auditor meters": 0.6}


def wall(cmd: list[str], env: dict) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, env=env, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15)
    a = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="bench-startup-"))
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{tmp / 'empty.sqlite3'}")
    py = sys.executable
    auditor = [py, "-c", "from auditor.cli import main; main()"]
    cases = {
        "python -c pass": [py, "-c", "pass"],
        "auditor --help": [*auditor, "--help"],
        "auditor --version": [*auditor, "--version"],
        "auditor meters": [*auditor, "meters"],
    }
    subprocess.run([*auditor, "db", "upgrade"], env=env, check=True, stdout=subprocess.DEVNULL)
    times: dict[str, list[float]] = {k: [] for k in cases}
    for _ in range(a.repeat):
        for name, cmd in cases.items():
            times[name].append(wall(cmd, env))
    floor = statistics.median(times["python -c pass"])
    print(f"{'command':<20} {'median s':>9} {'min s':>7} {'× python':>9}  target")
    for name, ts in times.items():
        med = statistics.median(ts)
        target = TARGETS.get(name)
        verdict = f"{target:.1f} s ({med / target:.2f} of it)" if target else ""
        print(f"{name:<20} {med:9.3f} {min(ts):7.3f} {med / floor:9.1f}  {verdict}")
    print(f"({a.repeat} runs each, alternating; wall time of whole processes on this machine)")


if __name__ == "__main__":
    main()
