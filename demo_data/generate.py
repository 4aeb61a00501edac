#!/usr/bin/env python3
"""Deterministic generator of the demo data (an invented scenario; every name is made up).

Two sites in the Europe/Berlin time zone, one calendar year (2025) of 15-minute data:

* **Kestrel Quay Cold Store** — a refrigerated warehouse. Screw compressors on drives and
  evaporator fans run day and night at PF 0.75–0.85 lagging; loading docks add daytime load on
  weekdays; summer raises the cooling load. Meters KQ-MAIN (the incomer) and KQ-DOCKS (the dock
  and office sub-board). A meter communication fault in March left two days of estimated values;
  the utility's later, revised export replaces them with actual reads.
* **Alder Row Offices** — an office block. Daytime HVAC and IT at PF ≈ 0.9 lagging; at night and
  at weekends the lightly loaded building goes leading (a fixed capacitor left switched in, long
  cable runs, LED drivers). Meter AR-01.

Exports carry local time with UTC offsets (+01:00 / +02:00), so the spring and autumn DST days
are in the data as they would be. A few gaps are left in on purpose.

    python demo_data/generate.py            # rewrites the files beside this script
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
TZ = "Europe/Berlin"
SEED = 20250101


def local_index() -> pd.DatetimeIndex:
    return pd.date_range(pd.Timestamp("2025-01-01", tz=TZ), pd.Timestamp("2026-01-01", tz=TZ),
                         freq="15min", inclusive="left")


def iso(idx: pd.DatetimeIndex) -> np.ndarray:
    s = idx.strftime("%Y-%m-%dT%H:%M:%S%z")
    return np.array([x[:-2] + ":" + x[-2:] for x in s])


def _shape(idx: pd.DatetimeIndex):
    hour = idx.hour.to_numpy() + idx.minute.to_numpy() / 60
    weekday = idx.day_of_week.to_numpy() < 5
    doy = idx.day_of_year.to_numpy()
    summer = 0.5 * (1 - np.cos(2 * np.pi * (doy - 15) / 365))  # 0 in mid-January, 1 in mid-July
    return hour, weekday, summer


def cold_store(idx, rng):
    hour, weekday, summer = _shape(idx)
    n = len(idx)
    compressors = 210 + 90 * summer + 25 * np.sin(2 * np.pi * hour / 24 - 2.2)
    cycling = 1 + 0.12 * np.sin(np.arange(n) * 2 * np.pi / 3.3) * rng.uniform(0.5, 1, n)
    kw = compressors * cycling + rng.normal(0, 6, n)
    pf = np.clip(0.80 - 0.04 * summer + rng.normal(0, 0.015, n), 0.75, 0.85)
    kvar = kw * np.tan(np.arccos(pf))
    return kw, kvar, np.zeros(n)


def docks(idx, rng):
    hour, weekday, summer = _shape(idx)
    n = len(idx)
    open_ = weekday & (hour >= 6) & (hour < 18)
    kw = 22 + np.where(open_, 70 + 20 * np.sin(np.pi * (hour - 6) / 12), 0) + rng.normal(0, 3, n)
    kw = np.clip(kw, 5, None)
    pf = np.where(open_, rng.uniform(0.78, 0.86, n), rng.uniform(0.86, 0.92, n))
    return kw, kw * np.tan(np.arccos(pf)), np.zeros(n)


def offices(idx, rng):
    hour, weekday, summer = _shape(idx)
    n = len(idx)
    occupied = weekday & (hour >= 7) & (hour < 19)
    ramp = np.clip(np.minimum(hour - 6.5, 19.5 - hour), 0, 1.5) / 1.5
    kw = np.where(occupied, 40 + 85 * ramp * (0.8 + 0.4 * summer), 14) + rng.normal(0, 2.5, n)
    kw = np.clip(kw, 6, None)
    # the building's own reactive demand, then a fixed 20 kvar capacitor that is always in
    q_load = kw * np.tan(np.arccos(np.where(occupied, rng.uniform(0.84, 0.9, n), 0.93)))
    q_net = q_load - 20 + rng.normal(0, 1.0, n)
    return kw, np.clip(q_net, 0, None), np.clip(-q_net, 0, None)


def frame(meter, idx, kw, kvar_lag, kvar_lead, flags=None) -> pd.DataFrame:
    h = 0.25  # a quarter hour: kWh = kW × 0.25 h
    out = pd.DataFrame({
        "meter": meter, "start": iso(idx),
        "kwh": np.round(kw * h, 3), "kvarh_lag": np.round(kvar_lag * h, 3),
        "kvarh_lead": np.round(kvar_lead * h, 3),
        "flag": "A" if flags is None else flags,
    })
    return out


def drop(df: pd.DataFrame, idx: pd.DatetimeIndex, start: str, periods: int) -> pd.DataFrame:
    """Leave out ``periods`` intervals from ``start`` (df rows are aligned with idx by label)."""
    t0 = pd.Timestamp(start, tz=TZ)
    mask = (idx >= t0) & (idx < t0 + pd.Timedelta(minutes=15 * periods))
    return df.loc[~df.index.isin(np.flatnonzero(mask))]


def main() -> None:
    rng = np.random.default_rng(SEED)
    idx = local_index()
    kq_kw, kq_lag, kq_lead = cold_store(idx, rng)
    dk_kw, dk_lag, dk_lead = docks(idx, rng)
    # the incomer sees the docks board too
    main_kw, main_lag = kq_kw + dk_kw, kq_lag + dk_lag

    # A communication fault from 11 March 06:00 for two days: the utility first sends flat
    # estimates (flag E), later the actual reads in a revised export.
    fault = (idx >= pd.Timestamp("2025-03-11 06:00", tz=TZ)) & (idx < pd.Timestamp("2025-03-13 06:00", tz=TZ))
    est_kw, est_lag = main_kw.copy(), main_lag.copy()
    est_kw[fault] = main_kw[fault].mean()
    est_lag[fault] = main_lag[fault].mean()
    flags = np.where(fault, "E", "A")
    kq = frame("KQ-MAIN", idx, est_kw, est_lag, kq_lead, flags)
    kq = drop(kq, idx, "2025-06-17 13:00", 6)  # a 90-minute outage of the data logger
    kq = drop(kq, idx, "2025-10-08 00:00", 96)  # a lost day of data
    kq.to_csv(HERE / "kestrel_quay_main_2025.csv", index=False)

    revised = frame("KQ-MAIN", idx[fault], main_kw[fault], main_lag[fault], kq_lead[fault])
    revised.to_csv(HERE / "kestrel_quay_main_2025-03_revised.csv", index=False)

    dk = frame("KQ-DOCKS", idx, dk_kw, dk_lag, dk_lead).drop(columns="flag")
    dk.to_csv(HERE / "kestrel_quay_docks_2025.csv", index=False)

    of_kw, of_lag, of_lead = offices(idx, rng)
    ar = frame("AR-01", idx, of_kw, of_lag, of_lead).drop(columns="flag")
    ar = drop(ar, idx, "2025-02-03 09:00", 3)
    ar.to_csv(HERE / "alder_row_2025.csv", index=False)
    print("wrote", ", ".join(p.name for p in sorted(HERE.glob("*.csv"))))


if __name__ == "__main__":
    main()
