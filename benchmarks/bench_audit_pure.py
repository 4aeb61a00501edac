"""Speed of the pure audit on synthetic meter-years (15-minute data, 12 calendar months).

Prints medians of audit() (prepare + run), PreparedAudit.run() and PreparedAudit.run_charges()
for each example tariff, and how many run() calls fit in one second.

    python benchmarks/bench_audit_pure.py [--repeat N]
"""
from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import pandas as pd

from auditor.audit import audit, prepare_audit
from auditor.tariffs import EXAMPLES_DIR, load_tariff

TZ = "Europe/Berlin"


def meter_year(seed: int = 7) -> pd.DataFrame:
    """An invented plant: weekday day-shift load, lagging reactive energy, leading at night."""
    rng = np.random.default_rng(seed)
    local = pd.date_range("2025-01-01", "2026-01-01", freq="15min", tz=TZ, inclusive="left")
    n = len(local)
    h = local.hour.to_numpy()
    day = (h >= 7) & (h < 18) & (local.day_of_week.to_numpy() < 5)
    kwh = 20 + 35 * day + rng.uniform(0, 6, n)
    idx = local.tz_convert("UTC")
    idx.name = "start"
    return pd.DataFrame(
        {
            "kwh": kwh,
            "kvarh_lag": kwh * rng.uniform(0.4, 0.9, n),
            "kvarh_lead": np.where(h < 5, rng.uniform(0, 2, n), 0.0),
            "kwh_received": 0.0,
            "estimated": False,
        },
        index=idx,
    )


def median_ms(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times) * 1000.0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=50)
    args = ap.parse_args()
    f = meter_year()
    lag = f["kvarh_lag"].to_numpy() * 0.6
    lead = f["kvarh_lead"].to_numpy()
    print(f"meter-year: {len(f)} intervals of 15 min, 12 periods, median of {args.repeat} runs")
    print(f"{'tariff':34s} {'audit ms':>9s} {'run ms':>8s} {'charges ms':>11s} {'runs/s':>8s} {'audit/run':>10s}")
    for path in sorted(EXAMPLES_DIR.glob("*.toml")):
        t = load_tariff(path)
        full = median_ms(lambda t=t: audit(f, t, tz=TZ, interval_minutes=15), max(5, args.repeat // 5))
        prepared = prepare_audit(f, t, tz=TZ, interval_minutes=15)
        run = median_ms(lambda p=prepared: p.run(lag, lead), args.repeat)
        charges = median_ms(lambda p=prepared: p.run_charges(lag, lead), args.repeat)
        print(f"{t.name:34s} {full:9.2f} {run:8.2f} {charges:11.2f} {1000 / run:8.0f} {full / run:10.1f}")


if __name__ == "__main__":
    main()
