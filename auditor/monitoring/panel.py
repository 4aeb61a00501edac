"""The panel: day summaries of many meters laid out as (meters x days) arrays ending on the day of
``as_of``, which is what every check reads.

Column ``j`` of meter ``m`` is local date ``first_day[m] + j``; the last column is the local day
that contains ``as_of`` and holds only the intervals before ``as_of`` (a partial day). Days
without data are zero with ``present`` False; ``expected`` is filled for every day.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from auditor.monitoring.days import COUNTS, SCALARS, DaySummaries, expected_per_day

__all__ = ["Panel", "build_panel", "local_date"]


def local_date(ts: pd.Timestamp, tz: str) -> np.datetime64:
    """The local date of a UTC instant, as datetime64[D]."""
    return np.datetime64(pd.Timestamp(ts).tz_convert(tz).date(), "D")


@dataclass(frozen=True, eq=False)
class Panel:
    """Day summaries of M meters over D local days ending on the day of ``as_of``.

    Attributes
    ----------
    meters, timezones : tuple of str
    interval_minutes : numpy.ndarray of int, (M,)
    as_of : pandas.Timestamp
        The moment evaluated (UTC).
    first_day : numpy.ndarray of datetime64[D], (M,)
        Local date of column 0 for each meter.
    present : numpy.ndarray of bool, (M, D)
    cols : dict of str to numpy.ndarray (M, D)
        Every column of :class:`~auditor.monitoring.days.DaySummaries` as float (0 where no
        data; ``expected`` everywhere).
    hourly : numpy.ndarray, (M, D, 3, 24)
    last_start : numpy.ndarray of int, (M,)
        UTC epoch seconds of the last interval start before ``as_of`` (from the panel, or given
        by the caller when the last data is older than the panel); -1 when none is known.
    """

    meters: tuple[str, ...]
    timezones: tuple[str, ...]
    interval_minutes: np.ndarray
    as_of: pd.Timestamp
    first_day: np.ndarray
    present: np.ndarray
    cols: dict
    hourly: np.ndarray
    last_start: np.ndarray

    @property
    def n_meters(self) -> int:
        return len(self.meters)

    @property
    def n_days(self) -> int:
        return self.present.shape[1]

    @property
    def dates(self) -> np.ndarray:
        """(M, D) local dates."""
        return self.first_day[:, None] + np.arange(self.n_days)[None, :]

    @property
    def weekday(self) -> np.ndarray:
        """(M, D) weekday, Monday = 0 (1970-01-01 was a Thursday)."""
        return (self.dates.astype(np.int64) + 3) % 7

    def subset(self, rows) -> Panel:
        """The panel of the meters at positions ``rows`` only."""
        rows = np.asarray(rows, dtype=np.int64)
        return Panel(tuple(self.meters[i] for i in rows), tuple(self.timezones[i] for i in rows),
                     self.interval_minutes[rows], self.as_of, self.first_day[rows], self.present[rows],
                     {k: v[rows] for k, v in self.cols.items()}, self.hourly[rows], self.last_start[rows])

    def day_start_utc(self, m: int, col: int) -> pd.Timestamp:
        """UTC instant of local midnight starting column ``col`` of meter ``m``."""
        d = pd.Timestamp(self.first_day[m] + np.timedelta64(int(col), "D"))
        return d.tz_localize(self.timezones[m], ambiguous=True, nonexistent="shift_forward").tz_convert("UTC")

    def column_of(self, m: int, day) -> int:
        """Column of a local date (may be negative or past the end)."""
        return int((np.datetime64(day, "D") - self.first_day[m]).astype(np.int64))


def build_panel(summaries: DaySummaries | Sequence[DaySummaries | tuple[DaySummaries, np.ndarray]],
                meters: Sequence[str], timezones: Sequence[str], interval_minutes: Sequence[int],
                as_of: pd.Timestamp, n_days: int, last_start: Sequence[int] | None = None) -> Panel:
    """Lay ``summaries`` (meter codes index ``meters``) out as a panel of ``n_days`` days ending
    on each meter's local day of ``as_of``. Rows outside the window are ignored. Several parts
    may be given (each optionally with a mask of the rows to use); a later part's day replaces
    an earlier one's."""
    as_of = pd.Timestamp(as_of)
    if as_of.tzinfo is None:
        as_of = as_of.tz_localize("UTC")
    as_of = as_of.tz_convert("UTC")
    M, D = len(meters), int(n_days)
    today = {tz: local_date(as_of, tz) for tz in set(timezones)}
    first = np.array([today[tz] - np.timedelta64(D - 1, "D") for tz in timezones],
                     dtype="datetime64[D]") if M else np.zeros(0, dtype="datetime64[D]")
    present = np.zeros((M, D), dtype=bool)
    cols = {k: np.zeros((M, D)) for k in (*COUNTS, *SCALARS, "first_start", "last_start")}
    hourly = np.zeros((M, D, 3, 24))
    parts = [summaries] if isinstance(summaries, DaySummaries) else list(summaries)
    for part in parts:
        part, use = part if isinstance(part, tuple) else (part, None)
        if not len(part):
            continue
        m = part.meter
        col = (part.day - first[m]).astype(np.int64)
        ok = (col >= 0) & (col < D)
        if use is not None:
            ok &= use
        m, col = m[ok], col[ok]
        present[m, col] = True
        for k in cols:
            cols[k][m, col] = part.columns[k][ok]
        hourly[m, col] = part.hourly[ok]
    expected: dict[tuple, np.ndarray] = {}
    for i, tz in enumerate(timezones):
        key = (tz, int(interval_minutes[i]))
        if key not in expected:
            expected[key] = expected_per_day(first[i] + np.arange(D), tz, int(interval_minutes[i]))
        cols["expected"][i] = expected[key]
    last = np.where(present, cols["last_start"], -1).max(axis=1) if D else np.full(M, -1)
    last = last.astype(np.int64)
    if last_start is not None:
        given = np.asarray(last_start, dtype=np.int64)
        last = np.where(last >= 0, last, given)
    return Panel(tuple(meters), tuple(timezones), np.asarray(interval_minutes, dtype=np.int64), as_of,
                 first, present, cols, hourly, last)
