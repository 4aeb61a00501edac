"""The charge engine: one pure function per tariff mechanism, vectorised over billing periods,
and :func:`compute_charges`, which applies a whole :class:`~auditor.tariffs.spec.Tariff`.

Every function takes numpy arrays with one element per billing period (or per interval for the
calendar masks) and returns an array of the same length. No pandas groupby, no Python loop over
intervals or periods: the correction optimiser calls the engine hundreds of times.

Which kvarh each mechanism counts:

- ``kvarh_excess``, ``kvarh_banded``, ``pf_percent``, ``pf_demand_adjust`` (with ``pf =
  "energy"``): the mechanism's ``kvarh`` key, default the tariff's ``kvarh_basis`` (default
  lagging only). ``net`` is lag - lead; a net-leading period has no excess (max(0, ...)) while its
  energy PF uses the magnitude.
- ``pf_demand_adjust`` with ``pf = "at_peak"``: the interval PF at the kW peak, from Q_net.
- ``kvar_demand``: the peak of lagging kvar.
- ``leading_kvarh``: leading kvarh inside its hours only.

The mechanisms themselves are generic tariff clauses (common practice; each utility sets its own
figures); the only published formulas they rest on are the definitions of PF and tan phi.

References
----------
.. [1] IEEE Std 1459-2010, section 3.1.1 (PF = P / S; tan phi = Q / P).
"""
from __future__ import annotations

import functools
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from auditor.quantities import energy_pf, round_pf
from auditor.tariffs.spec import (
    Band,
    Calendar,
    EnergyCharge,
    KvarDemand,
    KvarhBanded,
    KvarhExcess,
    LeadingKvarh,
    PfDemandAdjust,
    PfPercent,
    Tariff,
    Window,
)

__all__ = [
    "Charges",
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
    "pf_percent_adjustment",
    "ratcheted_demand",
    "window_mask",
]


# --------------------------------------------------------------------------------------------
# Local calendar and time-of-use masks (per interval)
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LocalCalendar:
    """Local-time features of each interval start: weekday (0 = Monday), hour, month, holiday."""

    weekday: np.ndarray
    hour: np.ndarray
    month: np.ndarray
    holiday: np.ndarray


def local_calendar(index_utc: pd.DatetimeIndex, tz: str, calendar: Calendar | None) -> LocalCalendar:
    """Local weekday, hour, month and public-holiday flag for each interval start.

    Public holidays come from the ``holidays`` library for the tariff's country and subdivision;
    without a calendar no day is a holiday.
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
        hol = _holiday_days(calendar.country, calendar.subdivision, years)
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
    )


@functools.lru_cache(maxsize=64)
def _holiday_days(country: str, subdivision: str | None, years: tuple[int, int]) -> np.ndarray:
    """Public holidays of the years ``years[0]..years[1]`` as days since 1970-01-01, from the
    ``holidays`` library (the trusted source); cached, since every meter of a batch asks again."""
    import holidays

    found = holidays.country_holidays(country, subdiv=subdivision, years=range(years[0], years[1] + 1))
    days = np.array(sorted(found.keys()), dtype="datetime64[D]").astype(np.int64)
    days.flags.writeable = False
    return days


def window_mask(window: Window, cal: LocalCalendar) -> np.ndarray:
    """Intervals whose local start falls inside ``window`` (bool per interval).

    A window with start_hour > end_hour wraps past midnight; the day rule applies to the day the
    interval starts on. With ``holidays = "as_sunday"`` a public holiday counts as a Sunday.
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
    h = cal.hour
    if window.start_hour < window.end_hour:
        hour_ok = (h >= window.start_hour) & (h < window.end_hour)
    else:
        hour_ok = (h >= window.start_hour) | (h < window.end_hour)
    return day_ok & month_ok & hour_ok


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
    """The windows a reactive mechanism counts energy in (empty: the whole period)."""
    if isinstance(mechanism, KvarhExcess):
        return mechanism.windows
    if isinstance(mechanism, LeadingKvarh):
        return (mechanism.window,)
    return ()


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


@dataclass(frozen=True)
class Charges:
    """Charges per period by key (``energy``, ``demand``, ``fixed``, then each mechanism's key)."""

    amounts: dict[str, np.ndarray]
    reactive_keys: tuple[str, ...]
    reactive_total: np.ndarray
    total: np.ndarray
    billing_demand: np.ndarray
    billing_pf: np.ndarray  # the tariff-basis energy PF after rounding (what PF clauses compare)


# --------------------------------------------------------------------------------------------
# One function per mechanism
# --------------------------------------------------------------------------------------------
def kvarh_of(basis: str, kvarh_lag, kvarh_lead) -> np.ndarray:
    """The kvarh a clause counts: 'lag', 'net' (lag - lead) or 'lag_plus_lead'."""
    lag = np.asarray(kvarh_lag, dtype=float)
    lead = np.asarray(kvarh_lead, dtype=float)
    if basis == "lag":
        return lag
    if basis == "net":
        return lag - lead
    if basis == "lag_plus_lead":
        return lag + lead
    raise ValueError(f"unknown kvarh basis {basis!r}")


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


def kvarh_banded_charge(kwh, kvarh, pf, bands: Sequence[Band], tan_phi_limit: float) -> np.ndarray:
    """Excess kvarh (above ``tan_phi_limit x kWh``) priced by the band of the period's PF.

    ``bands`` sorted by ``min_pf``, highest first, the last with ``min_pf = 0``; a period falls in
    the first band whose ``min_pf`` its PF reaches. A period without PF (no load) pays nothing.
    """
    pf = np.asarray(pf, dtype=float)
    mins = np.array([b.min_pf for b in bands], dtype=float)
    prices = np.array([b.price_per_kvarh for b in bands], dtype=float)
    reached = pf[:, None] >= mins[None, :]  # NaN compares False everywhere
    band = np.argmax(reached, axis=1)
    price = np.where(reached.any(axis=1), prices[band], 0.0)
    excess = np.maximum(0.0, np.asarray(kvarh, float) - tan_phi_limit * np.asarray(kwh, float))
    return price * excess


def pf_adjusted_demand(
    demand_kw, pf, base_pf: float, credit: bool = False, max_credit_percent: float | None = None
) -> np.ndarray:
    """Billing demand ``peak kW x base_pf / PF`` when PF < base_pf.

    With ``credit`` the same ratio also lowers demand when PF > base_pf, by at most
    ``max_credit_percent``. A period without PF keeps its demand.
    """
    demand_kw = np.nan_to_num(np.asarray(demand_kw, dtype=float))
    pf = np.asarray(pf, dtype=float)
    ok = np.isfinite(pf) & (pf > 0)
    ratio = np.divide(base_pf, pf, out=np.ones_like(pf), where=ok)
    factor = np.where(ratio > 1.0, ratio, 1.0)
    if credit:
        floor = 0.0 if max_credit_percent is None else 1.0 - max_credit_percent / 100.0
        factor = np.where(ratio < 1.0, np.maximum(ratio, floor), factor)
    return demand_kw * factor


def ratcheted_demand(demand, ratchet_percent: float | None, ratchet_periods: int = 11, history=()) -> np.ndarray:
    """``max(demand, ratchet_percent % of the highest demand of the previous ratchet_periods)``.

    Previous periods are taken from ``history`` (oldest first) followed by the audited periods
    themselves; the ratchet looks at demand before the ratchet (no feedback from one ratchet to
    the next).
    """
    demand = np.nan_to_num(np.asarray(demand, dtype=float))
    if ratchet_percent is None:
        return demand
    hist = np.nan_to_num(np.asarray(history, dtype=float))
    seq = np.concatenate([np.full(ratchet_periods, -np.inf), hist, demand])
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
) -> np.ndarray:
    """Surcharge (positive) or rebate (negative) as a percentage of ``base_amount``.

    ``percent_per_hundredth`` % per 0.01 of PF below ``threshold_pf``; with a rebate,
    ``rebate_percent_per_hundredth`` % per 0.01 above ``rebate_above_pf``; each capped. With
    unrounded PF the count of hundredths is fractional (pro rata). No PF: no adjustment.
    """
    pf = np.asarray(pf, dtype=float)
    ok = np.isfinite(pf)
    # Rounded to 1e-9 so that 0.85 - 0.83 counts as exactly 2 hundredths, not 1.9999999.
    below = np.round(np.maximum(0.0, threshold_pf - np.where(ok, pf, threshold_pf)) * 100.0, 9)
    surcharge = below * percent_per_hundredth
    if max_surcharge_percent is not None:
        surcharge = np.minimum(surcharge, max_surcharge_percent)
    rebate = np.zeros_like(surcharge)
    if rebate_above_pf is not None:
        above = np.round(np.maximum(0.0, np.where(ok, pf, rebate_above_pf) - rebate_above_pf) * 100.0, 9)
        rebate = above * rebate_percent_per_hundredth
        if max_rebate_percent is not None:
            rebate = np.minimum(rebate, max_rebate_percent)
    return np.asarray(base_amount, dtype=float) * (surcharge - rebate) / 100.0


def kvar_demand_charge(peak_kvar, peak_kw, allowance_ratio: float, price_per_kvar: float) -> np.ndarray:
    """``price x max(0, peak kvar - allowance_ratio x peak kW)``; no data charges 0."""
    kvar = np.nan_to_num(np.asarray(peak_kvar, dtype=float))
    kw = np.nan_to_num(np.asarray(peak_kw, dtype=float))
    return price_per_kvar * np.maximum(0.0, kvar - allowance_ratio * kw)


def leading_kvarh_charge(kwh, kvarh_lead, price_per_kvarh: float, tan_phi_limit: float = 0.0) -> np.ndarray:
    """``price x max(0, leading kvarh - tan_phi_limit x kWh)`` (energies inside the hours)."""
    excess = np.maximum(0.0, np.asarray(kvarh_lead, float) - tan_phi_limit * np.asarray(kwh, float))
    return price_per_kvarh * excess


# --------------------------------------------------------------------------------------------
# Orchestration
# --------------------------------------------------------------------------------------------
def _billing_pf(tariff: Tariff, basis: str, q: PeriodQuantities) -> np.ndarray:
    return round_pf(energy_pf(q.kwh, kvarh_of(basis, q.kvarh_lag, q.kvarh_lead)), tariff.pf_rounding)


def compute_charges(tariff: Tariff, q: PeriodQuantities) -> Charges:
    """Apply every clause of ``tariff`` to the period quantities.

    Order: energy, demand (PF adjustment, then ratchet), fixed, then each reactive mechanism in
    file order; ``pf_percent`` is a percentage of the base charges it names. The
    ``pf_demand_adjust`` amount is the demand charge with the adjustment minus the demand charge
    without it (both ratcheted), so ``demand`` + ``pf_demand_adjust`` is what the bill shows as
    demand and the reactive part stands alone.
    """
    n = len(q.kwh)
    zeros = np.zeros(n)
    prices = [w.price_per_kwh for w in tariff.energy.windows] + [tariff.energy.price_per_kwh]
    amounts: dict[str, np.ndarray] = {"energy": energy_charge(q.energy_kwh, prices)}

    billing_demand = zeros
    reactive: dict[str, np.ndarray] = {}
    if tariff.demand is not None:
        d = tariff.demand
        measured = np.nan_to_num(q.peak_kva if d.basis == "kva" else q.peak_kw)
        plain = ratcheted_demand(measured, d.ratchet_percent, d.ratchet_periods, q.history_demand)
        billing_demand = plain
        amounts["demand"] = d.price_per_kw * plain
        for m in tariff.reactive:
            if isinstance(m, PfDemandAdjust):
                pf = round_pf(q.pf_at_peak, tariff.pf_rounding) if m.pf == "at_peak" else _billing_pf(tariff, m.kvarh, q)
                adjusted = pf_adjusted_demand(measured, pf, m.base_pf, m.credit, m.max_credit_percent)
                with_pf = ratcheted_demand(adjusted, d.ratchet_percent, d.ratchet_periods, q.history_demand)
                billing_demand = with_pf
                reactive[Tariff.key_of(m)] = d.price_per_kw * (with_pf - plain)
    else:
        amounts["demand"] = zeros
    amounts["fixed"] = np.full(n, float(tariff.fixed_per_period))

    for i, m in enumerate(tariff.reactive):
        key = Tariff.key_of(m)
        w = q.windowed[i] if i < len(q.windowed) else None
        if isinstance(m, KvarhExcess):
            src = w if (m.windows and w is not None) else q
            reactive[key] = kvarh_excess_charge(
                src.kwh, kvarh_of(m.kvarh, src.kvarh_lag, src.kvarh_lead), m.tan_phi_limit, m.price_per_kvarh
            )
        elif isinstance(m, KvarhBanded):
            reactive[key] = kvarh_banded_charge(
                q.kwh, kvarh_of(m.kvarh, q.kvarh_lag, q.kvarh_lead), _billing_pf(tariff, m.kvarh, q),
                m.bands, m.tan_phi_limit,
            )
        elif isinstance(m, PfPercent):
            base = sum((amounts[k] for k in m.applies_to), zeros)
            reactive[key] = pf_percent_adjustment(
                _billing_pf(tariff, m.kvarh, q), base, m.threshold_pf, m.percent_per_hundredth,
                m.rebate_above_pf, m.rebate_percent_per_hundredth, m.max_surcharge_percent,
                m.max_rebate_percent,
            )
        elif isinstance(m, KvarDemand):
            reactive[key] = kvar_demand_charge(q.peak_kvar, q.peak_kw, m.allowance_ratio, m.price_per_kvar)
        elif isinstance(m, LeadingKvarh):
            if w is None:
                raise ValueError(f"leading_kvarh {key!r} needs the energies inside its hours")
            reactive[key] = leading_kvarh_charge(w.kwh, w.kvarh_lead, m.price_per_kvarh, m.tan_phi_limit)
        elif not isinstance(m, PfDemandAdjust):  # pragma: no cover - spec validation prevents it
            raise ValueError(f"unknown mechanism {m!r}")

    keys = tariff.reactive_keys
    for k in keys:
        amounts[k] = reactive[k]
    reactive_total = sum((amounts[k] for k in keys), zeros)
    total = amounts["energy"] + amounts["demand"] + amounts["fixed"] + reactive_total
    return Charges(
        amounts=amounts,
        reactive_keys=keys,
        reactive_total=reactive_total,
        total=total,
        billing_demand=billing_demand,
        billing_pf=_billing_pf(tariff, tariff.kvarh_basis, q),
    )
