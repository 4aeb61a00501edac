"""A tariff applied to day summaries: the engine's period quantities rebuilt from hourly sums and
daily peaks, vectorised over meters (each meter is one "period" of the engine).

Exact for what has happened: energy sums add up, every time-of-use window is made of whole local
hours (the tariff specification allows nothing finer), and a period's peak is its largest daily
peak with the reactive power of that same interval. A demand ratchet is left out here: it needs
eleven months of history, and the checks compare months with and without a change, which a
ratchet would blur rather than explain.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from auditor.quantities import power_factor
from auditor.tariffs.engine import (
    Charges,
    LocalCalendar,
    PeriodQuantities,
    WindowSums,
    compute_charges,
    energy_window_index,
    local_calendar,
    mechanism_windows,
    window_mask,
)
from auditor.tariffs.spec import Tariff

__all__ = ["PEAKS", "hour_cells", "quantities", "charges", "without_ratchet"]

#: Daily peak figures a period's peaks are taken from.
PEAKS = ("peak_kw", "peak_kw_kvar_net", "peak_kva", "peak_kvar")


def hour_cells(days: np.ndarray, tz: str, tariff: Tariff) -> LocalCalendar:
    """Local calendar of every hour of ``days`` (datetime64[D]): ``len(days) * 24`` cells, hour
    ``h`` of day ``d`` at position ``d * 24 + h``; weekday, month and public holiday per day."""
    days = np.asarray(days, dtype="datetime64[D]")
    noon = pd.DatetimeIndex(days.astype("datetime64[ns]") + np.timedelta64(12, "h")).tz_localize(tz)
    cal = local_calendar(noon.tz_convert("UTC"), tz, tariff.calendar)
    return LocalCalendar(weekday=np.repeat(cal.weekday, 24), hour=np.tile(np.arange(24, dtype=np.int8), len(days)),
                         month=np.repeat(cal.month, 24), holiday=np.repeat(cal.holiday, 24))


def without_ratchet(tariff: Tariff) -> Tariff:
    if tariff.demand is None or tariff.demand.ratchet_percent is None:
        return tariff
    return dataclasses.replace(tariff, demand=dataclasses.replace(tariff.demand, ratchet_percent=None))


def quantities(tariff: Tariff, cal: LocalCalendar, hourly: np.ndarray, peaks: dict,
               scale=1.0) -> PeriodQuantities:
    """Period quantities of K meters from their hourly energies.

    Parameters
    ----------
    tariff : Tariff
    cal : LocalCalendar
        :func:`hour_cells` of the C / 24 days the cells cover.
    hourly : numpy.ndarray
        ``(K, 3, C)``: kWh, lagging kvarh, leading kvarh per hour cell (zero where a cell is not
        part of the period).
    peaks : dict of str to numpy.ndarray (K,)
        :data:`PEAKS` of the period.
    scale : float or numpy.ndarray (K,)
        Factor on every energy (not on peaks): a few weeks stretched to a month.
    """
    scale = np.asarray(scale, dtype=float)
    kwh_c, lag_c, lead_c = hourly[:, 0, :], hourly[:, 1, :], hourly[:, 2, :]
    e_idx = energy_window_index(tariff.energy, cal)
    onehot = (e_idx[None, :] == np.arange(len(tariff.energy.windows) + 1)[:, None]).astype(float)
    energy_kwh = (onehot @ kwh_c.T) * scale
    windowed = []
    for m in tariff.reactive:
        ws = mechanism_windows(m)
        if not ws:
            windowed.append(None)
            continue
        mask = np.zeros(len(cal.hour), dtype=bool)
        for w in ws:
            mask |= window_mask(w, cal)
        mk = mask.astype(float)
        windowed.append(WindowSums(kwh_c @ mk * scale, lag_c @ mk * scale, lead_c @ mk * scale))
    pf_peak, _ = power_factor(peaks["peak_kw"], peaks["peak_kw_kvar_net"])
    return PeriodQuantities(
        kwh=kwh_c.sum(axis=1) * scale,
        kvarh_lag=lag_c.sum(axis=1) * scale,
        kvarh_lead=lead_c.sum(axis=1) * scale,
        peak_kw=np.asarray(peaks["peak_kw"], dtype=float),
        peak_kva=np.asarray(peaks["peak_kva"], dtype=float),
        peak_kvar=np.asarray(peaks["peak_kvar"], dtype=float),
        pf_at_peak=pf_peak,
        energy_kwh=energy_kwh,
        windowed=tuple(windowed),
        history_demand=np.zeros(0),
    )


def charges(tariff: Tariff, q: PeriodQuantities) -> Charges:
    """:func:`auditor.tariffs.engine.compute_charges` with each element its own period (no
    ratchet between them)."""
    return compute_charges(without_ratchet(tariff), q)
