"""The charge engine: one pure function per tariff mechanism, vectorised over billing periods,
and :func:`compute_charges`, which applies a whole :class:`~auditor.tariffs.model.Tariff`.

Every function takes numpy arrays with one element per billing period (or per interval for the
calendar masks and the interval-by-interval clauses) and returns an array per period. No pandas
groupby, no Python loop over intervals or periods: the correction optimiser calls the engine
hundreds of times.

Which kvarh each mechanism counts:

- ``kvarh_excess``, ``kvarh_banded``, ``pf_percent``, ``pf_demand_adjust`` (with ``pf =
  "energy"``): the mechanism's ``kvarh`` key, default the tariff's ``kvarh_basis`` (default
  lagging only). ``net`` is lag - lead; a net-leading period has no excess (max(0, ...)) while its
  energy PF uses the magnitude. ``max_lag_lead`` is the larger of lagging and leading energy (in
  each interval, for a clause worked out interval by interval).
- ``pf_demand_adjust`` with ``pf = "at_peak"``: the interval PF at the kW peak, from Q_net; with
  ``pf = "peak_kva"``: peak kW / peak kVA.
- ``kvar_demand``: the peak of lagging kvar.
- ``leading_kvarh``: leading kvarh inside its windows only.
- a ``kvarh_excess`` window may name its own reactive energy (``kvarh = "lag"`` or ``"lead"``):
  inside it, the clause counts that energy.

How a clause is worked out (``per``): over the whole period; separately in each time band
(``"window"``: windows of one name form a band; each band has its own excess and its own PF);
or interval by interval (``"interval"``: the excess of each metered interval, or of each block
of ``block_minutes`` in local time -- 1440: each local day -- summed over the period). The per-interval masks and blocks
depend on the calendar only and are prepared once (:func:`plan_intervals`); the sums are taken
again on every run from the per-interval energies (:class:`IntervalQuantities`).

The mechanisms themselves are generic tariff clauses (common practice; each utility sets its own
figures); the only published formulas they rest on are the definitions of PF and tan phi.

References
----------
.. [1] IEEE Std 1459-2010, section 3.1.1 (PF = P / S; tan phi = Q / P).
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from auditor.errors import InputError, UsageError
from auditor.quantities import energy_pf, segment_max, segment_sum
from auditor.tariffs.holiday_days import holiday_days
from auditor.tariffs.model import (
    Band,
    Calendar,
    EnergyCharge,
    KvarDemand,
    KvarhBanded,
    KvarhExcess,
    LeadingKvarh,
    PfDemandAdjust,
    PfPercent,
    Rounding,
    Slope,
    Tariff,
    Window,
    window_groups,
)

__all__ = [
    "Charges",
    "ClausePlan",
    "IntervalPlan",
    "IntervalQuantities",
    "LocalCalendar",
    "PeriodQuantities",
    "WindowSums",
    "compute_charges",
    "energy_charge",
    "energy_window_index",
    "kvar_demand_charge",
    "kvarh_banded_charge",
    "kvarh_excess_charge",
    "kvarh_of",
    "leading_kvarh_charge",
    "local_calendar",
    "mechanism_windows",
    "pf_adjusted_demand",
    "pf_energy_excess_kwh",
    "pf_percent_adjustment",
    "plan_intervals",
    "ratcheted_demand",
    "tier_quantities",
    "window_mask",
]


# --------------------------------------------------------------------------------------------
# Local calendar and time-of-use masks (per interval)
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LocalCalendar:
    """Local-time features of each interval start: weekday (0 = Monday), hour, month, holiday,
    minute of the day (0-1439) and the local wall-clock time in minutes since 1970 (for blocks).
    """

    weekday: np.ndarray
    hour: np.ndarray
    month: np.ndarray
    holiday: np.ndarray
    minute: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int16))
    wall_minutes: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))


def local_calendar(index_utc: pd.DatetimeIndex, tz: str, calendar: Calendar | None) -> LocalCalendar:
    """Local weekday, hour, month, minute and public-holiday flag for each interval start.

    Public holidays come from the ``holidays`` library for the tariff's country and subdivision,
    kept between runs (:mod:`auditor.tariffs.holiday_days`); without a calendar no day is a holiday.
    """
    # Wall-clock seconds once (pandas converts the whole index in C), then every feature by
    # integer arithmetic: pandas' per-field accessors would each convert the index again.
    local = pd.DatetimeIndex(index_utc).tz_convert(tz).tz_localize(None).as_unit("s").asi8
    days = local // 86400
    holiday = np.zeros(len(local), dtype=bool)
    if not len(local):
        empty = np.zeros(0, dtype=np.int8)
        return LocalCalendar(weekday=empty, hour=empty, month=empty, holiday=holiday)
    # per calendar day of the range (a few hundred), then gathered for every interval
    first, last = int(days.min()), int(days.max())
    day_range = np.arange(first, last + 1).astype("datetime64[D]")
    month_of_day = (day_range.astype("datetime64[M]").astype(np.int64) % 12 + 1).astype(np.int8)
    if calendar is not None:
        years = (int(np.datetime64(first, "D").astype("datetime64[Y]").astype(int)) + 1970,
                 int(np.datetime64(last, "D").astype("datetime64[Y]").astype(int)) + 1970)
        hol = holiday_days(calendar.country, calendar.subdivision, years)
        if len(hol):
            hol = hol[(hol >= first) & (hol <= last)]
            lut = np.zeros(last - first + 1, dtype=bool)
            lut[hol - first] = True
            holiday = lut[days - first]
    return LocalCalendar(
        weekday=((days + 3) % 7).astype(np.int8),  # 1970-01-01 was a Thursday; Monday = 0
        hour=((local // 3600) % 24).astype(np.int8),
        month=month_of_day[days - first],
        holiday=holiday,
        minute=((local // 60) % 1440).astype(np.int16),
        wall_minutes=local // 60,
    )


def window_mask(window: Window, cal: LocalCalendar) -> np.ndarray:
    """Intervals whose local start falls inside ``window`` (bool per interval).

    A window whose start is later than its end wraps past midnight; the day rule applies to the
    day the interval starts on. With ``holidays = "as_sunday"`` a public holiday counts as a
    Sunday.
    """
    weekday = cal.weekday
    if window.holidays == "as_sunday":
        weekday = np.where(cal.holiday, 6, weekday)
    # look-up tables: np.isin would sort the interval array for each window
    day_lut = np.zeros(7, dtype=bool)
    day_lut[list(window.days)] = True
    month_lut = np.zeros(13, dtype=bool)
    month_lut[list(window.months)] = True
    day_ok = day_lut[weekday]
    month_ok = month_lut[cal.month]
    m = cal.minute if len(cal.minute) == len(cal.hour) else cal.hour.astype(np.int16) * 60
    if window.start_minute < window.end_minute:
        time_ok = (m >= window.start_minute) & (m < window.end_minute)
    else:
        time_ok = (m >= window.start_minute) | (m < window.end_minute)
    return day_ok & month_ok & time_ok


def _union_mask(windows: Sequence[Window], cal: LocalCalendar) -> np.ndarray:
    mask = np.zeros(len(cal.hour), dtype=bool)
    for w in windows:
        mask |= window_mask(w, cal)
    return mask


def energy_window_index(energy: EnergyCharge, cal: LocalCalendar) -> np.ndarray:
    """For each interval, the position of the first energy window it falls in; intervals outside
    every window get ``len(energy.windows)`` (billed at the base ``price_per_kwh``)."""
    n = len(cal.hour)
    idx = np.full(n, len(energy.windows), dtype=np.int64)
    # Later windows first, so that the first matching window in file order wins.
    for k in range(len(energy.windows) - 1, -1, -1):
        idx[window_mask(energy.windows[k], cal)] = k
    return idx


def mechanism_windows(mechanism) -> tuple[Window, ...]:
    """The windows inside which a mechanism worked out over the whole period counts energy
    (empty: the whole period, or a clause worked out per band or per interval, whose masks
    :func:`plan_intervals` prepares)."""
    return tuple(mechanism.windows) if getattr(mechanism, "per", "period") == "period" else ()


# --------------------------------------------------------------------------------------------
# The per-interval plan (calendar only, prepared once) and the per-interval energies of a run
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ClausePlan:
    """What a clause worked out per time band or per interval needs from the calendar.

    ``group_masks`` (bands, intervals) and ``group_kwh`` (bands, periods) for ``per =
    "window"``; ``mask`` (intervals,) of its windows, ``block_starts`` (positions where a block
    starts; None: every interval is a block) and ``block_bounds`` (period k is blocks
    ``[block_bounds[k], block_bounds[k+1])``) for ``per = "interval"``; ``mask`` holds the
    intervals counted on the clause's own kvarh basis, ``lag_mask`` / ``lead_mask`` those of
    windows that name lagging or leading energy (an interval in several windows belongs to the
    first one listed).
    """

    group_masks: np.ndarray | None = None
    group_kwh: np.ndarray | None = None
    block_kwh: np.ndarray | None = None  # the counted kWh per block (or interval), when known
    mask: np.ndarray | None = None
    block_starts: np.ndarray | None = None
    block_bounds: np.ndarray | None = None
    lag_mask: np.ndarray | None = None
    lead_mask: np.ndarray | None = None


@dataclass(frozen=True)
class IntervalPlan:
    """Per reactive clause a :class:`ClausePlan` (None when it is worked out over the period),
    and the masks of the demand windows (windows, intervals)."""

    clauses: tuple[ClausePlan | None, ...] = ()
    demand_masks: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))

    @property
    def needed(self) -> bool:
        return any(c is not None for c in self.clauses) or self.demand_masks.shape[0] > 0


def _blocks(cal: LocalCalendar, bounds: np.ndarray, interval_minutes: int, block_minutes: int | None):
    """Block starts and period bounds in blocks for blocks of ``block_minutes`` in local time
    (None, None when each interval is its own block)."""
    if block_minutes is None or block_minutes == interval_minutes:
        return None, None
    if block_minutes < interval_minutes or block_minutes % interval_minutes:
        raise UsageError(f"block_minutes {block_minutes} is not a whole number of the meter's "
                         f"{interval_minutes}-minute intervals")
    n = int(bounds[-1])
    key = cal.wall_minutes[:n] // block_minutes
    wall = cal.wall_minutes[:n]
    # A block ends where the key changes, where the wall clock goes back (the repeated autumn
    # hour is a block of its own) and at every period boundary. A day block (1440) is the whole
    # local day, 23 or 25 hours long on a daylight-saving change: only its key cuts it.
    cut = np.zeros(n, dtype=bool)
    if n:
        cut[0] = True
        cut[1:] = key[1:] != key[:-1]
        if block_minutes < 1440:
            cut[1:] |= wall[1:] < wall[:-1]
        starts_of_periods = bounds[:-1][bounds[:-1] < n]
        cut[starts_of_periods] = True
    starts = np.flatnonzero(cut)
    return starts, np.searchsorted(starts, bounds, side="left").astype(np.int64)


def plan_intervals(tariff: Tariff, cal: LocalCalendar, bounds: np.ndarray, interval_minutes: int,
                   kwh=None) -> IntervalPlan:
    """Masks and blocks for the clauses worked out per time band or per interval, and for the
    demand windows. Intervals are those selected for billing (``bounds[-1]`` of them). With the
    per-interval ``kwh`` (which a correction does not change) the kWh per band and per block are
    summed once here instead of on every run."""
    n = int(bounds[-1])
    clauses: list[ClausePlan | None] = []
    for m in tariff.reactive:
        per = getattr(m, "per", "period")
        if per == "window":
            groups = window_groups(m.windows)
            masks = np.vstack([_union_mask(ws, cal)[:n] for _, ws in groups]).astype(float)
            group_kwh = None if kwh is None else segment_sum(masks * np.asarray(kwh, dtype=float), bounds)
            clauses.append(ClausePlan(group_masks=masks, group_kwh=group_kwh))
        elif per == "interval":
            starts, block_bounds = _blocks(cal, bounds, interval_minutes, getattr(m, "block_minutes", None))
            if not m.windows:
                own = np.ones(n, dtype=bool)
                lag = lead = np.zeros(n, dtype=bool)
            else:
                first = np.full(n, -1, dtype=np.int64)
                for k in range(len(m.windows) - 1, -1, -1):
                    first[window_mask(m.windows[k], cal)[:n]] = k
                sense = np.array([{"lag": 1, "lead": 2}.get(w.kvarh or "", 0) for w in m.windows] + [-1])
                of = sense[first]  # -1: outside every window (first == -1 picks the sentinel)
                own, lag, lead = of == 0, of == 1, of == 2
            plan = ClausePlan(mask=own.astype(float), lag_mask=lag.astype(float), lead_mask=lead.astype(float),
                              block_starts=starts, block_bounds=block_bounds)
            if kwh is not None:
                counted = (own | lag | lead).astype(float) * np.asarray(kwh, dtype=float)
                plan = replace(plan, block_kwh=_to_blocks(counted, plan))
            clauses.append(plan)
        else:
            clauses.append(None)
    d = tariff.demand
    demand_masks = (np.vstack([window_mask(w.window, cal)[:n] for w in d.windows]).astype(float)
                    if d is not None and d.windows else np.zeros((0, n)))
    return IntervalPlan(clauses=tuple(clauses), demand_masks=demand_masks)


@dataclass(frozen=True)
class IntervalQuantities:
    """The per-interval energies of one run (the intervals selected for billing, time-sorted)
    with the period bounds and the plan: what interval-by-interval clauses, time bands and
    demand windows are worked out from."""

    kwh: np.ndarray
    kvarh_lag: np.ndarray
    kvarh_lead: np.ndarray
    kw: np.ndarray
    kva: np.ndarray
    bounds: np.ndarray
    plan: IntervalPlan


# --------------------------------------------------------------------------------------------
# Inputs and outputs per period
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class WindowSums:
    """Energies inside a mechanism's windows, per period."""

    kwh: np.ndarray
    kvarh_lag: np.ndarray
    kvarh_lead: np.ndarray


@dataclass(frozen=True)
class PeriodQuantities:
    """Everything the engine needs, one element per billing period.

    ``energy_kwh`` has one row per energy window plus a last row for kWh outside every window.
    ``windowed[i]`` holds the energies inside the windows of ``tariff.reactive[i]`` (None when the
    mechanism has none). ``history_demand`` lists measured demand (in the demand basis unit) of
    periods before the first one, oldest first, for the ratchet. NaN peaks (no data) charge 0.
    ``intervals`` carries the per-interval energies for clauses worked out per time band or per
    interval and for demand windows (None when the tariff has none).
    """

    kwh: np.ndarray
    kvarh_lag: np.ndarray
    kvarh_lead: np.ndarray
    peak_kw: np.ndarray
    peak_kva: np.ndarray
    peak_kvar: np.ndarray
    pf_at_peak: np.ndarray
    energy_kwh: np.ndarray
    windowed: tuple[WindowSums | None, ...] = ()
    history_demand: np.ndarray = field(default_factory=lambda: np.zeros(0))
    intervals: IntervalQuantities | None = None


@dataclass(frozen=True)
class Charges:
    """Charges per period by key (``energy``, ``demand``, ``fixed``, then each mechanism's key)."""

    amounts: dict[str, np.ndarray]
    reactive_keys: tuple[str, ...]
    reactive_total: np.ndarray
    total: np.ndarray
    billing_demand: np.ndarray
    billing_pf: np.ndarray  # the tariff-basis energy PF after rounding (what PF clauses compare)
    #: The demand the ratchet of later periods looks back at (measured, or PF-adjusted with
    #: ``ratchet_on = "billing"``); a later audit takes it as ``history_peak_kw``.
    ratchet_basis: np.ndarray | None = None


# --------------------------------------------------------------------------------------------
# One function per mechanism
# --------------------------------------------------------------------------------------------
def kvarh_of(basis: str, kvarh_lag, kvarh_lead) -> np.ndarray:
    """The kvarh a clause counts: 'lag', 'lead', 'net' (lag - lead), 'lag_plus_lead' or
    'max_lag_lead' (the larger of the two)."""
    lag = np.asarray(kvarh_lag, dtype=float)
    lead = np.asarray(kvarh_lead, dtype=float)
    if basis == "lag":
        return lag
    if basis == "lead":
        return lead
    if basis == "net":
        return lag - lead
    if basis == "lag_plus_lead":
        return lag + lead
    if basis == "max_lag_lead":
        return np.maximum(lag, lead)
    raise ValueError(f"unknown kvarh basis {basis!r}")


def _no_nan(x) -> np.ndarray:
    """``np.nan_to_num`` of ``x`` as a new float array (NaN: 0, ±inf: ± the largest float), with
    a quick path for the usual case of finite figures (it runs several times per audit)."""
    a = np.asarray(x, dtype=float)
    return a.copy() if np.isfinite(a).all() else np.nan_to_num(a)


def _round(x, rounding: Rounding | None):
    return np.asarray(x, dtype=float) if rounding is None else rounding.apply(x)


def energy_charge(energy_kwh, prices_per_kwh) -> np.ndarray:
    """Sum over price windows of kWh x price; ``energy_kwh`` is (windows, periods)."""
    return np.asarray(prices_per_kwh, dtype=float) @ np.asarray(energy_kwh, dtype=float)


def kvarh_excess_charge(kwh, kvarh, tan_phi_limit: float, price_per_kvarh: float) -> np.ndarray:
    """``price x max(0, kvarh - tan_phi_limit x kWh)``.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1: tan phi = Q / P, so the free allowance of reactive
       energy is tan_phi_limit x active energy.
    """
    excess = np.maximum(0.0, np.asarray(kvarh, float) - tan_phi_limit * np.asarray(kwh, float))
    return price_per_kvarh * excess


def tier_quantities(kwh, kvarh, limits: Sequence[float]) -> np.ndarray:
    """Excess kvarh in each marginal tier: tier i holds the kvarh between ``limits[i] x kWh`` and
    ``limits[i+1] x kWh`` (the last tier is open). Shape ``(tiers,) + kwh.shape``."""
    p = np.asarray(kwh, dtype=float)
    q = np.broadcast_to(np.asarray(kvarh, dtype=float), p.shape)
    lim = np.asarray(limits, dtype=float).reshape((-1,) + (1,) * p.ndim)
    width = np.diff(np.append(np.asarray(limits, dtype=float), np.inf)).reshape(lim.shape)
    over = q[None] - lim * p[None]
    cap = np.where(np.isfinite(width), width * p[None], np.inf)
    return np.clip(over, 0.0, cap)


def kvarh_banded_charge(kwh, kvarh, pf, bands: Sequence[Band], tan_phi_limit: float,
                        excess_rounding: Rounding | None = None) -> np.ndarray:
    """Excess kvarh (above ``tan_phi_limit x kWh``) priced by the band of the PF.

    ``bands`` sorted by ``min_pf``, highest first, the last with ``min_pf = 0``; an element falls
    in the first band whose ``min_pf`` its PF reaches. Without PF (no load) it pays nothing.
    Works on arrays of any shape (periods, or bands x periods).
    """
    pf = np.asarray(pf, dtype=float)
    mins = np.array([b.min_pf for b in bands], dtype=float)
    prices = np.array([b.price_per_kvarh for b in bands], dtype=float)
    reached = pf[..., None] >= mins  # NaN compares False everywhere
    band = np.argmax(reached, axis=-1)
    price = np.where(reached.any(axis=-1), prices[band], 0.0)
    excess = np.maximum(0.0, np.asarray(kvarh, float) - tan_phi_limit * np.asarray(kwh, float))
    return price * _round(excess, excess_rounding)


def pf_adjusted_demand(
    demand_kw, pf, base_pf: float, credit: bool = False, max_credit_percent: float | None = None,
    apply_below_pf: float | None = None, max_increase_percent: float | None = None,
) -> np.ndarray:
    """Billing demand ``peak kW x base_pf / PF`` when PF < base_pf.

    With ``apply_below_pf`` the increase applies only when PF is below that trigger (and never
    lowers demand); ``max_increase_percent`` caps the increase. With ``credit`` the same ratio
    also lowers demand when PF > base_pf, by at most ``max_credit_percent``. A period without PF
    keeps its demand.
    """
    demand_kw = _no_nan(demand_kw)
    pf = np.asarray(pf, dtype=float)
    ok = np.isfinite(pf) & (pf > 0)
    ratio = np.divide(base_pf, pf, out=np.ones_like(pf), where=ok)
    trigger = base_pf if apply_below_pf is None else apply_below_pf
    factor = np.where(ok & (pf < trigger) & (ratio > 1.0), ratio, 1.0)
    if max_increase_percent is not None:
        factor = np.minimum(factor, 1.0 + max_increase_percent / 100.0)
    if credit:
        floor = 0.0 if max_credit_percent is None else 1.0 - max_credit_percent / 100.0
        factor = np.where(ratio < 1.0, np.maximum(ratio, floor), factor)
    return demand_kw * factor


def ratcheted_demand(demand, ratchet_percent: float | None, ratchet_periods: int = 11, history=(),
                     looked_back=None) -> np.ndarray:
    """``max(demand, ratchet_percent % of the highest demand of the previous ratchet_periods)``.

    Previous periods are taken from ``history`` (oldest first) followed by the audited periods'
    ``looked_back`` demand (default: ``demand`` itself); the ratchet looks at demand before the
    ratchet (no feedback from one ratchet to the next).
    """
    demand = _no_nan(demand)
    if ratchet_percent is None:
        return demand
    back = demand if looked_back is None else _no_nan(looked_back)
    hist = _no_nan(history)
    seq = np.concatenate([np.full(ratchet_periods, -np.inf), hist, back])
    windows = np.lib.stride_tricks.sliding_window_view(seq[:-1], ratchet_periods)
    previous_max = windows[len(hist) :].max(axis=1)
    floor = np.maximum(0.0, ratchet_percent / 100.0 * previous_max)
    return np.maximum(demand, floor)


def pf_percent_adjustment(
    pf,
    base_amount,
    threshold_pf: float,
    percent_per_hundredth: float,
    rebate_above_pf: float | None = None,
    rebate_percent_per_hundredth: float = 0.0,
    max_surcharge_percent: float | None = None,
    max_rebate_percent: float | None = None,
    slopes: Sequence[Slope] = (),
    difference_rounding: Rounding | None = None,
) -> np.ndarray:
    """Surcharge (positive) or rebate (negative) as a percentage of ``base_amount``.

    ``percent_per_hundredth`` % per 0.01 of PF below ``threshold_pf``, and each of ``slopes``
    (``below_pf``, rate) from its PF down (marginal: the hundredths between two slopes' PFs at
    the upper one's rate); with a rebate, ``rebate_percent_per_hundredth`` % per 0.01 above
    ``rebate_above_pf``; each capped. ``difference_rounding`` rounds the PF difference first
    (step 0.01 "up": each point or fraction thereof). With unrounded PF the count of hundredths
    is fractional (pro rata). No PF: no adjustment.
    """
    pf = np.asarray(pf, dtype=float)
    ok = np.isfinite(pf)
    shortfall = _round(np.maximum(0.0, threshold_pf - np.where(ok, pf, threshold_pf)), difference_rounding)
    breaks = np.array([threshold_pf] + [s.below_pf for s in slopes] + [-np.inf])
    rates = np.array([percent_per_hundredth] + [s.percent_per_hundredth for s in slopes])
    # Hundredths of the shortfall inside each slope's PF range, upper bound first.
    depth = threshold_pf - breaks  # 0, threshold - s1, ..., inf
    inside = np.clip(shortfall[..., None] - depth[:-1], 0.0, depth[1:] - depth[:-1])
    # Rounded to 1e-9 so that 0.85 - 0.83 counts as exactly 2 hundredths, not 1.9999999.
    surcharge = np.round(inside * 100.0, 9) @ rates
    if max_surcharge_percent is not None:
        surcharge = np.minimum(surcharge, max_surcharge_percent)
    rebate = np.zeros_like(surcharge)
    if rebate_above_pf is not None:
        surplus = _round(np.maximum(0.0, np.where(ok, pf, rebate_above_pf) - rebate_above_pf), difference_rounding)
        rebate = np.round(surplus * 100.0, 9) * rebate_percent_per_hundredth
        if max_rebate_percent is not None:
            rebate = np.minimum(rebate, max_rebate_percent)
    return np.asarray(base_amount, dtype=float) * (surcharge - rebate) / 100.0


def kvar_demand_charge(peak_kvar, peak_kw, allowance_ratio: float, price_per_kvar: float,
                       excess_rounding: Rounding | None = None) -> np.ndarray:
    """``price x max(0, peak kvar - allowance_ratio x kW)``; ``peak_kw`` is the kW the allowance
    is a share of (the period's peak, or the highest of a look-back). No data charges 0."""
    kvar = _no_nan(peak_kvar)
    kw = _no_nan(peak_kw)
    return price_per_kvar * _round(np.maximum(0.0, kvar - allowance_ratio * kw), excess_rounding)


def leading_kvarh_charge(kwh, kvarh_lead, price_per_kvarh: float, tan_phi_limit: float = 0.0) -> np.ndarray:
    """``price x max(0, leading kvarh - tan_phi_limit x kWh)`` (energies inside the hours)."""
    excess = np.maximum(0.0, np.asarray(kvarh_lead, float) - tan_phi_limit * np.asarray(kwh, float))
    return price_per_kvarh * excess


def pf_energy_excess_kwh(kwh, kvarh, reference_pf: float) -> np.ndarray:
    """``max(0, kWh x (reference_pf / PF - 1)) = max(0, reference_pf x kVAh - kWh)``, kVAh =
    sqrt(kWh^2 + kvarh^2): the active energy the reactive excess stands for. An element without
    active energy counts 0."""
    p = np.asarray(kwh, dtype=float)
    q = np.asarray(kvarh, dtype=float)
    return np.where(p > 0, np.maximum(0.0, reference_pf * np.hypot(p, q) - p), 0.0)


# --------------------------------------------------------------------------------------------
# Working out per band and per interval
# --------------------------------------------------------------------------------------------
def _need(iq: IntervalQuantities | None, key: str) -> IntervalQuantities:
    if iq is None:
        raise ValueError(f"{key!r} is worked out per time band or per interval and needs the interval energies")
    return iq


def _per_period(values: np.ndarray, plan: ClausePlan, bounds: np.ndarray) -> np.ndarray:
    """Sum per period over the last axis of per-interval (or per-block) values."""
    return segment_sum(values, bounds if plan.block_starts is None else plan.block_bounds)


def _counted_kvarh(basis: str, iq: IntervalQuantities, plan: ClausePlan) -> np.ndarray:
    """Per interval, the kvarh a clause counts: its own basis inside its plain windows, lagging
    or leading inside windows that name one, nothing elsewhere (masks that are all zero or all
    one are skipped: this runs once per candidate bank)."""
    out = None
    for mask, values in ((plan.mask, None), (plan.lag_mask, iq.kvarh_lag), (plan.lead_mask, iq.kvarh_lead)):
        if mask is None or not mask.any():
            continue
        v = kvarh_of(basis, iq.kvarh_lag, iq.kvarh_lead) if values is None else values
        part = v if mask.all() else mask * v
        out = part if out is None else out + part
    return np.zeros_like(iq.kwh) if out is None else out


def _to_blocks(values: np.ndarray, plan: ClausePlan) -> np.ndarray:
    if plan.block_starts is None or values.shape[-1] == 0:
        return values
    return np.add.reduceat(values, plan.block_starts, axis=-1)


def _priced(m: KvarhExcess, qty: np.ndarray) -> np.ndarray:
    """(tiers, ...) quantities -> charge: each tier's kvarh rounded, times its price."""
    return np.tensordot(np.asarray(m.prices), _round(qty, m.excess_rounding), axes=1)


def _kvarh_excess(m: KvarhExcess, i: int, q: PeriodQuantities, plan: ClausePlan | None) -> np.ndarray:
    if m.per == "period":
        w = q.windowed[i] if i < len(q.windowed) else None
        src = w if (m.windows and w is not None) else q
        kvarh = kvarh_of(m.kvarh, src.kvarh_lag, src.kvarh_lead)
        if m.reference_pf is not None:
            return m.price_per_kwh * pf_energy_excess_kwh(src.kwh, kvarh, m.reference_pf)
        if not m.tiers and m.excess_rounding is None:
            return kvarh_excess_charge(src.kwh, kvarh, m.tan_phi_limit, m.price_per_kvarh)
        return _priced(m, tier_quantities(src.kwh, kvarh, m.limits))
    iq = _need(q.intervals, m.key)
    if m.per == "window":
        # Each time band on its own (its own excess, rounded as its bill line), then summed.
        g = plan.group_masks
        kwh = plan.group_kwh if plan.group_kwh is not None else segment_sum(g * iq.kwh, iq.bounds)
        kvarh = kvarh_of(m.kvarh, segment_sum(g * iq.kvarh_lag, iq.bounds), segment_sum(g * iq.kvarh_lead, iq.bounds))
        if m.reference_pf is not None:
            return m.price_per_kwh * pf_energy_excess_kwh(kwh, kvarh, m.reference_pf).sum(axis=0)
        return _priced(m, tier_quantities(kwh, kvarh, m.limits)).sum(axis=0)
    # Interval by interval (or block by block), summed per period, then rounded.
    kwh = plan.block_kwh if plan.block_kwh is not None else \
        _to_blocks((plan.mask + plan.lag_mask + plan.lead_mask) * iq.kwh, plan)
    kvarh = _to_blocks(_counted_kvarh(m.kvarh, iq, plan), plan)
    if m.reference_pf is not None:
        return m.price_per_kwh * _per_period(pf_energy_excess_kwh(kwh, kvarh, m.reference_pf), plan, iq.bounds)
    return _priced(m, _per_period(tier_quantities(kwh, kvarh, m.limits), plan, iq.bounds))


def _kvarh_banded(tariff: Tariff, m: KvarhBanded, i: int, q: PeriodQuantities, plan: ClausePlan | None) -> np.ndarray:
    if m.per == "window":
        iq = _need(q.intervals, m.key)
        g = plan.group_masks
        kwh = plan.group_kwh if plan.group_kwh is not None else segment_sum(g * iq.kwh, iq.bounds)
        kvarh = kvarh_of(m.kvarh, segment_sum(g * iq.kvarh_lag, iq.bounds), segment_sum(g * iq.kvarh_lead, iq.bounds))
        pf = tariff.round_pf(energy_pf(kwh, kvarh))
        return kvarh_banded_charge(kwh, kvarh, pf, m.bands, m.tan_phi_limit, m.excess_rounding).sum(axis=0)
    w = q.windowed[i] if i < len(q.windowed) else None
    src = w if (m.windows and w is not None) else q
    kvarh = kvarh_of(m.kvarh, src.kvarh_lag, src.kvarh_lead)
    pf = tariff.round_pf(energy_pf(src.kwh, kvarh))
    return kvarh_banded_charge(src.kwh, kvarh, pf, m.bands, m.tan_phi_limit, m.excess_rounding)


def _leading(m: LeadingKvarh, i: int, q: PeriodQuantities, plan: ClausePlan | None) -> np.ndarray:
    if m.per == "interval":
        iq = _need(q.intervals, m.key)
        kwh = plan.block_kwh if plan.block_kwh is not None else _to_blocks(plan.mask * iq.kwh, plan)
        lead = _to_blocks(plan.mask * iq.kvarh_lead, plan)
        excess = _per_period(np.maximum(0.0, lead - m.tan_phi_limit * kwh), plan, iq.bounds)
        return m.price_per_kvarh * _round(excess, m.excess_rounding)
    w = q.windowed[i] if i < len(q.windowed) else None
    if w is None:
        raise ValueError(f"leading_kvarh {m.key!r} needs the energies inside its hours")
    excess = np.maximum(0.0, w.kvarh_lead - m.tan_phi_limit * w.kwh)
    return m.price_per_kvarh * _round(excess, m.excess_rounding)


def _highest_kw(peak_kw, history, lookback: int) -> np.ndarray:
    """The highest kW of each period and the ``lookback`` periods before it (history first)."""
    kw = _no_nan(peak_kw)
    hist = _no_nan(history)
    seq = np.concatenate([np.full(lookback, -np.inf), hist, kw])
    return np.lib.stride_tricks.sliding_window_view(seq, lookback + 1)[len(hist):].max(axis=1)


def _demand_windows(tariff: Tariff, q: PeriodQuantities) -> np.ndarray:
    """Charges on the peaks inside the demand windows, per period."""
    d = tariff.demand
    iq = _need(q.intervals, "demand.windows")
    series = iq.kva if d.basis == "kva" else iq.kw
    peaks = _no_nan(segment_max(iq.plan.demand_masks * series, iq.bounds))
    peaks = _round(peaks, d.rounding)
    names = [w.name for w in d.windows]
    total = np.zeros(peaks.shape[-1])
    for k, w in enumerate(d.windows):
        billed = peaks[k] if w.excess_over is None else np.maximum(0.0, peaks[k] - peaks[names.index(w.excess_over)])
        total = total + w.price_per_kw * billed
    return total


# --------------------------------------------------------------------------------------------
# Orchestration
# --------------------------------------------------------------------------------------------
def _billing_pf(tariff: Tariff, basis: str, q: PeriodQuantities) -> np.ndarray:
    return tariff.round_pf(energy_pf(q.kwh, kvarh_of(basis, q.kvarh_lag, q.kvarh_lead)))


def _adjust_pf(tariff: Tariff, m: PfDemandAdjust, q: PeriodQuantities, measured_kw) -> np.ndarray:
    if m.pf == "at_peak":
        return tariff.round_pf(q.pf_at_peak)
    if m.pf == "peak_kva":
        kva = _no_nan(q.peak_kva)
        ratio = np.divide(measured_kw, kva, out=np.full(len(kva), np.nan), where=kva > 0)
        return tariff.round_pf(ratio)
    return _billing_pf(tariff, m.kvarh, q)


def compute_charges(tariff: Tariff, q: PeriodQuantities) -> Charges:
    """Apply every clause of ``tariff`` to the period quantities (see :func:`_compute`).

    Raises
    ------
    auditor.errors.InputError
        When a charge is not a finite amount (figures beyond any meter; prices are bounded by
        the loader, so finite readings always give finite charges).
    """
    with np.errstate(over="ignore"):
        return _compute(tariff, q)


def _compute(tariff: Tariff, q: PeriodQuantities) -> Charges:
    """Apply every clause of ``tariff`` to the period quantities.

    Order: energy, demand (rounding, PF adjustment, then ratchet; plus the demand windows),
    fixed, then each reactive mechanism in file order; ``pf_percent`` is a percentage of the base
    charges it names. The ``pf_demand_adjust`` amount is the demand charge with the adjustment
    minus the demand charge without it, both ratcheted against the same floor (what
    ``demand.ratchet_on`` looks back at), so ``demand`` + ``pf_demand_adjust`` is what the bill
    shows as demand, the reactive part stands alone, and a period without PF has none.
    """
    n = len(q.kwh)
    zeros = np.zeros(n)
    prices = [w.price_per_kwh for w in tariff.energy.windows] + [tariff.energy.price_per_kwh]
    amounts: dict[str, np.ndarray] = {"energy": energy_charge(q.energy_kwh, prices)}
    plans = q.intervals.plan.clauses if q.intervals is not None else ()

    billing_demand = zeros
    ratchet_basis = _no_nan(q.peak_kw)
    reactive: dict[str, np.ndarray] = {}
    if tariff.demand is not None:
        d = tariff.demand
        measured = _round(_no_nan(q.peak_kva if d.basis == "kva" else q.peak_kw), d.rounding)
        adjust = next((m for m in tariff.reactive if isinstance(m, PfDemandAdjust)), None)
        adjusted = measured
        if adjust is not None:
            pf = _adjust_pf(tariff, adjust, q, _no_nan(q.peak_kw))
            adjusted = pf_adjusted_demand(measured, pf, adjust.base_pf, adjust.credit, adjust.max_credit_percent,
                                          adjust.apply_below_pf, adjust.max_increase_percent)
            if adjust.adjusted_rounding is not None:
                # Only a demand the adjustment changed is rounded as the adjusted demand.
                adjusted = np.where(adjusted != measured, _round(adjusted, adjust.adjusted_rounding), measured)
        # One floor for both: the demand of earlier periods the tariff's ratchet looks back at.
        # A period without load or PF then has no PF adjustment of its own and pays none,
        # whatever the floor.
        ratchet_basis = adjusted if d.ratchet_on == "billing" else measured
        plain = ratcheted_demand(measured, d.ratchet_percent, d.ratchet_periods, q.history_demand,
                                 looked_back=ratchet_basis)
        billing_demand = plain
        amounts["demand"] = d.price_per_kw * plain
        if d.windows:
            amounts["demand"] = amounts["demand"] + _demand_windows(tariff, q)
        if adjust is not None:
            with_pf = ratcheted_demand(adjusted, d.ratchet_percent, d.ratchet_periods, q.history_demand,
                                       looked_back=ratchet_basis)
            billing_demand = with_pf
            reactive[adjust.key] = d.price_per_kw * (with_pf - plain)
    else:
        amounts["demand"] = zeros
    amounts["fixed"] = np.full(n, float(tariff.fixed_per_period))

    for i, m in enumerate(tariff.reactive):
        plan = plans[i] if i < len(plans) else None
        if isinstance(m, KvarhExcess):
            reactive[m.key] = _kvarh_excess(m, i, q, plan)
        elif isinstance(m, KvarhBanded):
            reactive[m.key] = _kvarh_banded(tariff, m, i, q, plan)
        elif isinstance(m, PfPercent):
            base = sum((amounts[k] for k in m.applies_to), zeros)
            reactive[m.key] = pf_percent_adjustment(
                _billing_pf(tariff, m.kvarh, q), base, m.threshold_pf, m.percent_per_hundredth,
                m.rebate_above_pf, m.rebate_percent_per_hundredth, m.max_surcharge_percent,
                m.max_rebate_percent, m.slopes, m.difference_rounding,
            )
        elif isinstance(m, KvarDemand):
            kw = q.peak_kw
            if m.allowance_lookback_periods:
                kw = _highest_kw(q.peak_kw, q.history_demand, m.allowance_lookback_periods)
            reactive[m.key] = kvar_demand_charge(q.peak_kvar, kw, m.allowance_ratio, m.price_per_kvar,
                                                 m.excess_rounding)
        elif isinstance(m, LeadingKvarh):
            reactive[m.key] = _leading(m, i, q, plan)
        elif not isinstance(m, PfDemandAdjust):  # pragma: no cover - spec validation prevents it
            raise ValueError(f"unknown mechanism {m!r}")

    keys = tariff.reactive_keys
    for k in keys:
        amounts[k] = reactive[k]
    reactive_total = sum((amounts[k] for k in keys), zeros)
    total = amounts["energy"] + amounts["demand"] + amounts["fixed"] + reactive_total
    if not np.isfinite(total).all():
        bad = next(k for k, a in amounts.items() if not np.isfinite(a).all())
        raise InputError(None, f"charge {bad!r} is not a finite amount: the interval figures are too large "
                               "for this tariff's prices (check the readings and the meter multiplier)")
    return Charges(
        amounts=amounts,
        reactive_keys=keys,
        reactive_total=reactive_total,
        total=total,
        billing_demand=billing_demand,
        billing_pf=_billing_pf(tariff, tariff.kvarh_basis, q),
        ratchet_basis=ratchet_basis,
    )
