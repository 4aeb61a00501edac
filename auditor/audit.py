"""The audit: period figures and tariff charges for one meter, as a pure computation.

:func:`prepare_audit` does everything that does not depend on reactive energy once, as a list
of named steps (check the inputs, choose the billing periods, select their intervals, active
figures, tariff windows, coverage and warnings, demand history); :meth:`PreparedAudit.run`
then recomputes the reactive figures and every charge from per-interval kvarh arrays in a few
milliseconds, which is what lets the correction layer try many capacitor banks. The period
figures themselves come from :mod:`auditor.quantities` (one copy, shared with
:func:`auditor.quantities.period_figures`).
"""
from __future__ import annotations

import functools
import math
import threading
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import date

import numpy as np
import pandas as pd

from auditor.errors import UsageError
from auditor.quantities import (
    BillingPeriod,
    billing_periods,
    check_interval_minutes,
    check_periods,
    clip_periods,
    demand_from_energy,
    energy_pf,
    expected_intervals,
    local_bounds_ns,
    local_bounds_utc,
    local_iso_times,
    peak_figures,
    ratio_figures,
    reactive_period_figures,
    segment_bounds,
    segment_sum,
    ticks_per_second,
)
from auditor.tariffs.engine import (
    Charges,
    IntervalPlan,
    IntervalQuantities,
    PeriodQuantities,
    WindowSums,
    compute_charges,
    energy_window_index,
    local_calendar,
    mechanism_windows,
    plan_intervals,
    window_mask,
)
from auditor.tariffs.spec import Tariff

__all__ = ["AuditResult", "PeriodResult", "PreparedAudit", "audit", "prepare_audit"]

REQUIRED_COLUMNS = ("kwh", "kvarh_lag", "kvarh_lead")


def _f(x) -> float | None:
    """JSON float: None for NaN / inf (undefined PF, no data)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class PeriodResult:
    """Figures and charges of one billing period. Undefined figures (no load, no data) are NaN
    here and ``None`` in :meth:`to_dict`."""

    start: date
    end: date
    kwh: float
    kvarh_lag: float
    kvarh_lead: float
    pf: float  # lagging-only energy PF
    tan_phi: float  # lagging kvarh / kWh
    peak_kw: float
    peak_kw_at: str | None  # local ISO time of the interval start
    peak_kva: float  # with Q_net
    peak_kva_at: str | None
    peak_kvar: float  # lagging
    pf_at_peak: float
    pf_at_peak_sense: str
    load_factor: float
    coverage: float
    intervals: int
    expected_intervals: int
    estimated_intervals: int
    partial: bool
    billing_pf: float  # tariff-basis energy PF after the tariff's rounding
    billing_demand: float
    charges: dict[str, float]
    reactive_total: float
    total: float

    @property
    def period(self) -> BillingPeriod:
        return BillingPeriod(self.start, self.end)

    @property
    def label(self) -> str:
        return self.period.label

    def to_dict(self) -> dict:
        return {
            "start": self.start.isoformat(),
            "end": self.end.isoformat(),
            "kwh": _f(self.kwh),
            "kvarh_lag": _f(self.kvarh_lag),
            "kvarh_lead": _f(self.kvarh_lead),
            "pf": _f(self.pf),
            "tan_phi": _f(self.tan_phi),
            "peak_kw": _f(self.peak_kw),
            "peak_kw_at": self.peak_kw_at,
            "peak_kva": _f(self.peak_kva),
            "peak_kva_at": self.peak_kva_at,
            "peak_kvar": _f(self.peak_kvar),
            "pf_at_peak": _f(self.pf_at_peak),
            "load_factor": _f(self.load_factor),
            "coverage": _f(self.coverage),
            "estimated_intervals": int(self.estimated_intervals),
            "charges": {k: float(v) for k, v in self.charges.items()},
            "reactive_total": float(self.reactive_total),
            "total": float(self.total),
        }


@dataclass(frozen=True)
class AuditResult:
    periods: list[PeriodResult]
    totals: dict
    warnings: list[str]
    currency: str
    tariff_name: str
    charge_keys: tuple[str, ...] = ()
    reactive_keys: tuple[str, ...] = ()

    @property
    def total(self) -> float:
        return float(sum(p.total for p in self.periods))

    def to_dict(self, meter: str | None = None) -> dict:
        """The ``--json`` document: meter, tariff, currency, periods, totals, warnings."""
        return {
            "meter": meter,
            "tariff": self.tariff_name,
            "currency": self.currency,
            "periods": [p.to_dict() for p in self.periods],
            "totals": {k: _f(v) for k, v in self.totals.items()},
            "warnings": list(self.warnings),
        }

    def periods_frame(self) -> pd.DataFrame:
        """One row per period: every figure, then ``charge_<key>`` columns, reactive_total, total."""
        rows = []
        for p in self.periods:
            row = {k: getattr(p, k) for k in PeriodResult.__dataclass_fields__ if k not in ("charges",)}
            row.pop("reactive_total")
            row.pop("total")
            row.update({f"charge_{k}": v for k, v in p.charges.items()})
            row["reactive_total"] = p.reactive_total
            row["total"] = p.total
            rows.append(row)
        return pd.DataFrame(rows)


@dataclass(frozen=True, eq=False)
class PreparedAudit:
    """Everything of an audit that reactive energy does not change, computed once.

    Attributes mirror the selected range (intervals inside some billing period, time-sorted):
    ``index`` (UTC starts), ``kw``, ``kvar_lag``, ``kvar_lead``; period boundaries in
    ``bounds`` (period k is ``[bounds[k], bounds[k+1])``).
    """

    tariff: Tariff
    tz: str
    interval_minutes: int
    periods: list[BillingPeriod]
    index: pd.DatetimeIndex
    kwh: np.ndarray
    kw: np.ndarray
    kvarh_lag: np.ndarray
    kvarh_lead: np.ndarray
    bounds: np.ndarray
    partial: np.ndarray
    intervals: np.ndarray
    expected: np.ndarray
    estimated: np.ndarray
    period_kwh: np.ndarray
    peak_kw: np.ndarray
    peak_kw_pos: np.ndarray
    peak_kw_at: list
    energy_kwh: np.ndarray
    window_masks: np.ndarray  # (mechanisms with windows, intervals) as float 0/1
    window_kwh: np.ndarray  # (mechanisms with windows, periods)
    window_rows: tuple[int | None, ...]  # tariff.reactive position -> row in window_masks
    history_demand: np.ndarray
    warnings: tuple[str, ...]
    _local_index: pd.DatetimeIndex = field(repr=False, default=None)
    interval_plan: IntervalPlan | None = field(repr=False, default=None)  # per-band / per-interval clauses

    @functools.cached_property
    def kvar_lag(self) -> np.ndarray:
        """Lagging kvar per interval, worked out on first use (a correction needs it; an audit
        does not)."""
        return demand_from_energy(self.kvarh_lag, self.interval_minutes)

    @functools.cached_property
    def kvar_lead(self) -> np.ndarray:
        """Leading kvar per interval, worked out on first use."""
        return demand_from_energy(self.kvarh_lead, self.interval_minutes)

    # ---------------------------------------------------------------------------------------
    def _check(self, values, name: str) -> np.ndarray:
        a = np.asarray(values, dtype=float)
        if a.shape != self.kwh.shape:
            raise UsageError(f"{name} must have one value per interval ({self.kwh.shape[0]}), got shape {a.shape}")
        if a.size and not (np.nanmin(a) >= 0):
            raise UsageError(f"{name} must be finite and not negative")
        return a

    def quantities(self, kvarh_lag=None, kvarh_lead=None) -> tuple[PeriodQuantities, dict]:
        """Period quantities for the engine, with the given reactive energies per interval."""
        lag = self.kvarh_lag if kvarh_lag is None else self._check(kvarh_lag, "kvarh_lag")
        lead = self.kvarh_lead if kvarh_lead is None else self._check(kvarh_lead, "kvarh_lead")
        b = self.bounds
        r = reactive_period_figures(self.kw, lag, lead, b, self.interval_minutes, self.peak_kw_pos)
        windowed: list[WindowSums | None] = []
        if self.window_masks.shape[0]:
            wl = segment_sum(self.window_masks * lag, b)
            wd = segment_sum(self.window_masks * lead, b)
        for row in self.window_rows:
            windowed.append(None if row is None else WindowSums(self.window_kwh[row], wl[row], wd[row]))
        plan = self.interval_plan
        intervals = IntervalQuantities(self.kwh, lag, lead, self.kw, r.kva, b, plan) if plan and plan.needed else None
        q = PeriodQuantities(
            kwh=self.period_kwh,
            kvarh_lag=r.kvarh_lag,
            kvarh_lead=r.kvarh_lead,
            peak_kw=self.peak_kw,
            peak_kva=r.peak_kva,
            peak_kvar=r.peak_kvar,
            pf_at_peak=r.pf_at_peak,
            energy_kwh=self.energy_kwh,
            windowed=tuple(windowed),
            history_demand=self.history_demand,
            intervals=intervals,
        )
        return q, {"peak_kva_pos": r.peak_kva_pos, "pf_at_peak_sense": r.pf_at_peak_sense}

    def run_charges(self, kvarh_lag=None, kvarh_lead=None) -> Charges:
        """Charges only (arrays per period), the fastest path for an optimiser."""
        q, _ = self.quantities(kvarh_lag, kvarh_lead)
        return compute_charges(self.tariff, q)

    def run(self, kvarh_lag=None, kvarh_lead=None) -> AuditResult:
        """Figures and charges, optionally with replaced per-interval reactive energies."""
        q, extra = self.quantities(kvarh_lag, kvarh_lead)
        ch = compute_charges(self.tariff, q)
        ratios = ratio_figures(q.kwh, q.kvarh_lag, self.peak_kw, self.intervals, self.expected,
                               self.interval_minutes)
        pf = ratios["pf"]
        warnings = list(self.warnings)
        for k in np.flatnonzero(~np.isfinite(pf) & (self.intervals > 0)):
            warnings.append(f"{self.periods[k].label}: no load, so no power factor; PF clauses charge nothing")
        keys = self.tariff.charge_keys
        # every per-period array as a list of Python numbers at once (tolist converts in C)
        figures = {
            "kwh": q.kwh, "kvarh_lag": q.kvarh_lag, "kvarh_lead": q.kvarh_lead, "pf": pf,
            "tan_phi": ratios["tan_phi"], "peak_kw": self.peak_kw, "peak_kva": q.peak_kva,
            "peak_kvar": q.peak_kvar, "pf_at_peak": q.pf_at_peak, "load_factor": ratios["load_factor"],
            "coverage": ratios["coverage"], "billing_pf": ch.billing_pf, "billing_demand": ch.billing_demand,
            "reactive_total": ch.reactive_total, "total": ch.total,
        }
        columns = {name: np.asarray(a, dtype=float).tolist() for name, a in figures.items()}
        counts = {"intervals": self.intervals, "expected_intervals": self.expected,
                  "estimated_intervals": self.estimated}
        columns.update({name: np.asarray(a, dtype=np.int64).tolist() for name, a in counts.items()})
        columns["partial"] = np.asarray(self.partial, dtype=bool).tolist()
        columns["pf_at_peak_sense"] = [str(x) for x in extra["pf_at_peak_sense"].tolist()]
        columns["peak_kw_at"] = self.peak_kw_at
        columns["peak_kva_at"] = local_iso_times(self._local_index, extra["peak_kva_pos"])
        amounts = [np.asarray(ch.amounts[key], dtype=float).tolist() for key in keys]
        charges = [dict(zip(keys, row, strict=True)) for row in zip(*amounts, strict=True)] if keys \
            else [{} for _ in self.periods]
        names = list(columns)
        results = [
            PeriodResult(start=p.start, end=p.end, charges=c, **dict(zip(names, row, strict=True)))
            for p, c, row in zip(self.periods, charges, zip(*columns.values(), strict=True), strict=True)
        ]
        kwh_all = float(q.kwh.sum())
        lag_all = float(q.kvarh_lag.sum())
        totals = {
            "kwh": kwh_all,
            "kvarh_lag": lag_all,
            "kvarh_lead": float(q.kvarh_lead.sum()),
            "pf": float(energy_pf(kwh_all, lag_all)),
        }
        totals.update({key: float(ch.amounts[key].sum()) for key in keys})
        totals["reactive_total"] = float(ch.reactive_total.sum())
        totals["total"] = float(ch.total.sum())
        return AuditResult(
            periods=results,
            totals=totals,
            warnings=warnings,
            currency=self.tariff.currency,
            tariff_name=self.tariff.name,
            charge_keys=keys,
            reactive_keys=self.tariff.reactive_keys,
        )


def _check_frame(frame: pd.DataFrame) -> tuple[pd.DataFrame, dict[str, np.ndarray]]:
    """The frame, time-sorted, and its required columns as float arrays (read once here)."""
    if not isinstance(frame, pd.DataFrame):
        raise UsageError("the interval data must be a DataFrame (the interval frame of DEVELOPERS.md)")
    missing = [c for c in REQUIRED_COLUMNS if c not in frame.columns]
    if missing:
        raise UsageError(f"the interval frame lacks column(s) {', '.join(missing)}")
    if not isinstance(frame.index, pd.DatetimeIndex) or frame.index.tz is None:
        raise UsageError("the interval frame needs a timezone-aware (UTC) DatetimeIndex of interval starts")
    if not _strictly_increasing(frame.index):  # else sorted without duplicates: nothing to look at
        if not frame.index.is_monotonic_increasing:
            frame = frame.sort_index()
        if frame.index.has_duplicates:
            dup = frame.index[frame.index.duplicated()][0]
            raise UsageError(f"the interval frame has duplicate interval starts (first: {dup.isoformat()})")
    columns = {}
    for c in REQUIRED_COLUMNS:
        v = frame[c].to_numpy(dtype=float)
        # NaN fails both comparisons, -inf the first, +inf the second
        if v.size and not (v.min() >= 0 and v.max() < np.inf):
            raise UsageError(f"column {c} must hold finite values of at least 0")
        columns[c] = v
    return frame, columns


def _strictly_increasing(index: pd.DatetimeIndex) -> bool:
    """Every start after the one before (sorted, no duplicates), from the integer ticks: one pass
    instead of pandas' two (order, then a hash table for duplicates). NaT, the smallest tick,
    can only come first: that index takes pandas' own checks."""
    ticks = index.asi8
    return ticks.size < 2 or (ticks[0] != np.iinfo(np.int64).min and bool((ticks[1:] > ticks[:-1]).all()))


def prepare_audit(
    frame: pd.DataFrame,
    tariff: Tariff,
    *,
    tz: str,
    interval_minutes: int,
    periods: Sequence[BillingPeriod] | None = None,
    billing_day: int | None = None,
    start: date | None = None,
    end: date | None = None,
    history_peak_kw: Sequence[float] | None = None,
) -> PreparedAudit:
    """Precompute an audit of one meter's interval frame under ``tariff``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Interval frame (DEVELOPERS.md): UTC DatetimeIndex of interval starts; columns ``kwh``,
        ``kvarh_lag``, ``kvarh_lead`` and optionally ``estimated``.
    tariff : Tariff
        A validated tariff (:func:`auditor.tariffs.load_tariff`).
    tz : str
        The site's IANA time zone: periods, windows and holidays follow its local calendar.
    interval_minutes : int
        Interval length (never guessed here).
    periods : list of BillingPeriod, optional
        Explicit billing periods (as on the bills). Default: cycles of ``billing_day``
        (calendar months when None) covering the data, or ``start``..``end`` when given.
    start, end : datetime.date, optional
        Local dates limiting the audit to ``[start, end)``; cycles cut by them are partial.
    history_peak_kw : list of float, optional
        Measured demand of the periods before the first one, oldest first, in the tariff's
        demand unit (kW; kVA when ``demand.basis = "kva"``), for the ratchet.

    Returns
    -------
    PreparedAudit

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (P, Q, S, PF).
    """
    frame, columns = _check_inputs(frame, tariff, interval_minutes, start, end)
    ps, clipped = _choose_periods(frame, tz, interval_minutes, periods, billing_day, start, end)
    sel = _select_intervals(frame, columns, ps, tz, interval_minutes)
    active = _active_figures(sel, ps, tz, interval_minutes)
    windows = _tariff_windows(tariff, sel, tz, interval_minutes)
    partial, warnings = _coverage_and_warnings(frame, ps, clipped, tz, interval_minutes, active,
                                               outside=len(frame) - len(sel.index))
    history = _demand_history(history_peak_kw)
    return PreparedAudit(
        tariff=tariff,
        tz=tz,
        interval_minutes=int(interval_minutes),
        periods=list(ps),
        index=sel.index,
        kwh=sel.kwh,
        kw=sel.kw,
        kvarh_lag=sel.kvarh_lag,
        kvarh_lead=sel.kvarh_lead,
        bounds=sel.bounds,
        partial=partial,
        intervals=active.intervals,
        expected=active.expected,
        estimated=active.estimated,
        period_kwh=active.period_kwh,
        peak_kw=active.peak_kw,
        peak_kw_pos=active.peak_kw_pos,
        peak_kw_at=active.peak_kw_at,
        energy_kwh=windows.energy_kwh,
        window_masks=windows.masks,
        window_kwh=windows.kwh,
        window_rows=windows.rows,
        history_demand=history,
        warnings=tuple(warnings),
        _local_index=sel.local_index,
        interval_plan=windows.plan,
    )


# --------------------------------------------------------------------------------------------
# the steps of prepare_audit
# --------------------------------------------------------------------------------------------
def _check_inputs(frame: pd.DataFrame, tariff: Tariff, interval_minutes: int, start: date | None,
                  end: date | None) -> tuple[pd.DataFrame, dict[str, np.ndarray]]:
    """Step 1: the interval length, the tariff, the frame (sorted, with its required columns as
    arrays) and the range."""
    check_interval_minutes(interval_minutes)
    if not isinstance(tariff, Tariff):
        raise UsageError("tariff must be a Tariff (load it with auditor.tariffs.load_tariff)")
    frame, columns = _check_frame(frame)
    if start is not None and end is not None and end <= start:
        raise UsageError(f"end {end.isoformat()} must be after start {start.isoformat()}")
    return frame, columns


def _choose_periods(frame: pd.DataFrame, tz: str, interval_minutes: int,
                    periods: Sequence[BillingPeriod] | None, billing_day: int | None,
                    start: date | None, end: date | None) -> tuple[list[BillingPeriod], list[bool]]:
    """Step 2: the billing periods (given, or cycles covering the data or ``start``..``end``),
    cut to the range; ``clipped[k]`` says period k was cut."""
    if periods is not None:
        ps = check_periods(periods)
    else:
        if frame.empty and (start is None or end is None):
            raise UsageError("no interval data to audit (give start and end, or billing periods)")
        step = pd.Timedelta(minutes=interval_minutes)
        first = local_bounds_utc([start], tz)[0] if start is not None else frame.index[0]
        last = local_bounds_utc([end], tz)[0] - step if end is not None else frame.index[-1]
        if start is not None and end is None and last < first:
            raise UsageError(f"no interval data on or after {start.isoformat()}")
        if end is not None and start is None and last < first:
            raise UsageError(f"no interval data before {end.isoformat()}")
        ps = billing_periods(first, last, tz, billing_day=billing_day)
    clipped = [False] * len(ps)
    if start is not None or end is not None:
        ps, clipped = clip_periods(ps, start, end)
    return ps, clipped


@dataclass(frozen=True, eq=False)
class _Selected:
    """The intervals inside some billing period, time-sorted, as arrays."""

    bounds: np.ndarray
    index: pd.DatetimeIndex  # UTC
    local_index: pd.DatetimeIndex
    kwh: np.ndarray
    kw: np.ndarray
    kvarh_lag: np.ndarray
    kvarh_lead: np.ndarray
    estimated: np.ndarray
    shared_key: tuple | None = None  # set when the index is one other meters may share


# Meters audited one after another usually share their interval index (a year of 15-minute
# intervals without gaps) and their billing periods: what depends only on those — which
# intervals fall in which period, their local calendar, the tariff's window masks — is kept
# for the last few such indexes. A regular index (no gaps) is known by its first start and
# length; any other index is computed afresh.
_SHARED_MAX = 8
_shared: OrderedDict = OrderedDict()
_shared_lock = threading.Lock()


def _regular_index_key(index: pd.DatetimeIndex, interval_minutes: int) -> tuple | None:
    n = len(index)
    if n < 2:
        return None
    per_second = ticks_per_second(index)  # no converted copy of the index
    ticks = index.asi8
    first, last = int(ticks[0]), int(ticks[-1])
    if last - first != (n - 1) * interval_minutes * 60 * per_second or first % per_second:
        return None  # gaps (or starts between seconds): this meter's own index
    return (first // per_second, n, int(interval_minutes))


def _read_only(value):
    """Shared arrays are frozen, so that no caller can change another meter's audit."""
    for a in value if isinstance(value, tuple) else (value,):
        if isinstance(a, np.ndarray):
            a.flags.writeable = False
    return value


def _shared_value(key: tuple | None, make):
    if key is None:
        return make()
    with _shared_lock:
        if key in _shared:
            _shared.move_to_end(key)
            return _shared[key]
    value = _read_only(make())
    with _shared_lock:
        _shared[key] = value
        while len(_shared) > _SHARED_MAX:
            _shared.popitem(last=False)
    return value


def _select_intervals(frame: pd.DataFrame, columns: dict[str, np.ndarray], ps: list[BillingPeriod], tz: str,
                      interval_minutes: int) -> _Selected:
    """Step 3: the intervals of the periods and their boundaries (period k is
    ``[bounds[k], bounds[k+1])``); ``columns`` are the frame's required columns as arrays."""
    regular = _regular_index_key(frame.index, interval_minutes)

    def positions():
        sel, bounds = segment_bounds(frame.index, ps, tz)
        index = frame.index[sel].tz_convert("UTC")
        return sel, bounds, index, index.tz_convert(tz)

    sel, bounds, index, local_index = _shared_value(
        None if regular is None else ("select", regular, tz, tuple(ps)), positions)
    every = bool(sel.all())  # usually every interval is in some period: no copy

    def selected(values: np.ndarray) -> np.ndarray:
        return values if every else values[sel]

    kwh = selected(columns["kwh"])
    est = (selected(frame["estimated"].to_numpy(dtype=bool)) if "estimated" in frame.columns
           else np.zeros(len(kwh), dtype=bool))
    return _Selected(bounds=bounds, index=index, local_index=local_index, kwh=kwh,
                     kw=demand_from_energy(kwh, interval_minutes),
                     kvarh_lag=selected(columns["kvarh_lag"]), kvarh_lead=selected(columns["kvarh_lead"]),
                     estimated=est, shared_key=None if regular is None else (regular, tz, tuple(ps)))


@dataclass(frozen=True, eq=False)
class _Active:
    """Per period: what reactive energy does not change."""

    intervals: np.ndarray
    expected: np.ndarray
    estimated: np.ndarray
    period_kwh: np.ndarray
    peak_kw: np.ndarray
    peak_kw_pos: np.ndarray
    peak_kw_at: list


def _active_figures(sel: _Selected, ps: list[BillingPeriod], tz: str, interval_minutes: int) -> _Active:
    """Step 4: intervals present and expected (local time, DST-aware), estimated intervals, kWh
    and the kW peak with its local time."""
    period_kwh, peak_kw, peak_kw_pos = peak_figures(sel.kwh, sel.kw, sel.bounds)
    return _Active(
        intervals=np.diff(sel.bounds),
        expected=expected_intervals(ps, tz, interval_minutes),
        estimated=(segment_sum(sel.estimated.astype(float), sel.bounds).astype(np.int64) if sel.estimated.any()
                   else np.zeros(len(ps), dtype=np.int64)),
        period_kwh=period_kwh, peak_kw=peak_kw, peak_kw_pos=peak_kw_pos,
        peak_kw_at=local_iso_times(sel.local_index, peak_kw_pos),
    )


@dataclass(frozen=True, eq=False)
class _Windows:
    energy_kwh: np.ndarray  # (energy windows + 1, periods)
    masks: np.ndarray  # (reactive clauses with windows, intervals) as float 0/1
    kwh: np.ndarray  # (reactive clauses with windows, periods)
    rows: tuple[int | None, ...]  # tariff.reactive position -> row in masks
    plan: IntervalPlan | None  # per-band / per-interval clauses (None when the tariff has none)


def _tariff_windows(tariff: Tariff, sel: _Selected, tz: str, interval_minutes: int) -> _Windows:
    """Step 5: kWh per energy window, and the local-time masks of the reactive clauses that
    count energy inside windows (:func:`auditor.tariffs.engine.mechanism_windows`)."""
    n = len(sel.bounds) - 1

    def calendar_parts():
        cal = local_calendar(sel.index, tz, tariff.calendar)
        masks, rows = [], []
        for m in tariff.reactive:
            ws = mechanism_windows(m)
            if ws:
                mask = np.zeros(len(sel.index), dtype=bool)
                for w in ws:
                    mask |= window_mask(w, cal)
                rows.append(len(masks))
                masks.append(mask.astype(float))
            else:
                rows.append(None)
        # bin of each interval in the kWh per (energy window, period): window × periods + period
        bins = energy_window_index(tariff.energy, cal) * n + np.repeat(np.arange(n), np.diff(sel.bounds))
        return (tariff, bins, np.vstack(masks) if masks else np.zeros((0, len(sel.index))), tuple(rows), cal)

    key = None if sel.shared_key is None else ("windows", sel.shared_key, id(tariff))
    parts = _shared_value(key, calendar_parts)
    if parts[0] is not tariff:  # another tariff object took the same id: compute afresh
        parts = calendar_parts()
    _, bins, window_masks, rows, cal = parts
    # kWh per (energy window, period) in one pass
    energy_kwh = np.bincount(bins, weights=sel.kwh, minlength=(len(tariff.energy.windows) + 1) * n).reshape(-1, n)
    masks = window_masks.shape[0]
    window_kwh = segment_sum(window_masks * sel.kwh, sel.bounds) if masks else np.zeros((0, n))
    plan = plan_intervals(tariff, cal, sel.bounds, interval_minutes, sel.kwh)
    return _Windows(energy_kwh, window_masks, window_kwh, rows, plan)


def _coverage_and_warnings(frame: pd.DataFrame, ps: list[BillingPeriod], clipped: list[bool], tz: str,
                           interval_minutes: int, active: _Active, outside: int) -> tuple[np.ndarray, list[str]]:
    """Step 6: which periods are partial (beyond the data, or a cycle cut by the range), and a
    warning for every partial, gappy or estimated period — never silent."""
    step = pd.Timedelta(minutes=interval_minutes)
    intervals, expected, estimated = active.intervals, active.expected, active.estimated
    partial = np.array(clipped, dtype=bool)
    warnings: list[str] = []
    if not frame.empty:
        # compared as integer nanoseconds (the index and the bounds may differ in unit)
        ticks, to_ns = frame.index.asi8, 10**9 // ticks_per_second(frame.index)
        data_first, data_end = int(ticks[0]) * to_ns, int(ticks[-1]) * to_ns + interval_minutes * 60 * 10**9
        partial |= (local_bounds_ns([p.start for p in ps], tz) < data_first) | \
            (local_bounds_ns([p.end for p in ps], tz) > data_end)
    # only the periods with something to say are looked at one by one (usually the first and last)
    quiet = (intervals > 0) & ~partial & (intervals >= expected) & (estimated == 0)
    for k in np.flatnonzero(~quiet).tolist():
        p = ps[k]
        label = p.label
        if intervals[k] == 0:
            warnings.append(f"{label}: no interval data; only fixed charges (and any demand ratchet) are billed")
            continue
        if clipped[k]:
            warnings.append(f"{label}: partial billing period (the billing cycle is cut by the audited range)")
        elif partial[k]:
            a = max(local_bounds_utc([p.start], tz)[0], frame.index[0]).tz_convert(tz)
            b = min(local_bounds_utc([p.end], tz)[0], frame.index[-1] + step).tz_convert(tz)
            warnings.append(
                f"{label}: partial period: data cover {a.isoformat()} to {b.isoformat()} only"
            )
        if intervals[k] < expected[k]:
            cov = intervals[k] / expected[k] * 100
            missing = expected[k] - intervals[k]
            warnings.append(
                f"{label}: coverage {cov:.1f} % ({missing} of {expected[k]} intervals missing)"
            )
        if estimated[k]:
            warnings.append(f"{label}: {estimated[k]} estimated interval{'s' if estimated[k] > 1 else ''}")
    if outside > 0:
        warnings.append(f"{outside} intervals fall outside every billing period and are not billed")
    return partial, warnings


def _demand_history(history_peak_kw: Sequence[float] | None) -> np.ndarray:
    """Step 7: the measured demand of the periods before the first, for the ratchet."""
    history = np.asarray(history_peak_kw if history_peak_kw is not None else [], dtype=float)
    if history.ndim != 1 or (history.size and not (np.isfinite(history).all() and history.min() >= 0)):
        raise UsageError("history_peak_kw must be a list of demands of at least 0, oldest first")
    return history


def audit(frame: pd.DataFrame, tariff: Tariff, *, tz: str, interval_minutes: int, **kw) -> AuditResult:
    """``prepare_audit(frame, tariff, ...).run()``: figures and charges per billing period."""
    return prepare_audit(frame, tariff, tz=tz, interval_minutes=interval_minutes, **kw).run()
