"""Required compensation from interval data: Qc = P (tan φ1 − tan φ2) per interval.

The standard sizing formula applied to every demand interval rather than to a monthly total,
so that the size can be read off the distribution (the kvar that reaches the target in, say,
95 % of intervals) and the duration curve shows how often the bank would be fully needed.

References
----------
.. [1] IEEE Std 1036-2010, *Guide for the Application of Shunt Power Capacitors*: required
   compensation Qc = P (tan φ1 − tan φ2).
.. [2] IEEE Std 1459-2010: P, Q, S and PF = P / |S| in the sinusoidal case.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from auditor.errors import InputError, UsageError

FRAME_COLUMNS = ("kwh", "kvarh_lag", "kvarh_lead")


def check_pf(pf: float, name: str = "target_pf") -> float:
    """Validate a power factor in (0, 1]."""
    try:
        value = float(pf)
    except (TypeError, ValueError):
        raise UsageError(f"{name} must be a number between 0 and 1, got {pf!r}") from None
    if not math.isfinite(value) or not 0.0 < value <= 1.0:
        raise UsageError(f"{name} must be a power factor greater than 0 and at most 1, got {pf!r}")
    return value


def tan_phi(pf: float | np.ndarray) -> float | np.ndarray:
    """tan(arccos pf) = √(1 − pf²) / pf: the kvar per kW at a given PF.

    References
    ----------
    .. [1] IEEE Std 1459-2010, sinusoidal definitions (PF = cos φ, Q/P = tan φ).
    """
    pf = np.asarray(pf, dtype=float)
    out = np.sqrt(1.0 - pf**2) / pf
    return float(out) if out.ndim == 0 else out


def kw_multiplier(pf_from: float, pf_to: float) -> float:
    """The handbook "kW multiplier": kvar per kW to raise PF from ``pf_from`` to ``pf_to``.

    tan(arccos pf_from) − tan(arccos pf_to).

    References
    ----------
    .. [1] IEEE Std 1036-2010, Qc = P (tan φ1 − tan φ2).
    """
    return float(tan_phi(check_pf(pf_from, "pf_from")) - tan_phi(check_pf(pf_to, "pf_to")))


def required_kvar(kw: np.ndarray, kvar_net: np.ndarray, target_pf: float) -> np.ndarray:
    """Capacitive kvar needed per interval to reach ``target_pf`` (0 where already there).

    Qc = P tan φ1 − P tan φ2 = Q_net − P tan φ2, clipped at 0.

    References
    ----------
    .. [1] IEEE Std 1036-2010, Qc = P (tan φ1 − tan φ2).
    """
    target_pf = check_pf(target_pf)
    kw = np.asarray(kw, dtype=float)
    return np.maximum(np.asarray(kvar_net, dtype=float) - np.maximum(kw, 0.0) * tan_phi(target_pf), 0.0)


def check_frame(frame: pd.DataFrame, interval_minutes: int) -> None:
    """Raise InputError / UsageError for an interval frame the correction layer cannot use."""
    if not isinstance(frame, pd.DataFrame):
        raise InputError("interval frame", f"expected a pandas DataFrame, got {type(frame).__name__}")
    missing = [c for c in FRAME_COLUMNS if c not in frame.columns]
    if missing:
        raise InputError("interval frame", f"missing column(s) {', '.join(missing)}")
    if not isinstance(interval_minutes, int | np.integer) or interval_minutes <= 0 or 1440 % interval_minutes:
        raise UsageError(
            f"interval_minutes must be a whole number of minutes dividing a day (5, 15, 30, 60), "
            f"got {interval_minutes!r}"
        )
    if len(frame) == 0:
        raise InputError("interval frame", "no intervals to size a bank on")


@dataclass(frozen=True, eq=False)
class SizingResult:
    """Distribution of the compensation a site needs to reach a target PF.

    Attributes
    ----------
    required_kvar : numpy.ndarray
        Per interval, in frame order.
    duration_kvar : numpy.ndarray
        ``required_kvar`` sorted from largest to smallest (the duration curve).
    duration_percent : numpy.ndarray
        Percentage of intervals at or above each ``duration_kvar`` value.
    kvar_at_quantile : float
        kvar that is enough in ``quantile`` of the intervals.
    kvar_from_totals : float
        The single figure from the period totals, P_avg (tan φ1 − tan φ2), shown for
        comparison: it under-sizes a site whose reactive load varies.
    """

    target_pf: float
    quantile: float
    interval_minutes: int
    n_intervals: int
    required_kvar: np.ndarray
    duration_kvar: np.ndarray
    duration_percent: np.ndarray
    kvar_at_quantile: float
    kvar_max: float
    kvar_mean: float
    kvar_from_totals: float
    pf_before: float | None
    share_at_target: float

    def duration_curve(self, points: int = 101) -> list[dict]:
        """The duration curve resampled to ``points`` (percent of time, kvar) for a chart."""
        pct = np.linspace(0.0, 100.0, points)
        kvar = np.quantile(self.required_kvar, 1.0 - pct / 100.0) if self.n_intervals else pct * 0
        return [{"percent_of_intervals": float(p), "kvar": float(k)} for p, k in zip(pct, kvar, strict=True)]

    def to_dict(self) -> dict:
        return {
            "target_pf": self.target_pf,
            "quantile": self.quantile,
            "interval_minutes": self.interval_minutes,
            "n_intervals": self.n_intervals,
            "kvar_at_quantile": self.kvar_at_quantile,
            "kvar_max": self.kvar_max,
            "kvar_mean": self.kvar_mean,
            "kvar_from_totals": self.kvar_from_totals,
            "pf_before": self.pf_before,
            "share_at_target": self.share_at_target,
            "duration_curve": self.duration_curve(),
        }


def size_required(frame: pd.DataFrame, interval_minutes: int, target_pf: float,
                  quantile: float = 0.95) -> SizingResult:
    """Per-interval compensation needed for ``target_pf`` and its distribution.

    Parameters
    ----------
    frame : pandas.DataFrame
        Interval frame (columns ``kwh``, ``kvarh_lag``, ``kvarh_lead``).
    interval_minutes : int
        Interval length; kW = kWh × 60 / interval_minutes (kvar likewise).
    target_pf : float
        Lagging PF to reach.
    quantile : float
        Share of intervals the returned ``kvar_at_quantile`` must satisfy (0.95 = 95 %).

    Returns
    -------
    SizingResult

    References
    ----------
    .. [1] IEEE Std 1036-2010, Qc = P (tan φ1 − tan φ2).
    """
    check_frame(frame, interval_minutes)
    target_pf = check_pf(target_pf)
    if not 0.0 < float(quantile) <= 1.0:
        raise UsageError(f"quantile must be in (0, 1], e.g. 0.95; got {quantile!r}")
    to_demand = 60.0 / interval_minutes
    kwh = frame["kwh"].to_numpy(dtype=float)
    kvarh_net = frame["kvarh_lag"].to_numpy(dtype=float) - frame["kvarh_lead"].to_numpy(dtype=float)
    qc = required_kvar(kwh * to_demand, kvarh_net * to_demand, target_pf)
    duration = np.sort(qc)[::-1]
    n = qc.size
    total_kwh = float(np.nansum(kwh))
    total_kvarh = float(np.nansum(kvarh_net))
    hours = n * interval_minutes / 60.0
    if total_kwh > 0:
        pf_before = total_kwh / math.hypot(total_kwh, total_kvarh)
        from_totals = max(total_kvarh - total_kwh * tan_phi(target_pf), 0.0) / hours
    else:
        pf_before, from_totals = None, 0.0
    return SizingResult(
        target_pf=target_pf,
        quantile=float(quantile),
        interval_minutes=int(interval_minutes),
        n_intervals=int(n),
        required_kvar=qc,
        duration_kvar=duration,
        duration_percent=100.0 * np.arange(1, n + 1) / n,
        kvar_at_quantile=float(np.quantile(qc, quantile)),
        kvar_max=float(qc.max()),
        kvar_mean=float(qc.mean()),
        kvar_from_totals=float(from_totals),
        pf_before=pf_before,
        share_at_target=float(np.mean(qc <= 0.0)),
    )
