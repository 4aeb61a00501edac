"""Fixtures shared by the quantities, tariff and audit tests: small synthetic interval frames
and tariffs built from dicts (invented figures)."""
from __future__ import annotations

import copy

import numpy as np
import pandas as pd

from auditor.tariffs import tariff_from_dict

TZ = "Europe/Berlin"


def interval_frame(start: str, end: str, *, minutes: int = 60, tz: str = TZ, kwh=100.0,
                   kvarh_lag=60.0, kvarh_lead=0.0, estimated=False) -> pd.DataFrame:
    """An interval frame over local ``[start, end)`` with constant (or per-interval) values."""
    local = pd.date_range(start, end, freq=f"{minutes}min", tz=tz, inclusive="left")
    idx = local.tz_convert("UTC")
    idx.name = "start"
    n = len(idx)
    return pd.DataFrame(
        {
            "kwh": np.broadcast_to(np.asarray(kwh, float), n).copy(),
            "kvarh_lag": np.broadcast_to(np.asarray(kvarh_lag, float), n).copy(),
            "kvarh_lead": np.broadcast_to(np.asarray(kvarh_lead, float), n).copy(),
            "kwh_received": np.zeros(n),
            "estimated": np.broadcast_to(np.asarray(estimated, bool), n).copy(),
        },
        index=idx,
    )


def local_hours(frame: pd.DataFrame, tz: str = TZ) -> np.ndarray:
    return frame.index.tz_convert(tz).hour.to_numpy()


def set_at(frame: pd.DataFrame, local_time: str, tz: str = TZ, **values) -> pd.DataFrame:
    """Set columns of the interval starting at ``local_time``."""
    t = pd.Timestamp(local_time, tz=tz).tz_convert("UTC")
    for k, v in values.items():
        frame.loc[t, k] = v
    return frame


def june_frame(**kw) -> pd.DataFrame:
    """The hand-worked month: June 2025 in Europe/Berlin, 720 hourly intervals of 100 kWh and
    60 kvarh lagging (tan phi 0.6), plus one peak hour on Tuesday 10 June at 10:00 of 250 kWh
    and 150 kvarh (kW peak 250, kvar peak 150, still tan phi 0.6).

    Totals: kWh = 719 x 100 + 250 = 72,150; kvarh_lag = 719 x 60 + 150 = 43,290.
    """
    f = interval_frame("2025-06-01", "2025-07-01", minutes=60, **kw)
    return set_at(f, "2025-06-10 10:00", kwh=250.0, kvarh_lag=150.0)


BASE_TARIFF = {
    "name": "Test tariff",
    "currency": "EUR",
    "energy": {"price_per_kwh": 0.10},
    "demand": {"basis": "kw", "price_per_kw": 10.0},
}


def tariff(reactive=(), **top):
    """A tariff from BASE_TARIFF with the given reactive mechanisms and top-level overrides
    (a value of None removes the key)."""
    d = copy.deepcopy(BASE_TARIFF)
    for k, v in top.items():
        if v is None:
            d.pop(k, None)
        else:
            d[k] = v
    d["reactive"] = [dict(m) for m in reactive]
    return tariff_from_dict(d, source="test")
