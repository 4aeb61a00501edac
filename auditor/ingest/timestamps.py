"""Timestamp parsing shared by the readers: ISO 8601 with offsets, or local wall time."""
from __future__ import annotations

import numpy as np
import pandas as pd

from auditor.errors import InputError, Problem
from auditor.ingest.frame import MAX_PROBLEMS

_OFFSET_RE = r"(?:Z|[+-]\d{2}(?::?\d{2})?)$"


def _bad_cells(raw: pd.Series, parsed: pd.Series, lines: np.ndarray, column: str, file: str, what: str):
    bad = np.flatnonzero(parsed.isna().to_numpy())
    if len(bad):
        raise InputError(file, [Problem(f"{what}: {str(raw.iloc[i])[:40]!r}", int(lines[i]), column)
                                for i in bad[:MAX_PROBLEMS]])


def parse_iso(raw: pd.Series, lines: np.ndarray, column: str, file: str,
              timezone: str | None, meters: np.ndarray | None = None) -> np.ndarray:
    """UTC epoch seconds from ISO 8601 strings.

    Strings with a UTC offset are exact. Strings without one are local wall time in ``timezone``
    (an error without it); a repeated autumn hour is resolved by file order (per meter when
    ``meters`` is given), a spring-forward time that does not exist is an error naming the line.
    """
    try:
        # Fast path: every string carries the same offset (or none): one C-level parse, which
        # also ignores surrounding blanks.
        parsed = pd.to_datetime(raw, format="ISO8601")
        uniform = True
    except (ValueError, TypeError):
        uniform = False
    if not (uniform and isinstance(parsed.dtype, pd.DatetimeTZDtype)):
        # the slower paths look at the text itself
        raw = raw.astype("string").str.strip()
    if uniform and parsed.isna().any():
        # pandas reads "NaN", "NaT", "null" as a missing time: never a timestamp here
        _bad_cells(raw, parsed, lines, column, file, "not an ISO 8601 timestamp")
    if uniform and isinstance(parsed.dtype, pd.DatetimeTZDtype):
        return parsed.dt.tz_convert("UTC").dt.as_unit("s").astype("int64").to_numpy()
    if uniform:
        # naive: wall time
        return localise(parsed, lines, column, file, timezone, raw, meters)
    has_offset = raw.str.contains(_OFFSET_RE, regex=True).fillna(False).to_numpy()
    if has_offset.all():
        parsed = pd.to_datetime(raw, format="ISO8601", utc=True, errors="coerce")
        _bad_cells(raw, parsed, lines, column, file, "not an ISO 8601 timestamp")
        return parsed.dt.as_unit("s").astype("int64").to_numpy()
    if has_offset.any():
        i = int(np.flatnonzero(~has_offset)[0])
        raise InputError(file, Problem(
            f"timestamp {str(raw.iloc[i])!r} has no UTC offset while others in the file have one",
            int(lines[i]), column))
    parsed = pd.to_datetime(raw, format="ISO8601", errors="coerce")
    _bad_cells(raw, parsed, lines, column, file, "not an ISO 8601 timestamp")
    return localise(parsed, lines, column, file, timezone, raw, meters)


def localise(naive: pd.Series, lines: np.ndarray, column: str, file: str, timezone: str | None,
             raw: pd.Series | None = None, meters: np.ndarray | None = None) -> np.ndarray:
    """UTC epoch seconds from naive local wall times, DST-aware, resolved in file order."""
    if timezone is None:
        i = 0
        shown = str(raw.iloc[i]) if raw is not None else str(naive.iloc[i])
        raise InputError(file, Problem(
            f"timestamp {shown!r} has no UTC offset; give --timezone (e.g. Europe/Berlin) to read "
            "local wall time", int(lines[i]), column))
    tzinfo = _zone(timezone, file)
    naive = pd.Series(pd.DatetimeIndex(naive), index=None)
    out = np.empty(len(naive), dtype="int64")
    groups = [np.arange(len(naive))] if meters is None else [
        np.flatnonzero(meters == m) for m in pd.unique(meters)]
    for idx in groups:
        values = pd.DatetimeIndex(naive.iloc[idx])
        try:
            # "infer" resolves the repeated autumn hour by the order of the rows
            local = values.tz_localize(tzinfo, ambiguous="infer", nonexistent="raise")
        except Exception as exc:  # pytz-style errors from pandas carry no line: find it ourselves
            raise InputError(file, _dst_problem(values, idx, lines, column, timezone, exc)) from None
        out[idx] = local.tz_convert("UTC").as_unit("s").asi8
    return out


def _zone(timezone: str, file: str):
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    try:
        return ZoneInfo(timezone)
    except (ZoneInfoNotFoundError, ValueError):
        raise InputError(file, Problem(f"unknown time zone {timezone!r} (use an IANA name such as "
                                       "Europe/Paris or America/Chicago)")) from None


def _dst_problem(values: pd.DatetimeIndex, idx, lines, column, timezone, exc) -> Problem:
    tz = _zone(timezone, None)
    nonexist = values.tz_localize(tz, ambiguous="NaT", nonexistent="NaT").isna()
    amb_first = values.tz_localize(tz, ambiguous=np.ones(len(values), bool), nonexistent="NaT")
    amb_second = values.tz_localize(tz, ambiguous=np.zeros(len(values), bool), nonexistent="NaT")
    missing = np.asarray(amb_first.isna() & amb_second.isna())
    if missing.any():
        i = int(np.flatnonzero(missing)[0])
        return Problem(f"local time {values[i]} does not exist in {timezone} (clocks go forward that "
                       "day)", int(lines[idx[i]]), column)
    ambiguous = np.flatnonzero(np.asarray(nonexist))
    i = int(ambiguous[0]) if len(ambiguous) else 0
    return Problem(f"local time {values[i]} occurs twice in {timezone} (clocks go back) and the rows "
                   "do not show which is which; export with UTC offsets", int(lines[idx[i]]), column)
