"""Day summaries: each local day of each meter reduced to the sums, peaks and hourly energies the
checks need, computed for many meters at once.

A nightly run then reads about seventy small rows per meter instead of weeks of intervals.
Everything here is a sum, a maximum or a count over a (meter, local day) group, so a billing
period's figures can be rebuilt exactly from its days: energy sums add up, the period's peak is
the largest daily peak, and every time-of-use window of a tariff is made of whole local hours,
so 24 hourly sums of kWh, lagging and leading kvarh price any window.

Input: a *long* reading frame (one row per meter interval; the interval frame of DEVELOPERS.md
with a ``meter`` code column and ``start`` in UTC epoch seconds) and, per meter code, its time
zone and interval length. No loop over intervals: groups are formed with ``numpy.unique`` and
reduced with ``bincount`` / ``reduceat``; time zones are handled one zone at a time.

References
----------
.. [1] IEEE Std 1459-2010, section 3.1.1 (P, Q, S = sqrt(P^2 + Q^2), PF = P / S).
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from auditor.quantities import local_bounds_utc

__all__ = ["DaySummaries", "SCALARS", "COUNTS", "PACKED", "PACKED_DTYPE", "summarise_days", "local_days", "expected_per_day"]

#: Hourly sums kept per day: kWh, lagging kvarh, leading kvarh (index of axis 1 of ``hourly``).
HOURLY = ("kwh", "kvarh_lag", "kvarh_lead")

#: Integer columns of a day summary.
COUNTS = ("intervals", "expected", "estimated", "light_intervals", "light_leading")

#: Float columns of a day summary (real units: kWh, kvarh; kW and kvar are interval averages).
SCALARS = (
    "kwh", "kvarh_lag", "kvarh_lead",
    # the kvar-kW relation: sums over intervals of kW, lagging kvar, kW^2, kW*kvar, kvar^2
    "kw_sum", "kvar_sum", "kw_sq_sum", "kw_kvar_sum", "kvar_sq_sum",
    # light load: the quarter of the day's intervals with the lowest kW
    "light_kw_sum", "light_kvar_net_sum",
    # peaks and what went with them
    "peak_kw", "peak_kw_kvar_net", "peak_kva", "peak_kva_kw", "peak_kva_kvar_net", "peak_kvar",
)

#: A day summary packed as one record (for storage): the local day (days since 1970-01-01),
#: the :data:`COUNTS`, :data:`SCALARS` and first/last interval start as float64, then the 72
#: hourly sums (kWh, lagging, leading kvarh; hours 0-23 each) as float32 — plenty for sums of
#: at most one hour, and it halves what a nightly run reads.
PACKED = ("day", *COUNTS, *SCALARS, "first_start", "last_start")
PACKED_DTYPE = np.dtype([("head", "<f8", (len(PACKED),)), ("hourly", "<f4", (72,))])

#: Light load is the lowest quarter of a day's intervals by kW (common practice for spotting a
#: capacitor bank left on when the plant is idle).
LIGHT_FRACTION = 0.25


@dataclass(frozen=True, eq=False)
class DaySummaries:
    """Day summaries of many meters.

    Attributes
    ----------
    meter : numpy.ndarray of int
        Meter code of each row (as given in the input).
    day : numpy.ndarray of datetime64[D]
        Local date of each row.
    columns : dict of str to numpy.ndarray
        :data:`COUNTS` (int64) and :data:`SCALARS` (float64), plus ``first_start`` and
        ``last_start`` (UTC epoch seconds of the first and last interval start of the day).
    hourly : numpy.ndarray
        ``(rows, 3, 24)``: kWh, lagging kvarh and leading kvarh per local hour of the day (the
        repeated autumn hour adds into its hour; the skipped spring hour stays zero).
    """

    meter: np.ndarray
    day: np.ndarray
    columns: dict
    hourly: np.ndarray

    def __len__(self) -> int:
        return len(self.meter)

    def packed(self) -> np.ndarray:
        """One :data:`PACKED_DTYPE` record per row (``.tobytes()`` of a record is what is stored)."""
        out = np.zeros(len(self), dtype=PACKED_DTYPE)
        if len(self):
            out["head"][:, 0] = self.day.astype(np.int64)
            for i, k in enumerate(PACKED[1:], start=1):
                out["head"][:, i] = self.columns[k]
            out["hourly"] = self.hourly.reshape(len(self), 72)
        return out

    @staticmethod
    def unpack(meter: np.ndarray, packed: bytes | np.ndarray) -> DaySummaries:
        """The inverse of :meth:`packed` (records, or their bytes one after another)."""
        rec = np.frombuffer(packed, dtype=PACKED_DTYPE) if isinstance(packed, bytes | bytearray) else packed
        head = rec["head"]
        cols = {}
        for i, k in enumerate(PACKED[1:], start=1):
            v = head[:, i]
            cols[k] = v.astype(np.int64) if k in COUNTS or k in ("first_start", "last_start") else v.copy()
        return DaySummaries(np.asarray(meter, dtype=np.int64), head[:, 0].astype(np.int64).astype("datetime64[D]"),
                            cols, rec["hourly"].astype(np.float64).reshape(-1, 3, 24))

    def take(self, rows) -> DaySummaries:
        return DaySummaries(self.meter[rows], self.day[rows], {k: v[rows] for k, v in self.columns.items()},
                            self.hourly[rows])

    @staticmethod
    def empty() -> DaySummaries:
        cols = {k: np.zeros(0, dtype=np.int64) for k in COUNTS}
        cols.update({k: np.zeros(0) for k in SCALARS})
        cols["first_start"] = np.zeros(0, dtype=np.int64)
        cols["last_start"] = np.zeros(0, dtype=np.int64)
        return DaySummaries(np.zeros(0, dtype=np.int64), np.zeros(0, dtype="datetime64[D]"), cols,
                            np.zeros((0, 3, 24)))


def local_days(start_utc: np.ndarray, tz: str) -> tuple[np.ndarray, np.ndarray]:
    """Local date (datetime64[D]) and local wall-clock hour (0-23) of UTC epoch seconds."""
    local = pd.to_datetime(np.asarray(start_utc, dtype=np.int64), unit="s", utc=True).tz_convert(tz)
    wall = local.tz_localize(None).to_numpy()
    day = wall.astype("datetime64[D]")
    hour = ((wall - day.astype("datetime64[ns]")) // np.timedelta64(1, "h")).astype(np.int64)
    return day, hour


def expected_per_day(days: np.ndarray, tz: str, interval_minutes: int) -> np.ndarray:
    """Intervals a complete meter records on each local date (92 or 100 quarter hours on a DST
    change day where the clock moves by an hour)."""
    days = np.asarray(days, dtype="datetime64[D]")
    if not len(days):
        return np.zeros(0, dtype=np.int64)
    uniq, inv = np.unique(days, return_inverse=True)
    dates = [pd.Timestamp(d).date() for d in uniq]
    nxt = [pd.Timestamp(d + np.timedelta64(1, "D")).date() for d in uniq]
    a = local_bounds_utc(dates, tz).as_unit("s").asi8
    b = local_bounds_utc(nxt, tz).as_unit("s").asi8
    return ((b - a) // (60 * int(interval_minutes))).astype(np.int64)[inv]


def summarise_days(readings: pd.DataFrame, timezones: Sequence[str],
                   interval_minutes: Sequence[int]) -> DaySummaries:
    """Summarise every (meter, local day) of ``readings``.

    Parameters
    ----------
    readings : pandas.DataFrame
        Columns ``meter`` (int code indexing ``timezones``), ``start`` (UTC epoch seconds),
        ``kwh``, ``kvarh_lag``, ``kvarh_lead`` (real units, multiplier applied) and
        ``estimated`` (bool). One row per meter interval; any order.
    timezones : sequence of str
        IANA time zone of each meter code (its site's).
    interval_minutes : sequence of int
        Interval length of each meter code.

    Returns
    -------
    DaySummaries
        One row per (meter, local day) that has at least one interval, sorted by meter and day.
    """
    if readings.empty:
        return DaySummaries.empty()
    meter = readings["meter"].to_numpy(dtype=np.int64)
    start = readings["start"].to_numpy(dtype=np.int64)
    n = len(meter)
    day = np.empty(n, dtype="datetime64[D]")
    hour = np.empty(n, dtype=np.int64)
    tz_of = np.asarray(list(timezones), dtype=object)
    minutes = np.asarray(list(interval_minutes), dtype=float)
    for tz in pd.unique(tz_of[np.unique(meter)]):
        codes = np.flatnonzero(tz_of == tz)
        sel = np.isin(meter, codes)
        day[sel], hour[sel] = local_days(start[sel], tz)

    day_no = day.astype(np.int64)
    order = np.lexsort((start, day_no, meter))
    meter, start, day, day_no, hour = meter[order], start[order], day[order], day_no[order], hour[order]
    kwh = readings["kwh"].to_numpy(dtype=float)[order]
    lag = readings["kvarh_lag"].to_numpy(dtype=float)[order]
    lead = readings["kvarh_lead"].to_numpy(dtype=float)[order]
    est = readings["estimated"].to_numpy(dtype=bool)[order] if "estimated" in readings else np.zeros(n, bool)

    new_group = np.ones(n, dtype=bool)
    new_group[1:] = (meter[1:] != meter[:-1]) | (day_no[1:] != day_no[:-1])
    starts = np.flatnonzero(new_group)
    g = np.cumsum(new_group) - 1
    groups = len(starts)
    counts = np.diff(np.append(starts, n))

    to_demand = 60.0 / minutes[meter]
    kw = kwh * to_demand
    kvar = lag * to_demand
    kvar_net = (lag - lead) * to_demand
    kva = np.hypot(kw, kvar_net)

    def total(x):
        return np.bincount(g, weights=x, minlength=groups)

    cols: dict[str, np.ndarray] = {}
    cols["intervals"] = counts.astype(np.int64)
    g_meter = meter[starts]
    g_day = day[starts]
    expected = np.zeros(groups, dtype=np.int64)
    for code in np.unique(g_meter):
        sel = g_meter == code
        expected[sel] = expected_per_day(g_day[sel], str(tz_of[code]), int(minutes[code]))
    cols["expected"] = expected
    cols["estimated"] = total(est.astype(float)).round().astype(np.int64)
    cols["kwh"] = total(kwh)
    cols["kvarh_lag"] = total(lag)
    cols["kvarh_lead"] = total(lead)
    cols["kw_sum"] = total(kw)
    cols["kvar_sum"] = total(kvar)
    cols["kw_sq_sum"] = total(kw * kw)
    cols["kw_kvar_sum"] = total(kw * kvar)
    cols["kvar_sq_sum"] = total(kvar * kvar)

    # rank of each interval's kW inside its day: the lowest quarter is "light load"
    by_kw = np.lexsort((kw, g))
    rank = np.arange(n) - starts[g[by_kw]]
    quarter = np.maximum(1, np.floor(counts * LIGHT_FRACTION).astype(np.int64))
    light = np.zeros(n, dtype=bool)
    light[by_kw] = rank < quarter[g[by_kw]]
    cols["light_intervals"] = total(light.astype(float)).round().astype(np.int64)
    cols["light_leading"] = total((light & (kvar_net < 0)).astype(float)).round().astype(np.int64)
    cols["light_kw_sum"] = total(np.where(light, kw, 0.0))
    cols["light_kvar_net_sum"] = total(np.where(light, kvar_net, 0.0))

    # the interval of the day's kW peak (the last of equal values) and of its kVA peak
    last_of_group = starts + counts - 1
    at_kw = by_kw[last_of_group]
    cols["peak_kw"] = kw[at_kw]
    cols["peak_kw_kvar_net"] = kvar_net[at_kw]
    by_kva = np.lexsort((kva, g))
    at_kva = by_kva[last_of_group]
    cols["peak_kva"] = kva[at_kva]
    cols["peak_kva_kw"] = kw[at_kva]
    cols["peak_kva_kvar_net"] = kvar_net[at_kva]
    cols["peak_kvar"] = np.maximum.reduceat(kvar, starts)
    cols["first_start"] = start[starts]
    cols["last_start"] = start[last_of_group]

    cell = g * 24 + hour
    hourly = np.stack([np.bincount(cell, weights=x, minlength=groups * 24).reshape(groups, 24)
                       for x in (kwh, lag, lead)], axis=1)
    return DaySummaries(g_meter, g_day, cols, hourly)
