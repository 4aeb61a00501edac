"""Timestamp parsing shared by the readers: ISO 8601 with offsets, or local wall time.

Local wall time is turned into UTC by a :class:`WallClock`, one per file, which keeps what it
has seen of each meter from one chunk to the next: the repeated autumn hour is resolved by the
order of a meter's rows wherever the reader's chunk boundaries fall.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from auditor.errors import InputError, Problem
from auditor.ingest.frame import MAX_PROBLEMS, check_window

_OFFSET_RE = r"(?:Z|[+-]\d{2}(?::?\d{2})?)$"
# Wall times are checked against the plausible window before they are localised (pandas cannot
# place a local time in year 10000); UTC offsets reach 14 hours, so a day of margin is enough.
_LOCAL_MARGIN = 2 * 86_400
# The wall times of one repeated hour lie within an hour of each other (two at most where a zone
# steps back by two hours, which no zone does today).
_REPEATED_SPAN = 3_600


def _bad_cells(raw: pd.Series, parsed: pd.Series, lines: np.ndarray, column: str, file: str, what: str):
    bad = np.flatnonzero(parsed.isna().to_numpy())
    if len(bad):
        raise InputError(file, [Problem(f"{what}: {str(raw.iloc[i])[:40]!r}", int(lines[i]), column)
                                for i in bad[:MAX_PROBLEMS]])


def parse_iso(raw: pd.Series, lines: np.ndarray, column: str, file: str,
              timezone: str | None, meters: np.ndarray | None = None, *,
              clock: WallClock | None = None, window: tuple[int, int] | None = None) -> np.ndarray:
    """UTC epoch seconds from ISO 8601 strings.

    Strings with a UTC offset are exact. Strings without one are local wall time in ``timezone``
    (an error without it), turned into UTC by ``clock`` (a :class:`WallClock` the reader keeps
    for the whole file; a one-chunk clock when none is given): the repeated autumn hour is
    resolved by file order per meter, a spring-forward time that does not exist is an error
    naming the line. ``window`` (plausible interval starts) is checked here for every string.
    """
    try:
        # Fast path: every string carries the same offset (or none): one C-level parse, which
        # also ignores surrounding blanks.
        parsed = pd.to_datetime(raw, format="ISO8601")
        uniform = True
    except (ValueError, TypeError, OverflowError):
        uniform = False
    if not (uniform and isinstance(parsed.dtype, pd.DatetimeTZDtype)):
        # the slower paths look at the text itself
        raw = raw.astype("string").str.strip()
    if uniform and parsed.isna().any():
        # pandas reads "NaN", "NaT", "null" as a missing time: never a timestamp here
        _bad_cells(raw, parsed, lines, column, file, "not an ISO 8601 timestamp")
    if uniform and isinstance(parsed.dtype, pd.DatetimeTZDtype):
        out = parsed.dt.tz_convert("UTC").dt.as_unit("s").astype("int64").to_numpy()
        if window is not None:
            check_window(out, lines, column, file, window)
        return out
    if uniform:
        # naive: wall time
        return _wall(parsed, lines, column, file, timezone, raw, meters, clock, window)
    has_offset = raw.str.contains(_OFFSET_RE, regex=True).fillna(False).to_numpy()
    if has_offset.all():
        parsed = pd.to_datetime(raw, format="ISO8601", utc=True, errors="coerce")
        _bad_cells(raw, parsed, lines, column, file, "not an ISO 8601 timestamp")
        out = parsed.dt.as_unit("s").astype("int64").to_numpy()
        if window is not None:
            check_window(out, lines, column, file, window)
        return out
    if has_offset.any():
        i = int(np.flatnonzero(~has_offset)[0])
        raise InputError(file, Problem(
            f"timestamp {str(raw.iloc[i])!r} has no UTC offset while others in the file have one",
            int(lines[i]), column))
    parsed = pd.to_datetime(raw, format="ISO8601", errors="coerce")
    _bad_cells(raw, parsed, lines, column, file, "not an ISO 8601 timestamp")
    return _wall(parsed, lines, column, file, timezone, raw, meters, clock, window)


def _wall(parsed, lines, column, file, timezone, raw, meters, clock, window) -> np.ndarray:
    if clock is not None:
        return clock.to_utc(parsed, lines, column, raw, meters)
    one = WallClock(timezone, file, window)
    out = one.to_utc(parsed, lines, column, raw, meters)
    one.finish()
    return out


def localise(naive: pd.Series, lines: np.ndarray, column: str, file: str, timezone: str | None,
             raw: pd.Series | None = None, meters: np.ndarray | None = None) -> np.ndarray:
    """UTC epoch seconds from naive local wall times of one whole file (see :class:`WallClock`)."""
    clock = WallClock(timezone, file)
    out = clock.to_utc(naive, lines, column, raw, meters)
    clock.finish()
    return out


@dataclass
class _OpenRun:
    """A meter's run of repeated-hour wall times that reached the end of a chunk."""

    switched: bool  # the second pass through the repeated hour has begun
    last_wall: int  # the run's last wall time, epoch-like seconds
    line: int  # line of the run's first row
    column: str
    shown: str


class WallClock:
    """Local wall time → UTC epoch seconds for one file, DST-aware, chunk after chunk.

    A wall time that does not exist (clocks go forward) is an error naming its line. A wall time
    that occurs twice (clocks go back) is resolved by the order of the meter's rows: within a run
    of such times, rows up to the first step back in wall time are the first pass (daylight
    time), rows from it on the second (standard time); a run with no step back, or with two,
    cannot be resolved and is an error naming its first line. A run still open at the end of a
    chunk continues into the next one, so where the reader's chunk boundaries fall does not
    matter; :meth:`finish` closes the runs still open at the end of the file.
    """

    def __init__(self, timezone: str | None, file: str, window: tuple[int, int] | None = None):
        self.timezone = timezone
        self.file = file
        self.window = window
        self.tz = _zone(timezone, file) if timezone is not None else None
        self.open: dict[object, _OpenRun] = {}

    def to_utc(self, naive, lines: np.ndarray, column: str, raw: pd.Series | None = None,
               meters: np.ndarray | None = None) -> np.ndarray:
        file = self.file
        shown = raw if raw is not None else pd.Series(naive)
        if self.tz is None:
            raise InputError(file, Problem(
                f"timestamp {str(shown.iloc[0])!r} has no UTC offset: the time zone of its local wall time "
                "(e.g. Europe/Berlin) is needed", int(lines[0]), column, cli_hint="give --timezone ZONE"))
        idx = pd.DatetimeIndex(naive)
        wall = idx.as_unit("s").asi8
        if self.window is not None:
            check_window(wall, lines, column, file, self.window, margin=_LOCAL_MARGIN, shown=shown.to_numpy())
        n = len(idx)
        first = idx.tz_localize(self.tz, ambiguous=np.ones(n, bool), nonexistent="NaT")
        missing = np.asarray(first.isna())
        if missing.any():
            i = int(np.flatnonzero(missing)[0])
            raise InputError(file, Problem(f"local time {idx[i]} does not exist in {self.timezone} (clocks go "
                                           "forward that day)", int(lines[i]), column))
        second = idx.tz_localize(self.tz, ambiguous=np.zeros(n, bool), nonexistent="NaT")
        a = first.as_unit("s").asi8
        b = second.as_unit("s").asi8
        out = a.copy()
        ambiguous = a != b
        if not ambiguous.any() and not self.open:
            return out
        if meters is None:
            codes, keys = np.zeros(n, dtype=np.int64), np.array([None], dtype=object)
        else:
            codes, keys = pd.factorize(np.asarray(meters, dtype=object))
        wanted = set(np.unique(codes[ambiguous]).tolist())
        key_pos = {k: c for c, k in enumerate(keys)}
        wanted |= {key_pos[k] for k in self.open if k in key_pos}
        for c in sorted(wanted):
            rows = np.flatnonzero(codes == c)
            self._resolve(keys[c], rows, ambiguous[rows], wall, a, b, out, lines, column, shown)
        return out

    def _resolve(self, key, rows, amb, wall, a, b, out, lines, column, shown) -> None:
        padded = np.r_[0, amb.astype(np.int8), 0]
        edges = np.flatnonzero(np.diff(padded))
        runs = []
        for s, e in zip(edges[::2].tolist(), edges[1::2].tolist(), strict=True):
            # a forward jump of more than an hour starts another day's repeated hour
            cuts = (np.flatnonzero(np.diff(wall[rows[s:e]]) > _REPEATED_SPAN) + 1 + s).tolist()
            runs += list(zip([s, *cuts], [*cuts, e], strict=True))
        prior = self.open.pop(key, None)
        if prior is not None and (not runs or runs[0][0] != 0
                                  or wall[rows[0]] - prior.last_wall > _REPEATED_SPAN):
            self._close(prior)  # the meter's next row is past the repeated hour
            prior = None
        for s, e in runs:
            r = rows[s:e]
            w = wall[r]
            back = np.r_[False, w[1:] <= w[:-1]]
            switched = False
            if s == 0 and prior is not None:
                back[0] = w[0] <= prior.last_wall
                switched = prior.switched
                line, col, text = prior.line, prior.column, prior.shown
            else:
                line, col, text = int(lines[r[0]]), column, str(shown.iloc[r[0]])
            passes = np.cumsum(back) + int(switched)
            if (passes >= 2).any():
                i = int(np.flatnonzero(passes >= 2)[0])
                self._fail(int(lines[r[i]]), column, str(shown.iloc[r[i]]), "step back twice")
            out[r] = np.where(passes == 0, a[r], b[r])
            run = _OpenRun(bool(passes[-1] > 0), int(w[-1]), line, col, text)
            if e == len(rows):
                self.open[key] = run  # may go on in the next chunk
            else:
                self._close(run)

    def _close(self, run: _OpenRun) -> None:
        if not run.switched:
            self._fail(run.line, run.column, run.shown, "do not show which is which")

    def _fail(self, line: int, column: str, shown: str, why: str) -> None:
        raise InputError(self.file, Problem(
            f"local time {shown[:40]!r} occurs twice in {self.timezone} (clocks go back) and the rows "
            f"{why}; export with UTC offsets", line, column))

    def finish(self) -> None:
        """End of the file: a repeated-hour run that never stepped back cannot be placed."""
        runs, self.open = list(self.open.values()), {}
        for run in runs:
            self._close(run)


def _zone(timezone: str, file: str | None):
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    try:
        return ZoneInfo(timezone)
    except (ZoneInfoNotFoundError, ValueError):
        raise InputError(file, Problem(f"unknown time zone {timezone!r} (use an IANA name such as "
                                       "Europe/Paris or America/Chicago)")) from None
