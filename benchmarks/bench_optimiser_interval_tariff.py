"""Optimiser speed under a tariff worked out interval by interval: one meter-year of 15-minute
data (35,136 intervals) x 100 candidate banks, side by side with the same run under the shipped
time-of-use example.

Target (not a timed test): at most 1 s for the 100 candidates. The interval tariff combines the
heaviest shapes: an hourly kWh-equivalent excess with inductive and capacitive windows, the
larger of lagging and leading kvarh per half hour, and a banded charge worked out per time band.
Prints medians of several runs and the ratio between the two tariffs.

    python benchmarks/bench_optimiser_interval_tariff.py [--repeat 5]
"""
from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import pandas as pd

from auditor.audit import prepare_audit
from auditor.correction import SiteElectrical
from auditor.correction.optimiser import candidate_designs, optimise
from auditor.tariffs import EXAMPLES_DIR, load_tariff, tariff_from_dict

TZ = "Europe/Lisbon"
TARGET_S = 1.0

INTERVAL_TARIFF = {
    "name": "Invented interval-by-interval tariff",
    "currency": "EUR",
    "energy": {"price_per_kwh": 0.11,
               "windows": [{"name": "day", "days": "weekdays", "hours": ["07:30", "21:30"], "price_per_kwh": 0.16}]},
    "demand": {"price_per_kw": 9.5, "rounding": {"step": 0.1}},
    "reactive": [
        {"kind": "kvarh_excess", "label": "hourly_equivalent", "reference_pf": 0.92, "price_per_kwh": 0.12,
         "per": "interval", "block_minutes": 60,
         "windows": [{"hours": [6, 24], "kvarh": "lag"}, {"hours": [0, 6], "kvarh": "lead"}]},
        {"kind": "kvarh_excess", "label": "half_hourly", "tan_phi_limit": 0.33, "price_per_kvarh": 0.006,
         "kvarh": "max_lag_lead", "per": "interval", "block_minutes": 30,
         "tiers": [{"above_tan_phi": 0.75, "price_per_kvarh": 0.012}]},
        {"kind": "kvarh_banded", "label": "per_band", "tan_phi_limit": 0.33, "per": "window",
         "bands": [{"min_pf": 0.95, "price_per_kvarh": 0.0}, {"min_pf": 0.8, "price_per_kvarh": 0.02},
                   {"min_pf": 0.0, "price_per_kvarh": 0.03}],
         "windows": [{"name": "peak", "days": "weekdays", "hours": ["09:00", "12:00"]},
                     {"name": "peak", "days": "weekdays", "hours": ["18:30", "21:30"]},
                     {"name": "shoulder", "days": "weekdays", "hours": ["07:30", "09:00"]}]},
        {"kind": "leading_kvarh", "price_per_kvarh": 0.01, "per": "interval",
         "windows": [{"hours": ["22:30", "06:00"]}, {"days": "weekend", "hours": [0, 24]}]},
    ],
}


def meter_year(seed: int = 11) -> pd.DataFrame:
    """An invented bottling plant: two shifts on weekdays at PF ~0.80, light nights."""
    idx = pd.date_range(pd.Timestamp("2024-01-01", tz=TZ), pd.Timestamp("2025-01-01", tz=TZ),
                        freq="15min", inclusive="left")
    rng = np.random.default_rng(seed)
    busy = (idx.hour >= 6) & (idx.hour < 22) & (idx.day_of_week < 5)
    kw = np.where(busy, 380.0, 70.0) * rng.uniform(0.75, 1.25, idx.size)
    kvar = np.where(busy, 290.0, 40.0) * rng.uniform(0.75, 1.25, idx.size)
    return pd.DataFrame({"kwh": kw / 4, "kvarh_lag": kvar / 4, "kvarh_lead": 0.0,
                         "kwh_received": 0.0, "estimated": False},
                        index=pd.DatetimeIndex(idx.tz_convert("UTC"), name="start"))


def timed(frame, tariff, site, designs, repeat: int) -> list[float]:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        optimise(frame, tariff, tz=TZ, interval_minutes=15, site=site, designs=designs, sensitivity=False)
        times.append(time.perf_counter() - t0)
    return times


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    frame = meter_year()
    interval_tariff = tariff_from_dict(INTERVAL_TARIFF)
    example = load_tariff(EXAMPLES_DIR / "harrowgate_industrial_tou.toml")
    site = SiteElectrical(transformer_kva=1000, transformer_impedance_percent=6, nominal_voltage_v=400)
    sizes = (50, 75, 100, 125, 150, 200, 250, 300, 350, 400, 450, 500)
    designs = candidate_designs(sizes, detuning=(0.0, 5.67, 7.0, 14.0), nominal_voltage_v=400)[:100]
    print(f"intervals: {len(frame)}, candidates: {len(designs)}")
    # Alternate the two tariffs so both see the same machine load.
    t_example, t_interval = [], []
    for _ in range(args.repeat):
        t_example += timed(frame, example, site, designs, 1)
        t_interval += timed(frame, interval_tariff, site, designs, 1)
    m_ex, m_in = statistics.median(t_example), statistics.median(t_interval)
    print(f"shipped TOU example:      median {m_ex:.3f} s")
    print(f"interval-by-interval:     median {m_in:.3f} s, ratio to the example {m_in / m_ex:.2f}, "
          f"ratio to the {TARGET_S:g} s target {m_in / TARGET_S:.2f}")
    prepared = prepare_audit(frame, interval_tariff, tz=TZ, interval_minutes=15)
    runs = []
    for _ in range(20):
        t0 = time.perf_counter()
        prepared.run_charges(kvarh_lag=prepared.kvarh_lag * 0.7, kvarh_lead=prepared.kvarh_lead)
        runs.append(time.perf_counter() - t0)
    print(f"one re-pricing under the interval tariff: median {statistics.median(runs) * 1000:.2f} ms")


if __name__ == "__main__":
    main()
