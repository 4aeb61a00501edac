#!/usr/bin/env python3
"""Monitoring benchmark: the checks after a nightly import, against the import itself.

Builds a database of N meters (default 500) with nine weeks of 15-minute history (three time
zones, each meter with one of the shipped tariffs so that every check runs, the projection
included), runs the checks once (the first run summarises the history), then for each of
``--nights`` nights writes one day file per meter, imports them (``import_files``, one file at a
time as the inbox does) and runs the checks that follow every import
(``checks_after_import``), timing both side by side. Prints each night, the medians and the
ratio of the medians. Target: checks <= 10 % of the import.

    python benchmarks/bench_alerts.py --meters 500 --nights 3
"""
from __future__ import annotations

import argparse
import json
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from auditor.ingest.pipeline import ImportOptions
from auditor.services.alerts import checks_after_import, evaluate
from auditor.services.ingest import import_files
from auditor.services.meter_tariff import set_meter_tariff
from auditor.services.meters import set_site
from auditor.store import open_store

ZONES = ("Europe/Berlin", "Europe/London", "America/New_York")
TARIFFS = ("harrowgate_industrial_tou", "millbrook_commercial_pf", "tidewater_banded_kva")
FIRST_DAY = pd.Timestamp("2025-03-03")  # a Monday


def meter_name(i: int) -> str:
    return f"BM-{i:04d}"


def days_frame(meters: range, zone: str, first: pd.Timestamp, days: int, seed: int) -> pd.DataFrame:
    """Plain-CSV rows of ``meters`` for ``days`` local days from ``first`` (a daily and weekly
    load shape, PF about 0.8 with noise)."""
    idx = pd.date_range(first.tz_localize(zone), (first + pd.Timedelta(days=days)).tz_localize(zone),
                        freq="15min", inclusive="left")
    n = len(idx)
    hour = idx.hour.to_numpy() + idx.minute.to_numpy() / 60
    weekday = idx.day_of_week.to_numpy() < 5
    shape = 0.6 + 0.4 * np.where(weekday & (hour >= 6) & (hour < 20), 1.0, 0.2)
    size = np.random.default_rng(list(meters)).uniform(20, 200, len(meters))  # each meter keeps its size
    rng = np.random.default_rng(seed)
    kwh = (size[:, None] * shape[None, :] * rng.uniform(0.9, 1.1, (len(meters), n))) / 4
    lag = kwh * rng.uniform(0.6, 0.85, (len(meters), n))
    stamps = idx.strftime("%Y-%m-%dT%H:%M:%S%z").str.replace(r"(\d\d)(\d\d)$", r"\1:\2", regex=True)
    return pd.DataFrame({
        "meter": np.repeat([meter_name(i) for i in meters], n),
        "start": np.tile(stamps.to_numpy(), len(meters)),
        "kwh": np.round(kwh.ravel(), 3), "kvarh_lag": np.round(lag.ravel(), 3), "kvarh_lead": 0.0,
    })


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--meters", type=int, default=500)
    ap.add_argument("--history-days", type=int, default=63)
    ap.add_argument("--nights", type=int, default=3)
    ap.add_argument("--workdir")
    a = ap.parse_args()
    work = Path(a.workdir or tempfile.mkdtemp(prefix="bench-alerts-"))
    work.mkdir(parents=True, exist_ok=True)
    db = work / "alerts.sqlite3"
    for p in work.glob("alerts.sqlite3*"):
        p.unlink()
    store = open_store(f"sqlite:///{db}")
    groups = {z: range(k, a.meters, len(ZONES)) for k, z in enumerate(ZONES)}

    t = time.perf_counter()
    for k, (zone, meters) in enumerate(groups.items()):
        site = f"Bench {zone}"
        set_site(store, site, timezone=zone)
        hist = work / f"history_{k}.csv"
        days_frame(meters, zone, FIRST_DAY, a.history_days, seed=k).to_csv(hist, index=False)
        (o,) = import_files(store, [hist], ImportOptions(site=site, timezone=zone))
        assert o.status == "imported", o.message
        hist.unlink()
    for i in range(a.meters):
        set_meter_tariff(store, meter_name(i), TARIFFS[i % len(TARIFFS)])
    print(f"history: {a.meters} meters x {a.history_days} days imported in {time.perf_counter() - t:.1f} s", flush=True)

    day0 = FIRST_DAY + pd.Timedelta(days=a.history_days)
    t = time.perf_counter()
    first = evaluate(store, (day0 + pd.Timedelta(hours=2)).tz_localize("UTC"), trigger="command")
    print(f"first run (summarises the history): {time.perf_counter() - t:.1f} s, {len(first.raised)} alerts", flush=True)

    imports, checks = [], []
    for night in range(a.nights):
        day = day0 + pd.Timedelta(days=night)
        folder = work / f"night{night}"
        folder.mkdir(exist_ok=True)
        paths = []
        for zone, meters in groups.items():
            df = days_frame(meters, zone, day, 1, seed=100 + night)
            for name, part in df.groupby("meter", sort=False):
                p = folder / f"{name}_{day.date()}.csv"
                part.to_csv(p, index=False)
                paths.append((p, zone))
        t = time.perf_counter()
        outcomes = []
        for p, zone in paths:
            outcomes += import_files(store, [p], ImportOptions(site=f"Bench {zone}", timezone=zone))
        t_import = time.perf_counter() - t
        assert all(o.status == "imported" for o in outcomes)
        as_of = (day + pd.Timedelta(days=1, hours=5)).tz_localize("UTC")  # the next night
        t = time.perf_counter()
        summary = checks_after_import(store, [o.as_dict() for o in outcomes], as_of=as_of)
        t_checks = time.perf_counter() - t
        assert summary and "error" not in summary, summary
        imports.append(t_import)
        checks.append(t_checks)
        print(f"night {night + 1}: import {len(paths)} day files {t_import:6.2f} s   checks {t_checks:5.2f} s   "
              f"ratio {t_checks / t_import:.3f}   ({summary['raised']} new alerts)", flush=True)
    result = {"meters": a.meters, "history_days": a.history_days, "nights": a.nights,
              "import_median_s": round(statistics.median(imports), 3),
              "checks_median_s": round(statistics.median(checks), 3),
              "ratio": round(statistics.median(checks) / statistics.median(imports), 3),
              "target_ratio": 0.10}
    print(json.dumps(result))


if __name__ == "__main__":
    main()
