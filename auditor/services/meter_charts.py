"""Interval-level chart data of one meter, reduced for a browser: the PF heat map, a thinned
P–Q sample and the duration curve of the kvar needed (cached per data version).

References
----------
.. [1] IEEE Std 1459-2010, section 3.1.1: PF = P / S (per-interval PF of the heat map).
.. [2] IEEE Std 1036-2010: required compensation Qc = P (tan φ1 − tan φ2) (the target-PF line
   and the duration curve of the kvar needed).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from auditor.correction import size_required, tan_phi
from auditor.errors import UsageError
from auditor.quantities import power_factor
from auditor.services.cache import chart_cache, data_version
from auditor.services.meters import load_meter
from auditor.store import Store

__all__ = ["MeterChartData", "SCATTER_MAX_POINTS", "meter_chart_data", "target_line_kvar"]

#: The P–Q scatter is thinned to at most this many points (a meter-year has 35,040).
SCATTER_MAX_POINTS = 4000


@dataclass(frozen=True, eq=False)
class MeterChartData:
    """Interval-level chart data of one meter, already reduced for a browser.

    Attributes
    ----------
    days : list of str
        Local dates (ISO) of the heat map rows.
    slot_minutes : int
        Width of a heat-map column (the meter's interval).
    pf_matrix : numpy.ndarray
        (days, slots per day) PF per interval from kWh and net kvarh (|P| / |S|, IEEE Std
        1459-2010), NaN where no data or no load.
    leading_matrix : numpy.ndarray of bool
        Where the interval's net reactive energy is leading (capacitive).
        On the autumn DST day the repeated hour keeps its second occurrence; on the spring
        day the skipped hour stays empty.
    scatter_kw, scatter_kvar : numpy.ndarray
        A time-ordered, evenly strided sample of (kW, net kvar) of at most
        :data:`SCATTER_MAX_POINTS` intervals.
    n_intervals : int
        Intervals the sample was drawn from.
    duration_percent, duration_kvar : list of float
        Duration curve of the kvar needed to reach ``target_pf`` (101 points).
    kvar_at_95, kvar_max, kvar_from_totals : float
        Figures of :func:`auditor.correction.size_required` at 95 %.
    target_pf : float
    """

    meter: str
    timezone: str
    days: list[str]
    slot_minutes: int
    pf_matrix: np.ndarray
    leading_matrix: np.ndarray
    scatter_kw: np.ndarray
    scatter_kvar: np.ndarray
    n_intervals: int
    duration_percent: list[float]
    duration_kvar: list[float]
    kvar_at_95: float
    kvar_max: float
    kvar_from_totals: float
    target_pf: float


def _chart_data(store: Store, meter: str, target_pf: float) -> MeterChartData:
    data = load_meter(store, meter)
    f = data.frame
    if f.empty:
        raise UsageError(f"meter {meter} has no readings")
    minutes = data.interval_minutes
    local = f.index.tz_convert(data.timezone)
    day = local.normalize().tz_localize(None)
    first = day.min()
    ndays = int((day.max() - first).days) + 1
    slots = 1440 // minutes
    row = ((day - first).days).to_numpy()
    col = ((local.hour * 60 + local.minute) // minutes).to_numpy()
    kwh = f["kwh"].to_numpy(dtype=float)
    kvarh_net = f["kvarh_lag"].to_numpy(dtype=float) - f["kvarh_lead"].to_numpy(dtype=float)
    pf, sense = power_factor(kwh, kvarh_net)
    matrix = np.full((ndays, slots), np.nan)
    matrix[row, col] = pf
    leading = np.zeros((ndays, slots), dtype=bool)
    leading[row, col] = sense == "lead"
    days = [d.date().isoformat() for d in pd.date_range(first, periods=ndays, freq="D")]
    to_demand = 60.0 / minutes
    kw = f["kwh"].to_numpy(dtype=float) * to_demand
    kvar = (f["kvarh_lag"].to_numpy(dtype=float) - f["kvarh_lead"].to_numpy(dtype=float)) * to_demand
    step = max(1, math.ceil(len(kw) / SCATTER_MAX_POINTS))
    sizing = size_required(f, minutes, target_pf, 0.95)
    curve = sizing.duration_curve(101)
    return MeterChartData(
        meter=meter, timezone=data.timezone, days=days, slot_minutes=minutes, pf_matrix=matrix,
        leading_matrix=leading,
        scatter_kw=kw[::step], scatter_kvar=kvar[::step], n_intervals=len(kw),
        duration_percent=[c["percent_of_intervals"] for c in curve],
        duration_kvar=[c["kvar"] for c in curve], kvar_at_95=sizing.kvar_at_quantile,
        kvar_max=sizing.kvar_max, kvar_from_totals=sizing.kvar_from_totals, target_pf=target_pf,
    )


def meter_chart_data(store: Store, meter: str, target_pf: float = 0.95) -> MeterChartData:
    """Heat map, P–Q sample and duration curve of one meter (cached per data version)."""
    key = (store.url, meter, round(float(target_pf), 4), data_version(store, meter))
    return chart_cache.get_or_make(key, lambda: _chart_data(store, meter, target_pf))


def target_line_kvar(kw_max: float, target_pf: float) -> list[float]:
    """Two points of the target-PF line Q = P tan(arccos PF) from 0 to ``kw_max``
    (IEEE Std 1036-2010: the kvar a load may draw at the target PF)."""
    return [0.0, float(kw_max) * float(tan_phi(target_pf))]
