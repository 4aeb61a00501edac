"""P, Q, S and power factor per interval; billing periods; period figures.

Pure functions over numpy arrays and pandas frames: no database, no Flask, no Python loop
over intervals. Sign convention (load view, IEEE Std 1459-2010): lagging (inductive) reactive
power is positive, leading (capacitive) negative, ``kvar_net = kvar_lag - kvar_lead``.

Zero load has no power factor: where apparent power is zero the PF is NaN (never 1, never 0),
and every consumer of a PF decides explicitly what a missing PF means.

References
----------
.. [1] IEEE Std 1459-2010, "IEEE Standard Definitions for the Measurement of Electric Power
   Quantities Under Sinusoidal, Nonsinusoidal, Balanced, or Unbalanced Conditions",
   section 3.1 (single-phase sinusoidal case): P, Q, S = P + jQ, PF = P / S.
"""
from __future__ import annotations

import calendar
import functools
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd

from auditor.errors import UsageError

__all__ = [
    "BillingPeriod",
    "billing_periods",
    "check_interval_minutes",
    "check_periods",
    "clip_periods",
    "complex_power",
    "complex_power_rms",
    "demand_from_energy",
    "energy_pf",
    "expected_intervals",
    "interval_power",
    "local_bounds_ns",
    "local_bounds_utc",
    "local_iso_times",
    "period_figures",
    "peak_figures",
    "power_factor",
    "ratio_figures",
    "reactive_period_figures",
    "ReactivePeriodFigures",
    "round_pf",
    "segment_bounds",
    "segment_argmax",
    "segment_max",
    "segment_sum",
    "ticks_per_second",
]


# --------------------------------------------------------------------------------------------
# Phasors
# --------------------------------------------------------------------------------------------
def complex_power(v_peak_phasor: complex, i_peak_phasor: complex) -> complex:
    """Complex power from peak-value phasors, ``S = 1/2 V I*``.

    Parameters
    ----------
    v_peak_phasor, i_peak_phasor : complex
        Voltage (V) and current (A) phasors whose magnitudes are peak values.

    Returns
    -------
    complex
        ``S = P + jQ`` (VA): real part active power P (W), imaginary part reactive power Q (var),
        positive when the current lags the voltage (inductive load).

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1: P = V I cos(theta), Q = V I sin(theta) with rms
       values; with peak phasors the factor 1/2 converts peak products to rms products.
    """
    return 0.5 * complex(v_peak_phasor) * complex(i_peak_phasor).conjugate()


def complex_power_rms(v_rms_phasor: complex, i_rms_phasor: complex) -> complex:
    """Complex power from rms-value phasors, ``S = V I*``.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1.
    """
    return complex(v_rms_phasor) * complex(i_rms_phasor).conjugate()


def power_factor(p, q):
    """Power factor magnitude and sense from active and reactive power (arrays or scalars).

    Parameters
    ----------
    p : array_like
        Active power (any unit, e.g. kW).
    q : array_like
        Reactive power in the same unit family (kvar), positive lagging.

    Returns
    -------
    pf : numpy.ndarray
        ``|P| / sqrt(P^2 + Q^2)``; NaN where ``P = Q = 0`` (zero load has no PF).
    sense : numpy.ndarray of str
        ``'lag'`` where Q > 0, ``'lead'`` where Q < 0, ``''`` at unity PF or zero load.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1: PF = P / S.
    """
    p = np.asarray(p, dtype=float)
    q = np.asarray(q, dtype=float)
    s = np.hypot(p, q)
    pf = np.divide(np.abs(p), s, out=np.full(np.broadcast(p, q).shape, np.nan), where=s > 0)
    sense = np.where(q > 0, "lag", np.where(q < 0, "lead", ""))
    sense = np.where(s > 0, sense, "")
    return pf, sense


def energy_pf(kwh, kvarh):
    """Energy-based (average) power factor ``kWh / sqrt(kWh^2 + kvarh^2)``.

    ``kvarh`` may be lagging only, net (lag - lead) or lag + lead; the caller chooses. NaN where
    both energies are zero (a period without load has no PF).

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1, applied to energies integrated over the period
       (the average PF tariffs bill on; common practice).
    """
    kwh = np.asarray(kwh, dtype=float)
    kvarh = np.asarray(kvarh, dtype=float)
    s = np.hypot(kwh, kvarh)
    return np.divide(kwh, s, out=np.full(np.broadcast(kwh, kvarh).shape, np.nan), where=s > 0)


def round_pf(pf, digits: int | None):
    """Round power factors half up to ``digits`` decimals (``None``: no rounding).

    Tariffs that round PF "to two decimals" mean the schoolbook rule (0.845 -> 0.85), not
    numpy's round-half-to-even, so the rounding is done explicitly. A tiny tolerance absorbs
    binary representation error (0.845 is stored as 0.84499999...).
    """
    pf = np.asarray(pf, dtype=float)
    if digits is None:
        return pf
    scale = 10.0**digits
    return np.floor(pf * scale + 0.5 + 1e-9) / scale


def demand_from_energy(energy, interval_minutes: int):
    """Average demand over an interval: ``kW = kWh * 60 / interval_minutes`` (kvar likewise)."""
    return np.asarray(energy, dtype=float) * (60.0 / interval_minutes)


def interval_power(frame: pd.DataFrame, interval_minutes: int) -> pd.DataFrame:
    """Per-interval P, Q, S and PF from an interval frame.

    Parameters
    ----------
    frame : pandas.DataFrame
        Interval frame (DEVELOPERS.md): columns ``kwh``, ``kvarh_lag``, ``kvarh_lead``.
    interval_minutes : int
        Interval length.

    Returns
    -------
    pandas.DataFrame
        Same index; columns ``kw``, ``kvar_lag``, ``kvar_lead``, ``kvar_net`` (lag - lead),
        ``kva`` = sqrt(kw^2 + kvar_net^2), ``pf`` (NaN at zero load) and ``pf_sense``
        ('lag', 'lead' or '').

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (P, Q, S = sqrt(P^2 + Q^2), PF = P / S).
    """
    check_interval_minutes(interval_minutes)
    kw = demand_from_energy(frame["kwh"].to_numpy(dtype=float), interval_minutes)
    kvar_lag = demand_from_energy(frame["kvarh_lag"].to_numpy(dtype=float), interval_minutes)
    kvar_lead = demand_from_energy(frame["kvarh_lead"].to_numpy(dtype=float), interval_minutes)
    kvar_net = kvar_lag - kvar_lead
    pf, sense = power_factor(kw, kvar_net)
    return pd.DataFrame(
        {
            "kw": kw,
            "kvar_lag": kvar_lag,
            "kvar_lead": kvar_lead,
            "kvar_net": kvar_net,
            "kva": np.hypot(kw, kvar_net),
            "pf": pf,
            "pf_sense": sense,
        },
        index=frame.index,
    )


def check_interval_minutes(interval_minutes: int) -> None:
    if not isinstance(interval_minutes, int | np.integer) or interval_minutes <= 0 or 1440 % interval_minutes:
        raise UsageError(
            f"interval_minutes must be a whole divisor of 1440 (5, 10, 15, 30, 60 ...), got {interval_minutes!r}"
        )


# --------------------------------------------------------------------------------------------
# Billing periods
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, order=True)
class BillingPeriod:
    """A billing period in the site's local calendar: ``[start, end)``, end exclusive."""

    start: date
    end: date

    def __post_init__(self) -> None:
        if not isinstance(self.start, date) or not isinstance(self.end, date):
            raise UsageError("a billing period needs a start and an end date")
        if self.end <= self.start:
            raise UsageError(
                f"billing period {self.start.isoformat()} to {self.end.isoformat()}: end must be after start"
            )

    @property
    def label(self) -> str:
        """``2025-03`` for a calendar month, otherwise ``2025-03-15..2025-04-15`` (end exclusive)."""
        if self.start.day == 1 and self.end == _add_months(self.start, 1):
            return f"{self.start.year:04d}-{self.start.month:02d}"
        return f"{self.start.isoformat()}..{self.end.isoformat()}"

    @property
    def days(self) -> int:
        return (self.end - self.start).days


def _add_months(d: date, months: int, day: int | None = None) -> date:
    """``d`` moved by whole months; ``day`` (default d.day) clamped to the month's length."""
    m = d.month - 1 + months
    year, month = d.year + m // 12, m % 12 + 1
    want = d.day if day is None else day
    return date(year, month, min(want, calendar.monthrange(year, month)[1]))


def _cycle_start(d: date, billing_day: int) -> date:
    """Start of the billing cycle containing local date ``d`` (cycles start on ``billing_day``,
    clamped to the month's last day in short months)."""
    this = date(d.year, d.month, min(billing_day, calendar.monthrange(d.year, d.month)[1]))
    return this if d >= this else _add_months(this, -1, billing_day)


def _to_local_date(ts, tz: str) -> date:
    t = pd.Timestamp(ts)
    if t.tzinfo is None:
        raise UsageError("timestamps must be timezone-aware (UTC)")
    return t.tz_convert(tz).date()


def billing_periods(
    first_utc,
    last_utc,
    tz: str,
    billing_day: int | None = None,
    explicit: Sequence[BillingPeriod] | None = None,
) -> list[BillingPeriod]:
    """Billing periods covering the local dates from ``first_utc`` to ``last_utc``.

    Parameters
    ----------
    first_utc, last_utc : timestamp-like, tz-aware
        First and last interval starts of the data (or of the range to bill).
    tz : str
        The site's IANA time zone; periods follow its local calendar.
    billing_day : int, optional
        Day of month (1-31) on which each cycle starts; a day beyond a short month's end means
        that month's last day. ``None`` or 1: calendar months.
    explicit : sequence of BillingPeriod, optional
        Periods as printed on the bills; returned sorted after checking they do not overlap
        (gaps between them are allowed: those days are not billed).

    Returns
    -------
    list of BillingPeriod
        Whole cycles: the first and last may extend beyond the data (they are partial).
    """
    if explicit is not None:
        return check_periods(explicit)
    if billing_day is None:
        billing_day = 1
    if isinstance(billing_day, bool) or not isinstance(billing_day, int | np.integer) or not 1 <= billing_day <= 31:
        raise UsageError(f"billing day must be a whole number from 1 to 31, got {billing_day!r}")
    first = _to_local_date(first_utc, tz)
    last = _to_local_date(last_utc, tz)
    if last < first:
        raise UsageError("the last interval is before the first")
    return list(_cycles(first, last, int(billing_day)))


@functools.lru_cache(maxsize=256)
def _cycles(first: date, last: date, billing_day: int) -> tuple[BillingPeriod, ...]:
    # cached: the meters of a batch cover the same dates (billing periods are frozen)
    start = _cycle_start(first, billing_day)
    out: list[BillingPeriod] = []
    k = 0
    # One iteration per billing cycle (a dozen a year), not per interval.
    while True:
        s = _add_months(start, k, billing_day)
        if s > last:
            break
        out.append(BillingPeriod(s, _add_months(start, k + 1, billing_day)))
        k += 1
    return tuple(out)


def check_periods(periods: Sequence[BillingPeriod]) -> list[BillingPeriod]:
    """Sorted copy of ``periods``; raises UsageError when two of them overlap or none is given."""
    ps = sorted(periods)
    if not ps:
        raise UsageError("no billing periods given")
    for a, b in zip(ps, ps[1:], strict=False):
        if b.start < a.end:
            raise UsageError(f"billing periods {a.label} and {b.label} overlap")
    return ps


def clip_periods(
    periods: Sequence[BillingPeriod], start: date | None, end: date | None
) -> tuple[list[BillingPeriod], list[bool]]:
    """Restrict periods to local dates ``[start, end)``; returns the periods and, for each, whether
    it was cut short (a partial billing period)."""
    out: list[BillingPeriod] = []
    clipped: list[bool] = []
    for p in periods:
        s = max(p.start, start) if start else p.start
        e = min(p.end, end) if end else p.end
        if e <= s:
            continue
        out.append(BillingPeriod(s, e))
        clipped.append((s, e) != (p.start, p.end))
    if not out:
        raise UsageError(
            f"no billing period falls inside {start.isoformat() if start else '…'} to {end.isoformat() if end else '…'}"
        )
    return out, clipped


def local_bounds_utc(dates: Sequence[date], tz: str) -> pd.DatetimeIndex:
    """UTC instants of local midnight on each date (DST-aware).

    Where midnight itself does not exist locally (a few zones change clocks at 00:00) the day
    starts at the first existing instant; where it occurs twice, at the first occurrence.
    """
    return _local_bounds_utc(tuple(dates), tz)


def local_bounds_ns(dates: Sequence[date], tz: str) -> np.ndarray:
    """:func:`local_bounds_utc` as integer nanoseconds since 1970-01-01 UTC (read-only)."""
    return _local_bounds_ns(tuple(dates), tz)


@functools.lru_cache(maxsize=256)
def _local_bounds_ns(dates: tuple[date, ...], tz: str) -> np.ndarray:
    ns = _local_bounds_utc(dates, tz).as_unit("ns").asi8.copy()
    ns.flags.writeable = False
    return ns


@functools.lru_cache(maxsize=256)
def _local_bounds_utc(dates: tuple[date, ...], tz: str) -> pd.DatetimeIndex:
    # cached: every meter audited over the same billing periods asks for the same instants
    # (pandas indexes are immutable, so sharing one is safe)
    naive = pd.DatetimeIndex(pd.to_datetime([pd.Timestamp(d) for d in dates]))
    local = naive.tz_localize(tz, ambiguous=np.ones(len(naive), dtype=bool), nonexistent="shift_forward")
    return local.tz_convert("UTC")


def expected_intervals(periods: Sequence[BillingPeriod], tz: str, interval_minutes: int) -> np.ndarray:
    """Intervals a complete meter records in each local-time period (92 or 100 quarter hours on a
    DST change day in zones that shift by one hour). The array is read-only."""
    check_interval_minutes(interval_minutes)
    return _expected_intervals(tuple(periods), tz, int(interval_minutes))


@functools.lru_cache(maxsize=256)
def _expected_intervals(periods: tuple[BillingPeriod, ...], tz: str, interval_minutes: int) -> np.ndarray:
    # cached like _local_bounds_utc (every meter of a batch has the same periods), so frozen
    starts = local_bounds_utc([p.start for p in periods], tz)
    ends = local_bounds_utc([p.end for p in periods], tz)
    seconds = (ends - starts).total_seconds().to_numpy()
    expected = np.floor(seconds / (interval_minutes * 60) + 1e-9).astype(np.int64)
    expected.flags.writeable = False
    return expected


def ticks_per_second(index: pd.DatetimeIndex) -> int:
    """Ticks of ``index.asi8`` in a second (pandas holds datetimes in s, ms, us or ns)."""
    return {"s": 1, "ms": 10**3, "us": 10**6, "ns": 10**9}[index.unit]


def local_iso_times(local_index: pd.DatetimeIndex, positions) -> list[str | None]:
    """ISO 8601 texts of the local interval starts at ``positions`` (None where a position is
    -1), as :meth:`pandas.Timestamp.isoformat` writes them.

    With the site's zone as a ``zoneinfo`` (or fixed-offset) zone, which is what pandas makes
    of a zone's name, each start goes from its integer ticks to a ``datetime`` in that zone
    directly: boxing a Timestamp costs ten times more. Other zones and starts between
    microseconds take the Timestamp.
    """
    positions = np.asarray(positions, dtype=np.int64)
    found = positions >= 0
    tz, per_second = local_index.tz, ticks_per_second(local_index)
    ticks = local_index.asi8[positions[found]]  # UTC
    if isinstance(tz, ZoneInfo | timezone) and (per_second <= 10**6 or not (ticks % 1000).any()):
        micros = (ticks * (10**6 // per_second) if per_second <= 10**6 else ticks // 1000).tolist()
        texts = [(_EPOCH + timedelta(microseconds=m)).astimezone(tz).isoformat() for m in micros]
    else:
        texts = [t.isoformat() for t in local_index[positions[found]]]
    it = iter(texts)
    return [next(it) if f else None for f in found.tolist()]


_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


# --------------------------------------------------------------------------------------------
# Segment reductions (periods are contiguous runs of a time-sorted array)
# --------------------------------------------------------------------------------------------
def segment_bounds(index_utc: pd.DatetimeIndex, periods: Sequence[BillingPeriod], tz: str):
    """Positions of each period's intervals in a sorted UTC index.

    Returns
    -------
    selected : numpy.ndarray of bool
        Intervals that fall inside some period (intervals between explicit periods do not).
    bounds : numpy.ndarray of int, length ``len(periods) + 1``
        In the *selected* array, period ``k`` is ``[bounds[k], bounds[k+1])``.
    """
    # Compare in one unit: pandas may hold the index and the bounds at different resolutions.
    starts = local_bounds_ns([p.start for p in periods], tz)
    ends = local_bounds_ns([p.end for p in periods], tz)
    t = pd.DatetimeIndex(index_utc).tz_convert("UTC").as_unit("ns").asi8
    pos = np.searchsorted(starts, t, side="right") - 1
    ok = pos >= 0
    ok[ok] = t[ok] < ends[pos[ok]]
    bounds = np.searchsorted(pos[ok], np.arange(len(periods) + 1), side="left")
    return ok, bounds.astype(np.int64)


def _reduce(ufunc, values: np.ndarray, bounds: np.ndarray, empty: float) -> np.ndarray:
    values = np.asarray(values, dtype=float)
    n = len(bounds) - 1
    nonempty = bounds[1:] > bounds[:-1]
    if n and nonempty.all():  # the usual case: every period has intervals
        return ufunc.reduceat(values[..., : bounds[-1]], bounds[:-1], axis=-1)
    out = np.full(values.shape[:-1] + (n,), empty, dtype=float)
    if nonempty.any():
        # Empty periods have start == end == next start, so dropping them keeps reduceat's
        # "up to the next index" semantics exact.
        out[..., nonempty] = ufunc.reduceat(values[..., : bounds[-1]], bounds[:-1][nonempty], axis=-1)
    return out


def segment_sum(values, bounds) -> np.ndarray:
    """Sum per period over the last axis (0 for an empty period)."""
    return _reduce(np.add, values, bounds, 0.0)


def segment_max(values, bounds) -> np.ndarray:
    """Maximum per period over the last axis (NaN for an empty period)."""
    return _reduce(np.maximum, values, bounds, np.nan)


def segment_argmax(values, bounds) -> np.ndarray:
    """Position of the first maximum of each period (-1 for an empty period)."""
    values = np.asarray(values, dtype=float)
    return _first_at(values, segment_max(values, bounds), bounds)


def _first_at(values: np.ndarray, peaks: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """Position of the first interval of each period whose value equals the period's ``peaks``."""
    hits = np.flatnonzero(values[: bounds[-1]] == np.repeat(peaks, np.diff(bounds)))
    return _first_in_segments(hits, bounds)


def _first_in_segments(hits: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """The first of the sorted positions ``hits`` inside each period (-1: none)."""
    bounds = np.asarray(bounds, dtype=np.int64)
    out = np.full(len(bounds) - 1, -1, dtype=np.int64)
    if hits.size:
        first = np.searchsorted(hits, bounds[:-1], side="left")
        ok = first < hits.size
        ok[ok] = hits[first[ok]] < bounds[1:][ok]
        out[ok] = hits[first[ok]]
    return out


def _peak_hypot(p: np.ndarray, q: np.ndarray, bounds: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per period the largest ``hypot(p, q)`` and the position of its first interval (-1: none),
    equal to :func:`segment_max` and :func:`segment_argmax` of ``np.hypot(p, q)``.

    ``hypot`` (a tenth of a microsecond per interval) is taken only for the intervals whose
    ``p^2 + q^2`` lies within a relative 1e-9 of the period's largest: the others are smaller by
    far more than the few ulps ``hypot`` and the squares can be off, so they can neither be nor
    tie the peak. A period whose largest square is not in the normal range (zero load, values
    near the limits of a double, NaN) keeps every interval.
    """
    bounds = np.asarray(bounds, dtype=np.int64)
    n = int(bounds[-1])
    p, q = p[:n], q[:n]
    with np.errstate(over="ignore", under="ignore"):  # such periods keep every interval (below)
        squares = p * p
        squares += q * q
    top = segment_max(squares, bounds)
    normal = (top >= 1e-280) & (top < np.inf)
    floor = np.where(normal, top * (1.0 - 1e-9), -np.inf)
    near = np.flatnonzero(~(squares < np.repeat(floor, np.diff(bounds))))  # NaN squares stay
    near_bounds = np.searchsorted(near, bounds, side="left").astype(np.int64)
    h = np.hypot(p[near], q[near])
    peaks = segment_max(h, near_bounds)
    pos = _first_at(h, peaks, near_bounds)
    found = pos >= 0
    pos[found] = near[pos[found]]
    return peaks, pos


# --------------------------------------------------------------------------------------------
# Period figures: one copy, used by the audit (PreparedAudit) and by period_figures
# --------------------------------------------------------------------------------------------
def peak_figures(kwh: np.ndarray, kw: np.ndarray, bounds: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """kWh per period, the peak kW and the position of its (first) interval (-1: none)."""
    n = len(bounds) - 1
    period_kwh = segment_sum(kwh, bounds)
    peak_kw = segment_max(kw, bounds)
    peak_kw_pos = _first_at(kw, peak_kw, bounds) if kw.size else np.full(n, -1, dtype=np.int64)
    return period_kwh, peak_kw, peak_kw_pos


@dataclass(frozen=True, eq=False)
class ReactivePeriodFigures:
    """What reactive energy changes in the figures of each period (see
    :func:`reactive_period_figures`)."""

    kvarh_lag: np.ndarray  # per period
    kvarh_lead: np.ndarray  # per period
    peak_kva: np.ndarray
    peak_kva_pos: np.ndarray  # position of the (first) interval of the kVA peak (-1: none)
    peak_kvar: np.ndarray  # lagging
    pf_at_peak: np.ndarray  # interval PF at the kW peak (NaN: no interval)
    pf_at_peak_sense: np.ndarray  # 'lag', 'lead' or ''
    kw: np.ndarray = field(repr=False)  # per interval
    kvar_net: np.ndarray = field(repr=False)  # per interval

    @functools.cached_property
    def kva(self) -> np.ndarray:
        """Per interval apparent power with Q_net, ``hypot(kW, kvar_net)``: worked out on first
        use (the peaks above do not need it for every interval)."""
        return np.hypot(self.kw, self.kvar_net)


def reactive_period_figures(kw: np.ndarray, kvarh_lag: np.ndarray, kvarh_lead: np.ndarray, bounds: np.ndarray,
                            interval_minutes: int, peak_kw_pos: np.ndarray) -> ReactivePeriodFigures:
    """Per period: lagging and leading kvarh, peak kVA (from Q_net) and peak lagging kvar, and
    the interval PF at the kW peak, from per-interval arrays.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (S = sqrt(P^2 + Q^2), PF = P / S).
    """
    to_demand = 60.0 / interval_minutes
    kvar_net = (kvarh_lag - kvarh_lead) * to_demand
    peak_kva, peak_kva_pos = _peak_hypot(kw, kvar_net, bounds)
    # x -> x * to_demand (> 0) keeps the order of floats, so the peak of the products is the
    # product of the peak, to the bit, without a product per interval
    peak_kvar = segment_max(kvarh_lag, bounds) * to_demand
    at = np.maximum(peak_kw_pos, 0)
    has = peak_kw_pos >= 0
    if kw.size:
        pf_peak, sense = power_factor(kw[at], kvar_net[at])
    else:
        pf_peak, sense = np.full(len(at), np.nan), np.full(len(at), "")
    return ReactivePeriodFigures(
        kvarh_lag=segment_sum(kvarh_lag, bounds), kvarh_lead=segment_sum(kvarh_lead, bounds),
        peak_kva=peak_kva, peak_kva_pos=peak_kva_pos, peak_kvar=peak_kvar,
        pf_at_peak=np.where(has, pf_peak, np.nan), pf_at_peak_sense=np.where(has, sense, ""),
        kw=kw, kvar_net=kvar_net,
    )


def ratio_figures(kwh: np.ndarray, kvarh_lag: np.ndarray, peak_kw: np.ndarray, intervals: np.ndarray,
                  expected: np.ndarray, interval_minutes: int) -> dict[str, np.ndarray]:
    """Per period: ``pf`` (lagging-only energy PF), ``tan_phi`` (lagging kvarh / kWh),
    ``load_factor`` (kWh / (peak kW x hours with data)) and ``coverage`` (intervals present /
    expected); NaN where undefined.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1, applied to period energies.
    """
    n = len(kwh)
    hours = intervals * interval_minutes / 60.0
    denom = peak_kw * hours
    return {
        "pf": energy_pf(kwh, kvarh_lag),
        "tan_phi": np.divide(kvarh_lag, kwh, out=np.full(n, np.nan), where=kwh > 0),
        "load_factor": np.divide(kwh, denom, out=np.full(n, np.nan), where=denom > 0),  # NaN > 0 is False
        "coverage": np.divide(intervals, expected, out=np.full(n, np.nan), where=expected > 0),
    }


def period_figures(
    frame: pd.DataFrame,
    periods: Sequence[BillingPeriod],
    tz: str,
    interval_minutes: int,
    kvarh_basis: str = "lag",
) -> pd.DataFrame:
    """Billing-period figures of an interval frame, one row per period.

    A pandas view over the same functions the audit uses (:func:`peak_figures`,
    :func:`reactive_period_figures`, :func:`ratio_figures`), so the two never disagree.

    Columns: ``start``, ``end`` (local dates), ``kwh``, ``kvarh_lag``, ``kvarh_lead``, ``pf``
    (lagging-only energy PF), ``pf_basis`` (energy PF with ``kvarh_basis``: 'lag', 'net' or
    'lag_plus_lead'), ``tan_phi`` (lagging), ``peak_kw`` and ``peak_kw_at`` (local interval
    start), ``peak_kva`` (with Q_net) and ``peak_kva_at``, ``peak_kvar`` (lagging),
    ``pf_at_peak`` and ``pf_at_peak_sense``, ``load_factor`` (kWh / (peak kW x hours with data)),
    ``intervals``, ``expected_intervals``, ``coverage``, ``estimated_intervals``.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (PF = P / S), applied to period energies.
    """
    check_interval_minutes(interval_minutes)
    periods = check_periods(periods)
    basis_of = {"lag": lambda lag, lead: lag, "net": lambda lag, lead: lag - lead,
                "lag_plus_lead": lambda lag, lead: lag + lead}
    if kvarh_basis not in basis_of:
        raise UsageError(f"kvarh basis must be 'lag', 'net' or 'lag_plus_lead', got {kvarh_basis!r}")
    frame = frame.sort_index()
    sel, bounds = segment_bounds(frame.index, periods, tz)
    f = frame[sel]
    kwh_i = f["kwh"].to_numpy(float)
    kw = demand_from_energy(kwh_i, interval_minutes)
    kwh, peak_kw, i_kw = peak_figures(kwh_i, kw, bounds)
    r = reactive_period_figures(kw, f["kvarh_lag"].to_numpy(float), f["kvarh_lead"].to_numpy(float), bounds,
                                interval_minutes, i_kw)
    present = np.diff(bounds)
    expected = expected_intervals(periods, tz, interval_minutes)
    ratios = ratio_figures(kwh, r.kvarh_lag, peak_kw, present, expected, interval_minutes)
    i_kva = r.peak_kva_pos
    local = f.index.tz_convert(tz)

    def at(i):
        return local_iso_times(local, i)

    return pd.DataFrame(
        {
            "start": [p.start for p in periods],
            "end": [p.end for p in periods],
            "kwh": kwh,
            "kvarh_lag": r.kvarh_lag,
            "kvarh_lead": r.kvarh_lead,
            "pf": ratios["pf"],
            "pf_basis": energy_pf(kwh, basis_of[kvarh_basis](r.kvarh_lag, r.kvarh_lead)),
            "tan_phi": ratios["tan_phi"],
            "peak_kw": peak_kw,
            "peak_kw_at": at(i_kw),
            "peak_kva": r.peak_kva,
            "peak_kva_at": at(i_kva),
            "peak_kvar": r.peak_kvar,
            "pf_at_peak": r.pf_at_peak,
            "pf_at_peak_sense": r.pf_at_peak_sense,
            "load_factor": ratios["load_factor"],
            "intervals": present,
            "expected_intervals": expected,
            "coverage": ratios["coverage"],
            "estimated_intervals": segment_sum(f["estimated"].to_numpy(dtype=float), bounds).astype(np.int64),
        }
    )
