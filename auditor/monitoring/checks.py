"""The checks: what last night's data mean, told before the bill arrives.

Each check reads a :class:`~auditor.monitoring.panel.Panel` (day summaries of many meters) and
returns the meters it could judge and its findings. They are pure: no database, no clock (the
moment judged is ``panel.as_of``), no files. Array work is over meters and days at once; only
meters that already show a finding are looked at one by one (to date it and price it).

The signatures and thresholds are common practice in monitoring between bills (DEVELOPERS.md,
"Monitoring"); the numbers in :class:`CheckSettings` are this program's defaults, chosen, not
taken from a standard:

* ``projected_charge`` — the open billing period's charges so far, and projected to its end from
  the same weekday-and-hour profile of the last four weeks; an alert when the projection starts
  a reactive charge or raises it (per day) by ``charge_raise_fraction`` over the last period.
* ``correction_loss`` — a step rise of lagging kvar at comparable kW: the daily mean kvar
  against the kvar-kW line fitted over the four weeks before; the day it began is the split of
  the daily residuals that best explains them (least squares, one step); the money a month is
  the tariff applied to those four weeks with and without the step, stretched to a month.
* ``leading_at_light_load`` — the lowest quarter of each day's intervals by kW now mostly
  leading where, in the four weeks before, they were not (a bank stuck on).
* ``data_stopped`` — no interval newer than ``stale_hours`` before ``as_of``; ``data_quality``
  — missing and estimated intervals rising; ``multiplier_change`` — every quantity scaled by
  one constant against the same weekday-and-hour profile (a CT or VT ratio changed or wrongly
  entered).

References
----------
.. [1] IEEE Std 1459-2010, section 3.1.1 (P, Q, PF, tan phi).
.. [2] IEEE Std 1036-2010 (shunt capacitor banks: fixed and switched steps, over-correction at
   light load).
"""
from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from auditor.monitoring import pricing
from auditor.monitoring.panel import Panel
from auditor.quantities import BillingPeriod, billing_periods
from auditor.tariffs.spec import Tariff

__all__ = [
    "KINDS", "SEVERITY", "CheckSettings", "Finding", "TariffPlan", "Anchor", "Evaluation",
    "Projection", "project_periods", "projected_charge", "correction_loss", "leading_at_light_load", "data_stopped", "data_quality",
    "multiplier_change", "run_checks",
]

KINDS = ("projected_charge", "correction_loss", "leading_at_light_load", "data_stopped",
         "data_quality", "multiplier_change")

#: Severity of each kind: a silent meter or a wrong multiplier makes every other figure wrong.
SEVERITY = {"data_stopped": "critical", "multiplier_change": "critical", "correction_loss": "warning",
            "leading_at_light_load": "warning", "projected_charge": "warning", "data_quality": "info"}


@dataclass(frozen=True)
class CheckSettings:
    """Thresholds of the checks (this program's defaults; see DEVELOPERS.md, "Monitoring")."""

    stale_hours: float = 36.0  # a nightly file missed once, plus a few hours of slack
    watch_days: float = 30.0  # data older than this is an archive being imported, not a meter that stopped
    recent_days: int = 7  # "recent days" against ...
    baseline_days: int = 28  # ... "the four weeks before"
    min_baseline_days: int = 14
    min_recent_days: int = 3
    complete_fraction: float = 0.8  # a day with at least this share of its intervals counts
    step_min_fraction: float = 0.05  # a kvar step of at least 5 % of the baseline's mean kvar ...
    step_sigma: float = 3.0  # ... and 3 times the day-to-day scatter of the baseline residuals
    step_min_kvar: float = 1.0
    step_min_kw_share: float = 0.03  # ... and 3 % of the mean kW (smaller is no capacitor step worth a call)
    leading_share: float = 0.5  # light load now leading in at least half the intervals ...
    leading_share_before: float = 0.2  # ... where before at most a fifth were
    quality_min_share: float = 0.05  # missing + estimated at least 5 % of the recent intervals ...
    quality_factor: float = 2.0  # ... and twice the share before, plus ...
    quality_margin: float = 0.02  # ... two percentage points
    multiplier_min_change: float = 0.2  # every quantity 20 % off its usual profile or more
    multiplier_agreement: float = 0.05  # kWh and kvarh ratios within 5 % of each other
    multiplier_spread: float = 0.15  # hour-to-hour spread of the ratio (median |log|)
    multiplier_min_days: int = 2
    charge_raise_fraction: float = 0.10  # projected reactive charge per day 10 % above last period's
    charge_min_share: float = 0.005  # and at least 0.5 % of the projected bill
    profile_min_days: int = 14  # days in the four-week profile needed for a projection
    days_per_month: float = 365.25 / 12

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class TariffPlan:
    """A meter's tariff and the facts the checks need about its clauses.

    ``thresholds`` lists ``{"key", "pf"}``: the PF at which each reactive clause starts to
    charge; ``leading_keys`` the clauses that charge leading energy. Both come from the tariffs
    layer through the caller (one home per fact).
    """

    tariff: Tariff
    billing_day: int | None = None
    thresholds: tuple = ()
    leading_keys: tuple[str, ...] = ()


@dataclass(frozen=True)
class Anchor:
    """An open alert of ``kind`` on meter index ``meter``: the check keeps judging against the
    weeks before ``since_day`` (local date) instead of re-detecting, so a cause that lasts longer
    than the baseline window is still seen as the same cause."""

    meter: int
    kind: str
    since_day: np.datetime64
    figures: Mapping = field(default_factory=dict)


@dataclass(frozen=True)
class Finding:
    """One alert-worthy finding (not yet stored)."""

    meter: str
    kind: str
    since: pd.Timestamp | None  # UTC
    severity: str
    money_per_month: float | None
    currency: str | None
    message: str
    figures: dict
    cause: str = ""


@dataclass(frozen=True)
class Evaluation:
    """Findings of one check, and which meters it could judge (an alert of a meter it could not
    judge is neither confirmed nor resolved)."""

    kind: str
    evaluated: np.ndarray
    findings: list[Finding]


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------
def _complete(panel: Panel, s: CheckSettings) -> np.ndarray:
    """(M, D) days with enough data to judge, the partial day of ``as_of`` excluded."""
    c = panel.cols
    ok = panel.present & (c["intervals"] >= s.complete_fraction * np.maximum(c["expected"], 1))
    ok[:, -1] = False
    return ok


def _cols_between(panel: Panel, lo, hi) -> np.ndarray:
    """(M, D) mask of columns lo <= j < hi (lo, hi scalars or (M,) arrays)."""
    j = np.arange(panel.n_days)[None, :]
    return (j >= np.asarray(lo).reshape(-1, 1)) & (j < np.asarray(hi).reshape(-1, 1))


def _div(a, b):
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    return np.divide(a, b, out=np.full(np.broadcast(a, b).shape, np.nan), where=b != 0)


def _day_iso(panel: Panel, m: int, col: int) -> str:
    return str(panel.first_day[m] + np.timedelta64(int(col), "D"))


def _money(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else round(float(x), 2)


def _r(x, digits=3):
    x = float(x)
    return round(x, digits) if math.isfinite(x) else None


def _fmt_money(x: float | None, currency: str | None) -> str:
    if x is None:
        return ""
    return f"{x:,.0f} {currency or ''}".rstrip()


def _month_charges(panel: Panel, m: int, plan: TariffPlan, days: np.ndarray, s: CheckSettings,
                   change: Callable[[np.ndarray, dict], tuple[np.ndarray, dict]] | None = None):
    """Charges of a month like the selected days of meter ``m`` (their energies stretched to
    ``days_per_month``; peaks as they were), optionally after ``change(hourly, peaks)``."""
    cols = np.flatnonzero(days)
    hourly = panel.hourly[m, cols]  # (n, 3, 24)
    peaks = {"peak_kw": panel.cols["peak_kw"][m, cols], "peak_kw_kvar_net": panel.cols["peak_kw_kvar_net"][m, cols],
             "peak_kva": panel.cols["peak_kva"][m, cols], "peak_kva_kw": panel.cols["peak_kva_kw"][m, cols],
             "peak_kva_kvar_net": panel.cols["peak_kva_kvar_net"][m, cols], "peak_kvar": panel.cols["peak_kvar"][m, cols]}
    if change is not None:
        hourly, peaks = change(hourly.copy(), dict(peaks))
    k = int(np.argmax(peaks["peak_kw"]))
    period_peaks = {"peak_kw": np.array([peaks["peak_kw"][k]]),
                    "peak_kw_kvar_net": np.array([peaks["peak_kw_kvar_net"][k]]),
                    "peak_kva": np.array([np.max(peaks["peak_kva"])]),
                    "peak_kvar": np.array([np.max(peaks["peak_kvar"])])}
    cal = pricing.hour_cells(panel.dates[m, cols], panel.timezones[m], plan.tariff)
    cells = hourly.transpose(1, 0, 2).reshape(3, -1)[None, :, :]
    q = pricing.quantities(plan.tariff, cal, cells, period_peaks, scale=s.days_per_month / len(cols))
    return pricing.charges(plan.tariff, q)


def _charge_dict(ch, k: int = 0) -> dict:
    return {key: round(float(v[k]), 2) for key, v in ch.amounts.items()}


def _anchor_map(anchors: Sequence[Anchor] | None, kind: str) -> dict[int, Anchor]:
    return {a.meter: a for a in (anchors or ()) if a.kind == kind}


# --------------------------------------------------------------------------------------------
# data_stopped, data_quality, multiplier_change
# --------------------------------------------------------------------------------------------
def data_stopped(panel: Panel, settings: CheckSettings | None = None) -> Evaluation:
    """No interval newer than ``stale_hours`` before ``as_of``.

    ``since`` is the end of the last interval received. Meters that never had data are not
    judged, nor are meters whose data ended more than ``watch_days`` before ``as_of``: that is an
    archive being imported (a consultant's year of exports), not a meter that stopped last night.
    An alert raised while a meter was watched is not resolved by the meter's leaving the window
    (it is not judged then), so a silence that lasts stays one open alert.
    """
    s = settings or CheckSettings()
    as_of = int(panel.as_of.timestamp())
    end = panel.last_start + panel.interval_minutes * 60
    hours = (as_of - end) / 3600.0
    known = (panel.last_start >= 0) & (hours <= 24.0 * s.watch_days)
    fire = known & (hours >= s.stale_hours)
    out = []
    for m in np.flatnonzero(fire):
        since = pd.Timestamp(int(end[m]), unit="s", tz="UTC")
        local = since.tz_convert(panel.timezones[m])
        out.append(Finding(
            meter=panel.meters[m], kind="data_stopped", since=since, severity=SEVERITY["data_stopped"],
            money_per_month=None, currency=None,
            message=(f"No data since {local:%Y-%m-%d %H:%M} local time ({hours[m]:.0f} h before the check; "
                     f"the limit is {s.stale_hours:g} h): is the meter or its data transfer down?"),
            figures={"last_interval_end": local.isoformat(), "hours_without_data": round(float(hours[m]), 1),
                     "stale_hours": s.stale_hours}))
    return Evaluation("data_stopped", known, out)


def data_quality(panel: Panel, settings: CheckSettings | None = None,
                 skip: np.ndarray | None = None) -> Evaluation:
    """Missing and estimated intervals rising: their share over the recent days against the
    four weeks before. Meters in ``skip`` (those whose data stopped) are not judged."""
    s = settings or CheckSettings()
    c = panel.cols
    D = panel.n_days
    last = D - 1
    j = np.arange(D)[None, :]
    had_data = np.where(panel.present, j, D).min(axis=1)  # first day with any data
    judged_days = j >= had_data[:, None]
    judged_days[:, last] = False
    bad = np.maximum(c["expected"] - c["intervals"], 0) + c["estimated"]
    recent = _cols_between(panel, last - s.recent_days, last) & judged_days
    before = _cols_between(panel, last - s.recent_days - s.baseline_days, last - s.recent_days) & judged_days
    share_recent = _div((bad * recent).sum(1), (c["expected"] * recent).sum(1))
    share_before = _div((bad * before).sum(1), (c["expected"] * before).sum(1))
    evaluated = (recent.sum(1) >= s.min_recent_days) & (before.sum(1) >= s.min_baseline_days)
    if skip is not None:
        evaluated &= ~skip
    fire = evaluated & (share_recent >= s.quality_min_share) & (
        share_recent >= s.quality_factor * share_before + s.quality_margin)
    out = []
    day_share = _div(bad, c["expected"])
    for m in np.flatnonzero(fire):
        cols = np.flatnonzero(recent[m] & (day_share[m] >= s.quality_min_share))
        col = int(cols[0]) if len(cols) else last - s.recent_days
        missing = int((np.maximum(c["expected"][m] - c["intervals"][m], 0) * recent[m]).sum())
        estimated = int((c["estimated"][m] * recent[m]).sum())
        out.append(Finding(
            meter=panel.meters[m], kind="data_quality", since=panel.day_start_utc(m, col),
            severity=SEVERITY["data_quality"], money_per_month=None, currency=None,
            message=(f"{100 * share_recent[m]:.1f} % of the last {int(recent[m].sum())} days' intervals are missing or "
                     f"estimated ({missing} missing, {estimated} estimated), against {100 * share_before[m]:.1f} % "
                     f"in the four weeks before"),
            figures={"share_recent": _r(share_recent[m], 4), "share_before": _r(share_before[m], 4),
                     "missing_intervals": missing, "estimated_intervals": estimated,
                     "first_day": _day_iso(panel, m, col)}))
    return Evaluation("data_quality", evaluated, out)


def _nanmedian(x: np.ndarray, axis: int) -> np.ndarray:
    """Median along ``axis`` ignoring NaN (NaN where all are NaN), by one sort: numpy's
    ``nanmedian`` goes through masked arrays and is many times slower on these shapes."""
    x = np.moveaxis(np.asarray(x, dtype=float), axis, -1)
    s = np.sort(x, axis=-1)  # NaN sort last
    n = np.isfinite(x).sum(axis=-1)
    lo = np.take_along_axis(s, np.maximum((n - 1) // 2, 0)[..., None], axis=-1)[..., 0]
    hi = np.take_along_axis(s, np.maximum(n // 2, 0)[..., None], axis=-1)[..., 0]
    return np.where(n > 0, (lo + hi) / 2, np.nan)


def _weekday_profile(panel: Panel, days: np.ndarray, values: np.ndarray, robust: bool = False,
                     rows: np.ndarray | None = None) -> np.ndarray:
    """(M, 7, ...) mean (``robust``: median) of ``values`` (M, D, ...) over the selected days of
    each weekday; NaN where a weekday has no selected day. ``rows`` restricts it to those meters
    (then ``days`` and ``values`` hold only their rows).

    The days of each weekday are gathered first (column j of meter m is weekday
    ``(weekday of first_day[m] + j) mod 7``), so the work is (meters, 7, weeks), not (meters,
    7, days)."""
    rows = np.arange(panel.n_meters) if rows is None else np.asarray(rows)
    M, D = days.shape
    weeks = -(-D // 7)
    first_wd = (panel.first_day[rows].astype(np.int64) + 3) % 7  # weekday of column 0
    # column of the k-th day of weekday w for each meter
    col = ((np.arange(7)[None, :, None] - first_wd[:, None, None]) % 7) + 7 * np.arange(weeks)[None, None, :]
    inside = col < D
    col = np.minimum(col, D - 1)
    m = np.arange(M)[:, None, None]
    sel = days[m, col] & inside  # (M, 7, weeks)
    extra = values.shape[2:]
    picked = values[m, col]  # (M, 7, weeks, ...)
    sel_x = sel.reshape(*sel.shape, *([1] * len(extra)))
    if robust:
        return _nanmedian(np.where(sel_x, picked, np.nan), axis=2)
    n = sel.sum(axis=2).reshape(M, 7, *([1] * len(extra)))
    return _div(np.where(sel_x, np.nan_to_num(picked), 0.0).sum(axis=2), n)


def _hour_ratios(panel: Panel, days: np.ndarray, profile: np.ndarray, q: int):
    """Per day: the median log ratio of hourly energy ``q`` to the weekday-and-hour ``profile``
    (M, 7, 24), and the median |log| spread of the hourly ratios around it; (M, D) each, NaN on
    days not selected or with fewer than six usable hours (hours under a tenth of the profile's
    largest are left out: small denominators)."""
    ref = profile[np.arange(panel.n_meters)[:, None], panel.weekday]  # (M, D, 24)
    top = np.max(np.nan_to_num(ref), axis=2, keepdims=True)
    values = panel.hourly[:, :, q, :]
    usable = np.isfinite(ref) & (ref > 0.1 * top) & days[:, :, None] & (values > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        logr = np.where(usable, np.log(np.where(usable, values, 1.0) / np.where(usable, ref, 1.0)), np.nan)
    enough = usable.sum(axis=2) >= 6
    med = _nanmedian(logr, axis=2)
    spread = _nanmedian(np.abs(logr - med[:, :, None]), axis=2)
    return np.where(enough, med, np.nan), np.where(enough, spread, np.nan)


def _scaled_days(panel: Panel, ok: np.ndarray, base: np.ndarray, s: CheckSettings, robust: bool):
    """(M, D) days whose kWh (and lagging kvarh, where the meter has any) are one constant
    factor off the profile of the ``base`` days, and that factor (log)."""
    prof_kwh = _weekday_profile(panel, base, panel.hourly[:, :, 0, :], robust)
    prof_lag = _weekday_profile(panel, base, panel.hourly[:, :, 1, :], robust)
    logr, spread = _hour_ratios(panel, ok, prof_kwh, 0)
    logr_lag, _ = _hour_ratios(panel, ok, prof_lag, 1)
    lag_share = _div(np.where(base, panel.cols["kvarh_lag"], 0).sum(1), np.where(base, panel.cols["kwh"], 0).sum(1))
    has_lag = np.nan_to_num(lag_share) >= 0.05
    agree = np.where(has_lag[:, None], np.abs(logr_lag - logr) <= math.log1p(s.multiplier_agreement), True)
    scaled = ok & (np.abs(logr) >= math.log1p(s.multiplier_min_change)) & (spread <= s.multiplier_spread) & agree
    return scaled, logr


def multiplier_change(panel: Panel, settings: CheckSettings | None = None,
                      plans: Sequence[TariffPlan | None] | None = None,
                      anchors: Sequence[Anchor] | None = None) -> Evaluation:
    """A sudden constant ratio in every quantity: each hour's kWh and lagging kvarh against the
    same weekday-and-hour profile are off by one factor (at least ``multiplier_min_change``),
    hour after hour and day after day — the signature of a changed or wrongly entered CT / VT
    ratio rather than of a change in the load, which alters the shape.

    The trailing run of such days is found against a robust profile (the median of each weekday
    and hour over the eight weeks before the recent days), then judged against the mean profile
    of the four weeks before its first day. An open alert keeps its first day (``anchors``).
    """
    s = settings or CheckSettings()
    anchored = _anchor_map(anchors, "multiplier_change")
    # a cheap first look: only meters with a recent day whose kWh is off the median of its
    # weekday by nearly the minimum change go on to the hour-by-hour test
    ok = _complete(panel, s)
    last = panel.n_days - 1
    first_guess = last - s.recent_days
    wide = _cols_between(panel, first_guess - 2 * s.baseline_days, first_guess) & ok
    usual = _weekday_profile(panel, wide, panel.cols["kwh"], robust=True)  # (M, 7)
    ref = usual[np.arange(panel.n_meters)[:, None], panel.weekday]
    with np.errstate(divide="ignore", invalid="ignore"):
        off = np.abs(np.log(panel.cols["kwh"] / ref))
    recent = _cols_between(panel, first_guess - s.baseline_days, last) & ok
    candidates = (np.where(recent, np.nan_to_num(off, nan=0.0), 0.0) >= 0.75 * math.log1p(s.multiplier_min_change)).any(axis=1)
    candidates[list(anchored)] = True
    rows = np.flatnonzero(candidates)
    evaluated = (wide.sum(1) >= s.min_baseline_days) | np.isin(np.arange(panel.n_meters), list(anchored))
    if not len(rows):
        return Evaluation("multiplier_change", evaluated, [])
    sub_anchors = [Anchor(int(np.flatnonzero(rows == a.meter)[0]), a.kind, a.since_day, a.figures)
                   for a in anchored.values()]
    sub_plans = [plans[i] for i in rows] if plans is not None else None
    found = _multiplier_change(panel.subset(rows), s, sub_plans, sub_anchors)
    evaluated[rows] = found.evaluated
    return Evaluation("multiplier_change", evaluated, found.findings)


def _multiplier_change(panel: Panel, s: CheckSettings, plans, anchors) -> Evaluation:
    M, D = panel.n_meters, panel.n_days
    last = D - 1
    j = np.arange(D)[None, :]
    ok = _complete(panel, s)
    anchored = _anchor_map(anchors, "multiplier_change")
    is_anchored = np.isin(np.arange(M), list(anchored))
    first_guess = last - s.recent_days
    wide = _cols_between(panel, first_guess - 2 * s.baseline_days, first_guess) & ok
    scaled, _ = _scaled_days(panel, ok, wide, s, robust=True)
    brk = np.where(ok & ~scaled & (j < last), j, -1).max(axis=1)
    run = ok & (j > brk[:, None]) & (j < last)
    start = np.where(run.any(axis=1), np.argmax(run, axis=1), last)
    for m, a in anchored.items():
        start[m] = panel.column_of(m, a.since_day)
    base = _cols_between(panel, start - s.baseline_days, start) & ok
    scaled, logr = _scaled_days(panel, ok, base, s, robust=False)
    evaluated = (base.sum(1) >= s.min_baseline_days) | is_anchored
    # judged on every day since the start (an open alert: on the recent days)
    since_start = ok & (j >= start[:, None]) & (j < last)
    judged = np.where(is_anchored[:, None], since_start & (j >= first_guess), since_start)
    n_days = judged.sum(1)
    all_scaled = (scaled | ~judged).all(axis=1)
    ratios = np.where(judged, np.exp(logr), np.nan)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # meters without judged days
        lo_r, hi_r = np.nanmin(ratios, axis=1), np.nanmax(ratios, axis=1)
    ratio = _nanmedian(ratios, axis=1)
    fire = (evaluated & (n_days >= s.multiplier_min_days) & all_scaled
            & (hi_r / lo_r <= 1 + 2 * s.multiplier_agreement))
    out = []
    for m in np.flatnonzero(fire):
        col = int(start[m])
        r = float(ratio[m])
        plan = plans[m] if plans is not None else None
        money, currency, extra = None, None, {}
        if plan is not None and base[m].any():
            def scale_all(h, p, r=r):
                return h * r, {k: v * r for k, v in p.items()}
            before = _month_charges(panel, m, plan, base[m], s)
            after = _month_charges(panel, m, plan, base[m], s, scale_all)
            money = float(after.total[0] - before.total[0])
            currency = plan.tariff.currency
            extra = {"tariff": plan.tariff.name, "month_total_before": _money(float(before.total[0])),
                     "month_total_after": _money(float(after.total[0]))}
        day = _day_iso(panel, m, col)
        text = (f"Every quantity is {r:.2f} times its usual profile since {day} — a changed or wrongly "
                f"entered CT / VT multiplier? Check the meter's multiplier before trusting any figure")
        if money is not None:
            text += f"; the bill would move by about {_fmt_money(money, currency)} a month"
        out.append(Finding(
            meter=panel.meters[m], kind="multiplier_change", since=panel.day_start_utc(m, col),
            severity=SEVERITY["multiplier_change"], money_per_month=_money(money), currency=currency,
            message=text + ".",
            figures={"ratio": round(r, 4), "days": int(n_days[m]), "first_day": day, **extra}))
    return Evaluation("multiplier_change", evaluated, out)


# --------------------------------------------------------------------------------------------
# correction_loss
# --------------------------------------------------------------------------------------------
def _fit(panel: Panel, days: np.ndarray):
    """The kvar-kW line of each meter over the selected days, pooled over their intervals
    (ordinary least squares from the day sums). Returns intercept, slope, mean kvar, days."""
    c = panel.cols
    w = days.astype(float)
    n = (c["intervals"] * w).sum(1)
    sx = (c["kw_sum"] * w).sum(1)
    sy = (c["kvar_sum"] * w).sum(1)
    sxx = (c["kw_sq_sum"] * w).sum(1)
    sxy = (c["kw_kvar_sum"] * w).sum(1)
    den = n * sxx - sx * sx
    flat = ~(den > 1e-9 * np.maximum(n * sxx, 1e-300))
    slope = np.where(flat, 0.0, _div(n * sxy - sx * sy, den))
    intercept = _div(sy - slope * sx, n)
    return intercept, slope, _div(sy, n), days.sum(1)


def _residuals(panel: Panel, intercept, slope) -> np.ndarray:
    c = panel.cols
    xbar = _div(c["kw_sum"], c["intervals"])
    ybar = _div(c["kvar_sum"], c["intervals"])
    return ybar - (np.asarray(intercept)[:, None] + np.asarray(slope)[:, None] * xbar)


def _line(x, y, mask):
    """Least-squares line y = a + b x of each row over the masked points (b = 0 when x does not
    vary)."""
    w = mask & np.isfinite(y)
    n = w.sum(1).astype(float)
    xw, yw = np.where(w, x, 0.0), np.where(w, y, 0.0)
    sx, sy = xw.sum(1), yw.sum(1)
    sxx, sxy = (xw * xw).sum(1), (xw * yw).sum(1)
    den = n * sxx - sx * sx
    b = np.where(den > 0, _div(n * sxy - sx * sy, den), 0.0)
    return _div(sy - b * sx, n), b


def _masked_mean(x, mask):
    return _div(np.where(mask, x, 0.0).sum(1), mask.sum(1))


def _masked_std(x, mask):
    n = mask.sum(1)
    mu = _masked_mean(x, mask)
    ss = np.where(mask, (x - mu[:, None]) ** 2, 0.0).sum(1)
    return np.sqrt(_div(ss, n - 1))


def _change_points(values: np.ndarray, mask: np.ndarray, min_before: int, min_after: int) -> np.ndarray:
    """Per row, the column splitting the masked ``values`` into two means with the largest
    reduction of squared error (one step, least squares) where the later mean is the higher;
    -1 where there is no such split. ``min_before`` / ``min_after`` masked values each side."""
    v = np.where(mask, values, 0.0)
    cs = np.cumsum(v, axis=1)
    cn = np.cumsum(mask, axis=1).astype(float)
    cs_before = np.concatenate([np.zeros((len(v), 1)), cs[:, :-1]], axis=1)
    n1 = np.concatenate([np.zeros((len(v), 1)), cn[:, :-1]], axis=1)
    n = cn[:, -1:]
    n2 = n - n1
    m1 = _div(cs_before, n1)
    m2 = _div(cs[:, -1:] - cs_before, n2)
    score = _div(n1 * n2, n) * (m2 - m1) ** 2
    allowed = mask & (n1 >= min_before) & (n2 >= min_after) & (m2 > m1)
    score = np.where(allowed & np.isfinite(score), score, -1.0)
    best = np.argmax(score, axis=1) if score.size else np.zeros(len(v), dtype=np.int64)
    return np.where(score.max(axis=1, initial=-1.0) > 0, best, -1)


def correction_loss(panel: Panel, settings: CheckSettings | None = None,
                    plans: Sequence[TariffPlan | None] | None = None,
                    anchors: Sequence[Anchor] | None = None) -> Evaluation:
    """A step rise of lagging kvar at comparable kW (a failed capacitor step, a blown fuse, a
    controller switched off).

    Each day's mean lagging kvar is compared with what a kvar-kW line gives at that day's mean
    kW. The step is dated first: the best single-step split of the daily residuals (against the
    line of the four weeks before the recent days) over the last five weeks. The line is then
    refitted on the four weeks before that day, the drift of its residuals carried on (a
    segmented regression of an interrupted time series), and the step is the mean rise of its
    first two weeks. It must reach ``step_min_fraction`` of the usual kvar, ``step_sigma``
    times the day-to-day scatter of the baseline, ``step_min_kw_share`` of the mean kW and
    ``step_min_kvar``, and the recent days must still show it. An open alert keeps its own day
    (``anchors``); whether it lasts is judged on the recent days. Money a month: the tariff on
    the four weeks before with the step added to every hour, minus without, stretched to a
    month.
    """
    s = settings or CheckSettings()
    M, D = panel.n_meters, panel.n_days
    last = D - 1
    ok = _complete(panel, s)
    anchored = _anchor_map(anchors, "correction_loss")
    is_anchored = np.isin(np.arange(M), list(anchored))
    first_guess = last - s.recent_days
    a0, b0, _, _ = _fit(panel, _cols_between(panel, first_guess - s.baseline_days, first_guess) & ok)
    window = _cols_between(panel, first_guess - s.baseline_days, last) & ok
    cp = _change_points(_residuals(panel, a0, b0), window, 3, s.min_recent_days)
    split = np.where(cp >= 0, cp, first_guess)
    for m, a in anchored.items():
        split[m] = panel.column_of(m, a.since_day)
    base = _cols_between(panel, split - s.baseline_days, split) & ok
    intercept, slope, kvar_mean, nb = _fit(panel, base)
    res = _residuals(panel, intercept, slope)
    # a slow drift of the baseline (season, production mix) continues, so the step is the level
    # change of an interrupted time series: the trend of the baseline residuals, carried on for
    # at most one baseline length, is taken off (segmented regression)
    rel = (np.arange(D)[None, :] - split[:, None]).astype(float)
    trend_a, trend_b = _line(rel, res, base)
    res = res - (trend_a[:, None] + trend_b[:, None] * np.minimum(rel, s.baseline_days))
    recent = _cols_between(panel, np.maximum(split, last - s.recent_days), last) & ok
    # the size of the step is measured where it happened (its first two weeks), whether it
    # lasts is judged on the recent days
    after = _cols_between(panel, split, np.minimum(split + 2 * s.recent_days, last)) & ok
    step = _masked_mean(res, after)
    step_recent = _masked_mean(res, recent)
    scatter = _masked_std(res, base)
    kw_mean = _div((panel.cols["kw_sum"] * base).sum(1), (panel.cols["intervals"] * base).sum(1))
    need = np.fmax.reduce([s.step_min_fraction * kvar_mean, s.step_sigma * np.nan_to_num(scatter),
                           s.step_min_kw_share * np.nan_to_num(kw_mean), np.full(M, s.step_min_kvar)])
    evaluated = (nb >= s.min_baseline_days) & (recent.sum(1) >= s.min_recent_days)
    fire = evaluated & (step_recent >= need) & ((step >= need) | is_anchored)
    out = []
    for m in np.flatnonzero(fire):
        col = int(split[m])
        step_m = float(step[m])
        day = _day_iso(panel, m, col)
        plan = plans[m] if plans is not None else None
        money, currency, extra = None, None, {}
        if plan is not None:
            def add_step(h, p, q=step_m):
                h[:, 1, :] += q  # q kvar for one hour = q kvarh in every hour
                p["peak_kvar"] = p["peak_kvar"] + q
                kva_a = np.hypot(p["peak_kva_kw"], p["peak_kva_kvar_net"] + q)
                kva_b = np.hypot(p["peak_kw"], p["peak_kw_kvar_net"] + q)
                p["peak_kw_kvar_net"] = p["peak_kw_kvar_net"] + q
                p["peak_kva"] = np.maximum(kva_a, kva_b)
                return h, p
            before = _month_charges(panel, m, plan, base[m], s)
            after_ch = _month_charges(panel, m, plan, base[m], s, add_step)
            money = float(after_ch.total[0] - before.total[0])
            currency = plan.tariff.currency
            extra = {"tariff": plan.tariff.name,
                     "month_charges_before": _charge_dict(before), "month_charges_after": _charge_dict(after_ch)}
        text = (f"Lagging reactive power up {step_m:.0f} kvar at the same load since {day} — a failed "
                f"capacitor step, a blown fuse or a controller switched off?")
        if money is not None:
            text += f" It costs about {_fmt_money(money, currency)} a month under {plan.tariff.name}."
        out.append(Finding(
            meter=panel.meters[m], kind="correction_loss", since=panel.day_start_utc(m, col),
            severity=SEVERITY["correction_loss"], money_per_month=_money(money), currency=currency,
            message=text,
            figures={"step_kvar": round(step_m, 2), "step_kvar_recent_days": round(float(step_recent[m]), 2),
                     "threshold_kvar": round(float(need[m]), 2),
                     "baseline_intercept_kvar": round(float(intercept[m]), 4),
                     "baseline_slope_kvar_per_kw": round(float(slope[m]), 6),
                     "baseline_scatter_kvar": _r(scatter[m]), "baseline_days": int(nb[m]), "first_day": day,
                     **extra}))
    return Evaluation("correction_loss", evaluated, out)


# --------------------------------------------------------------------------------------------
# leading_at_light_load
# --------------------------------------------------------------------------------------------
def leading_at_light_load(panel: Panel, settings: CheckSettings | None = None,
                          plans: Sequence[TariffPlan | None] | None = None,
                          anchors: Sequence[Anchor] | None = None) -> Evaluation:
    """Light load newly leading: the trailing run of days whose lowest-kW quarter is leading in
    at least ``leading_share`` of its intervals, where the four weeks before the run were leading
    in at most ``leading_share_before``. Money a month: the charges of the tariff's leading
    clauses with a bank of the same size left on over those four weeks, stretched to a month."""
    s = settings or CheckSettings()
    c = panel.cols
    D = panel.n_days
    last = D - 1
    ok = _complete(panel, s) & (c["light_intervals"] > 0)
    share = _div(c["light_leading"], c["light_intervals"])
    flag = ok & (share >= s.leading_share)
    j = np.arange(D)[None, :]
    anchored = _anchor_map(anchors, "leading_at_light_load")
    brk = np.where(ok & ~flag & (j < last), j, -1).max(axis=1)
    run = ok & (j > brk[:, None]) & (j < last)
    has_run = run.any(axis=1)
    start = np.where(has_run, np.argmax(run, axis=1), last)
    for m, a in anchored.items():
        start[m] = panel.column_of(m, a.since_day)
        run[m] = ok[m] & (j[0] >= max(start[m], last - s.recent_days)) & (j[0] < last)
    recent_share = _div((c["light_leading"] * run).sum(1), (c["light_intervals"] * run).sum(1))
    base = _cols_between(panel, start - s.baseline_days, start) & ok
    base_share = _div((c["light_leading"] * base).sum(1), (c["light_intervals"] * base).sum(1))
    light_net = _div(c["light_kvar_net_sum"], c["light_intervals"])
    evaluated = (base.sum(1) >= s.min_baseline_days) | np.isin(np.arange(panel.n_meters), list(anchored))
    fire = evaluated & (run.sum(1) >= s.min_recent_days) & (recent_share >= s.leading_share)
    new = ~np.isin(np.arange(panel.n_meters), list(anchored))
    fire &= ~new | (base_share <= s.leading_share_before)
    out = []
    for m in np.flatnonzero(fire):
        col = int(start[m])
        net_before = float(_masked_mean(light_net[m:m + 1], base[m:m + 1])[0]) if base[m].any() else 0.0
        net_now = float(_masked_mean(light_net[m:m + 1], run[m:m + 1])[0])
        qc = max(0.0, net_before - net_now)  # kvar of correction that appeared
        day = _day_iso(panel, m, col)
        plan = plans[m] if plans is not None else None
        money, currency, extra = None, None, {}
        if plan is not None and base[m].any():
            def bank_on(h, p, q=qc):
                net = h[:, 1, :] - h[:, 2, :] - q
                h[:, 1, :] = np.maximum(net, 0.0)
                h[:, 2, :] = np.maximum(-net, 0.0)
                p["peak_kw_kvar_net"] = p["peak_kw_kvar_net"] - q
                p["peak_kva_kvar_net"] = p["peak_kva_kvar_net"] - q
                p["peak_kva"] = np.maximum(np.hypot(p["peak_kva_kw"], p["peak_kva_kvar_net"]),
                                           np.hypot(p["peak_kw"], p["peak_kw_kvar_net"]))
                p["peak_kvar"] = np.maximum(p["peak_kvar"] - q, 0.0)
                return h, p
            before = _month_charges(panel, m, plan, base[m], s)
            after = _month_charges(panel, m, plan, base[m], s, bank_on)
            lead_keys = [k for k in plan.leading_keys if k in after.amounts]
            money = float(sum(after.amounts[k][0] - before.amounts[k][0] for k in lead_keys))
            currency = plan.tariff.currency
            extra = {"tariff": plan.tariff.name, "leading_clauses": lead_keys,
                     "month_total_change": _money(float(after.total[0] - before.total[0]))}
        text = (f"Light load leading in {100 * recent_share[m]:.0f} % of its intervals since {day} "
                f"(before: {100 * base_share[m]:.0f} %), about {qc:.0f} kvar of capacitors that stay on — a bank "
                f"or step stuck on? Over-voltage at light load is a risk")
        if money:
            text += f"; the leading charges cost about {_fmt_money(money, currency)} a month"
        elif plan is not None and not plan.leading_keys:
            text += f"; {plan.tariff.name} does not charge leading energy"
        out.append(Finding(
            meter=panel.meters[m], kind="leading_at_light_load", since=panel.day_start_utc(m, col),
            severity=SEVERITY["leading_at_light_load"], money_per_month=_money(money), currency=currency,
            message=text + ".",
            figures={"leading_share": _r(recent_share[m]), "leading_share_before": _r(base_share[m]),
                     "light_load_kvar_net_before": round(net_before, 2), "light_load_kvar_net": round(net_now, 2),
                     "kvar_left_on": round(qc, 2), "first_day": day, **extra}))
    return Evaluation("leading_at_light_load", evaluated, out)


# --------------------------------------------------------------------------------------------
# projected_charge
# --------------------------------------------------------------------------------------------
def _periods_around(as_of_day: np.datetime64, tz: str, billing_day: int | None) -> tuple[BillingPeriod, BillingPeriod]:
    """The open billing period containing the local date and the one before it."""
    d = pd.Timestamp(as_of_day).tz_localize(tz)
    open_ = billing_periods(d, d, tz, billing_day=billing_day)[0]
    prev_day = pd.Timestamp(open_.start - pd.Timedelta(days=1)).tz_localize(tz)
    prev = billing_periods(prev_day, prev_day, tz, billing_day=billing_day)[0]
    return open_, prev


def _largest(daily: dict, use: np.ndarray) -> dict:
    """A period's peaks from candidate days ``(K, n)``: the largest kW with the kvar of that
    same interval, the largest kVA and kvar; NaN where no day is used."""
    K = use.shape[0]
    kw = np.where(use, daily["peak_kw"], -np.inf)
    at = np.argmax(kw, axis=1)
    top = kw.max(axis=1)
    out = {"peak_kw": top, "peak_kw_kvar_net": daily["peak_kw_kvar_net"][np.arange(K), at]}
    for k in ("peak_kva", "peak_kvar"):
        out[k] = np.where(use, daily[k], -np.inf).max(axis=1)
    return {k: np.where(np.isfinite(top), v, np.nan) for k, v in out.items()}


def _cells(hourly: np.ndarray) -> np.ndarray:
    """(K, n days, 3, 24) -> (K, 3, n * 24) hour cells in time order."""
    K, n = hourly.shape[:2]
    return hourly.transpose(0, 2, 1, 3).reshape(K, 3, n * 24)


@dataclass(frozen=True)
class Projection:
    """The open billing period of one meter: charges so far, projected to its end, and the
    period before as it happened (each a dict of charges plus ``reactive_total``, ``total`` and
    the tariff-basis ``billing_pf``)."""

    meter: str
    period: BillingPeriod
    previous: BillingPeriod
    tariff: str
    currency: str
    so_far: dict
    projected: dict
    before: dict
    previous_coverage: float
    data_until: str
    thresholds: tuple

    @property
    def reactive_at_previous_rate(self) -> float:
        return self.before["reactive_total"] / self.previous.days * self.period.days

    def to_dict(self) -> dict:
        return {"period": self.period.label, "period_start": self.period.start.isoformat(),
                "period_end": self.period.end.isoformat(), "tariff": self.tariff, "currency": self.currency,
                "so_far": self.so_far, "projected": self.projected,
                "previous": {"period": self.previous.label, **self.before},
                "previous_coverage": _r(self.previous_coverage, 4),
                "reactive_at_previous_rate": _money(self.reactive_at_previous_rate),
                "thresholds": [{"key": t["key"], "threshold_pf": _r(t["pf"]),
                                "projected_pf": self.projected["billing_pf"], "so_far_pf": self.so_far["billing_pf"],
                                "below": bool(self.projected["billing_pf"] is not None
                                              and self.projected["billing_pf"] < t["pf"])}
                               for t in self.thresholds],
                "data_until": self.data_until}


def _charges_of(ch, i: int) -> dict:
    out = _charge_dict(ch, i)
    out["reactive_total"] = _money(float(ch.reactive_total[i]))
    out["total"] = _money(float(ch.total[i]))
    out["billing_pf"] = _r(ch.billing_pf[i], 4)
    return out


def project_periods(panel: Panel, plans: Sequence[TariffPlan | None],
                    settings: CheckSettings | None = None) -> list[Projection | None]:
    """The open billing period's charges so far and projected to its end, per meter (None for a
    meter without a tariff, without data, or with too short a history).

    So far: the tariff on the hours with data up to the last interval (exact, as an audit of the
    period to date, apart from a demand ratchet). Projected: every later hour of the period
    filled with the mean of the same weekday and hour over the complete days of the four weeks
    up to the last interval; each later day's peaks with the mean daily peaks of its weekday.
    Meters sharing a tariff, billing day and time zone are priced together.
    """
    s = settings or CheckSettings()
    out: list[Projection | None] = [None] * panel.n_meters
    groups: dict[tuple, list[int]] = {}
    for m in range(panel.n_meters):
        plan = plans[m] if plans is not None else None
        if plan is not None and panel.last_start[m] >= 0:
            groups.setdefault((id(plan.tariff), plan.billing_day, panel.timezones[m]), []).append(m)
    for members in groups.values():
        for m, p in _project_group(panel, plans, np.asarray(members), s).items():
            out[m] = p
    return out


def projected_charge(panel: Panel, plans: Sequence[TariffPlan | None],
                     settings: CheckSettings | None = None,
                     projections: Sequence[Projection | None] | None = None) -> Evaluation:
    """An alert when the open period's projection (:func:`project_periods`) starts a reactive
    charge or raises it: the projected reactive charge above the last period's, per day, by
    ``charge_raise_fraction`` and by at least ``charge_min_share`` of the projected bill. Money a
    month: that increase, per month. Meters whose previous period is less than
    ``complete_fraction`` covered are not judged."""
    s = settings or CheckSettings()
    if projections is None:
        projections = project_periods(panel, plans, s)
    evaluated = np.zeros(panel.n_meters, dtype=bool)
    out = []
    for m, p in enumerate(projections):
        if p is None or not p.previous_coverage >= s.complete_fraction:
            continue
        evaluated[m] = True
        proj_r = p.projected["reactive_total"] or 0.0
        usual = p.reactive_at_previous_rate
        increase = proj_r - usual
        if not (proj_r > 0 and increase >= s.charge_raise_fraction * max(usual, 0.0)
                and increase >= s.charge_min_share * (p.projected["total"] or 0.0)):
            continue
        figures = p.to_dict()
        cur = p.currency
        what = "starts a reactive charge" if usual <= 0 else "raises the reactive charge"
        text = (f"The {p.period.label} projection {what}: {_fmt_money(proj_r, cur)} by {p.period.end} "
                f"against {_fmt_money(usual, cur)} at last period's rate")
        below = [t for t in figures["thresholds"] if t["below"]]
        if below:
            text += "; projected PF " + ", ".join(
                f"{t['projected_pf']:.3f} under {t['key']} {t['threshold_pf']:.3f}" for t in below)
        out.append(Finding(
            meter=p.meter, kind="projected_charge",
            since=pd.Timestamp(p.period.start).tz_localize(panel.timezones[m]).tz_convert("UTC"),
            severity=SEVERITY["projected_charge"],
            money_per_month=_money(increase * s.days_per_month / p.period.days),
            currency=cur, message=text + ".", cause=p.period.label, figures=figures))
    return Evaluation("projected_charge", evaluated, out)


def _project_group(panel: Panel, plans: Sequence[TariffPlan | None], members: np.ndarray,
                   s: CheckSettings) -> dict[int, Projection]:
    D = panel.n_days
    last = D - 1
    ok = _complete(panel, s)
    plan = plans[members[0]]
    tariff, tz = plan.tariff, panel.timezones[members[0]]
    first = panel.first_day[members[0]]  # the same for the whole group (one time zone)
    open_p, prev_p = _periods_around(first + np.timedelta64(last, "D"), tz, plan.billing_day)
    p0, p1 = panel.column_of(members[0], open_p.start), panel.column_of(members[0], open_p.end)
    q0 = panel.column_of(members[0], prev_p.start)
    if q0 < 0:
        return {}  # the panel does not reach back to the previous period
    cols_in = np.arange(p0, p1)
    n_cells = len(cols_in) * 24
    days = first + cols_in
    wd_days = (days.astype(np.int64) + 3) % 7
    # the cut: the local hour of the last interval start; cells before it happened
    wall = pd.to_datetime(panel.last_start[members], unit="s", utc=True).tz_convert(tz).tz_localize(None)
    cut_col = (wall.normalize().to_numpy().astype("datetime64[D]") - first).astype(np.int64)
    cut_cell = np.clip((cut_col - p0) * 24 + wall.hour.to_numpy() + 1, 0, n_cells)
    # the profile: complete days of the four weeks up to the cut day
    prof_days = np.zeros_like(ok)
    prof_days[members] = _cols_between(panel, cut_col - s.baseline_days + 1, cut_col + 1) & ok[members]
    enough = prof_days[members].sum(1) >= s.profile_min_days
    members, cut_col, cut_cell = members[enough], cut_col[enough], cut_cell[enough]
    if not len(members):
        return {}
    K = len(members)
    prof_h = np.nan_to_num(_weekday_profile(panel, prof_days[members], panel.hourly[members], rows=members))
    inside = (cols_in >= 0) & (cols_in < D)
    actual = np.zeros((K, len(cols_in), 3, 24))
    actual[:, inside] = panel.hourly[members][:, cols_in[inside]]
    happened = (np.arange(n_cells)[None, :] < cut_cell[:, None])[:, None, :]
    so_far_cells = np.where(happened, _cells(actual), 0.0)
    full_cells = np.where(happened, _cells(actual), _cells(prof_h[:, wd_days]))
    # peaks: actual days up to the cut, then the weekday means of the days still to come
    daily = {k: np.zeros((K, len(cols_in))) for k in pricing.PEAKS}
    expect = {}
    for k in pricing.PEAKS:
        daily[k][:, inside] = panel.cols[k][members][:, cols_in[inside]]
        expect[k] = np.nan_to_num(_weekday_profile(panel, prof_days[members], panel.cols[k][members],
                                                   rows=members))[:, wd_days]
    had = np.zeros((K, len(cols_in)), dtype=bool)
    had[:, inside] = panel.present[members][:, cols_in[inside]]
    had &= cols_in[None, :] <= cut_col[:, None]
    cut_day_done = (cut_cell % 24 == 0) & (cut_cell > 0)
    to_come = (cols_in[None, :] > cut_col[:, None]) | ((cols_in[None, :] == cut_col[:, None]) & ~cut_day_done[:, None])
    both = {k: np.concatenate([daily[k], expect[k]], axis=1) for k in pricing.PEAKS}
    cal = pricing.hour_cells(days, tz, tariff)
    ch_now = pricing.charges(tariff, pricing.quantities(tariff, cal, so_far_cells, _largest(daily, had)))
    ch_end = pricing.charges(tariff, pricing.quantities(
        tariff, cal, full_cells, _largest(both, np.concatenate([had, to_come], axis=1))))
    # the period before, as it happened
    prev_cols = np.arange(q0, p0)
    prev_daily = {k: panel.cols[k][members][:, prev_cols] for k in pricing.PEAKS}
    prev_q = pricing.quantities(tariff, pricing.hour_cells(first + prev_cols, tz, tariff),
                                _cells(panel.hourly[members][:, prev_cols]),
                                _largest(prev_daily, panel.present[members][:, prev_cols]))
    ch_prev = pricing.charges(tariff, prev_q)
    prev_cover = _div(panel.cols["intervals"][members][:, prev_cols].sum(1),
                      panel.cols["expected"][members][:, prev_cols].sum(1))
    out = {}
    for i, m in enumerate(members):
        data_until = pd.Timestamp(int(panel.last_start[m]) + 60 * int(panel.interval_minutes[m]), unit="s", tz="UTC")
        out[int(m)] = Projection(
            meter=panel.meters[m], period=open_p, previous=prev_p, tariff=tariff.name, currency=tariff.currency,
            so_far=_charges_of(ch_now, i), projected=_charges_of(ch_end, i), before=_charges_of(ch_prev, i),
            previous_coverage=float(prev_cover[i]), data_until=data_until.tz_convert(tz).isoformat(),
            thresholds=tuple(plans[m].thresholds))
    return out


# --------------------------------------------------------------------------------------------
def run_checks(panel: Panel, plans: Sequence[TariffPlan | None] | None = None,
               settings: CheckSettings | None = None,
               anchors: Sequence[Anchor] | None = None) -> list[Evaluation]:
    """Every check on ``panel``; ``data_quality`` skips meters whose data stopped."""
    s = settings or CheckSettings()
    plans = list(plans) if plans is not None else [None] * panel.n_meters
    stopped = data_stopped(panel, s)
    stopped_mask = np.isin(np.asarray(panel.meters, dtype=object), [f.meter for f in stopped.findings])
    return [
        stopped,
        data_quality(panel, s, skip=stopped_mask),
        multiplier_change(panel, s, plans, anchors),
        correction_loss(panel, s, plans, anchors),
        leading_at_light_load(panel, s, plans, anchors),
        projected_charge(panel, plans, s),
    ]
