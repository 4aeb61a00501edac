"""The canonical frame every reader produces (see DEVELOPERS.md, "Data contracts")."""
from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from auditor.errors import InputError, Problem

VALUE_COLUMNS = ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received")
CANONICAL_COLUMNS = ("meter", "start", "kwh", "kvarh_lag", "kvarh_lead", "kwh_received", "estimated", "line")
ALLOWED_INTERVALS = (5, 15, 30, 60)
MAX_PROBLEMS = 50

# Plausible timestamps (README, "What is checked"): a screen for stray or mistyped dates. Interval
# data from before 1990 is rare enough that such a date is far more often a typing or export
# error than a reading (common practice); a reading cannot start later than a day after its
# import (a day of slack for clocks and time zones).
EARLIEST = "1990-01-01"
AHEAD_SECONDS = 86_400


@dataclass
class ReadInfo:
    """What a reader learnt about the file beside the rows."""

    format: str
    interval_minutes: int | None = None  # known from the layout (wide CSV, profile) or None: inferred
    source_units: dict[str, str] = field(default_factory=lambda: {
        "kwh": "kWh", "kvarh_lag": "kvarh", "kvarh_lead": "kvarh"})
    quantities: tuple[str, ...] = ("kwh", "kvarh_lag", "kvarh_lead")
    label: str = "start"  # "end": timestamps label the interval's end and are shifted once its length is known
    warnings: list[Problem] = field(default_factory=list)


@dataclass
class ReadOutput:
    info: ReadInfo
    chunks: Iterator[pd.DataFrame]


@dataclass(frozen=True)
class ReadOptions:
    timezone: str | None = None
    profile: object | None = None  # auditor.ingest.profile.Profile
    chunk_rows: int = 250_000
    # plausible interval starts, UTC epoch seconds (lowest, highest), as the pipeline passes
    # them (plausible_window()); None: only the years a reader can place in time (READABLE)
    window: tuple[int, int] | None = None

    def time_window(self) -> tuple[int, int]:
        return self.window if self.window is not None else READABLE


# The years any reader can place in time (local time zones, pandas' calendar), for readers used
# without a plausibility window.
READABLE = (int(np.datetime64("1900-01-01", "s").astype("int64")), int(np.datetime64("2200-01-01", "s").astype("int64")))


def plausible_window(earliest: str = EARLIEST, now: float | None = None) -> tuple[int, int]:
    """The (lowest, highest) plausible interval start in UTC epoch seconds: ``earliest`` at
    midnight UTC up to one day after ``now`` (default: the moment of the import)."""
    import time

    lo = int(np.datetime64(earliest, "s").astype("int64"))
    return lo, int(time.time() if now is None else now) + AHEAD_SECONDS


def fmt_epoch(epoch) -> str:
    """An epoch second as ``YYYY-MM-DD HH:MM UTC`` for messages; never fails, whatever the year."""
    try:
        value = float(epoch)
        if not np.isfinite(value) or abs(value) > 9e15:
            return f"{value:g} (epoch seconds)"
        text = str(np.datetime64(int(value), "s"))
        day, _, clock = text.partition("T")
        return f"{day} {clock[:5]} UTC"
    except (TypeError, ValueError, OverflowError):
        return f"{epoch!r} (epoch seconds)"


def window_text(window: tuple[int, int]) -> str:
    return f"{fmt_epoch(window[0])[:10]} to {fmt_epoch(window[1])[:16]} UTC"


def check_window(epochs: np.ndarray, lines: np.ndarray, column: str, file: str,
                 window: tuple[int, int], margin: int = 0, shown=None) -> None:
    """Reject interval starts outside the plausible window (README, "What is checked").

    ``epochs`` may be float (a reader's raw numbers) or int64; ``margin`` widens the window on
    both sides (wall times checked before localising are up to 14 hours off UTC); ``shown``
    gives the cell text to quote instead of the time.
    """
    lo, hi = window[0] - margin, window[1] + margin
    e = np.asarray(epochs)
    with np.errstate(invalid="ignore"):
        bad = ~((e >= lo) & (e <= hi))
    if not bad.any():
        return
    problems = []
    for i in np.flatnonzero(bad)[:MAX_PROBLEMS]:
        what = repr(str(shown[i])[:40]) if shown is not None else fmt_epoch(e[i])
        problems.append(Problem(f"timestamp {what} is outside the plausible range {window_text(window)} "
                                "(a stray or mistyped date)", int(lines[i]), column))
    raise InputError(file, problems)


def canonical(meter, start, kwh, kvarh_lag, kvarh_lead, kwh_received=None, estimated=None, line=None) -> pd.DataFrame:
    """Assemble a canonical frame from array-likes (``start`` in UTC epoch seconds)."""
    n = len(start)
    nan = np.full(n, np.nan)
    return pd.DataFrame({
        "meter": meter if not np.isscalar(meter) else np.repeat(str(meter), n),
        "start": np.asarray(start, dtype="int64"),
        "kwh": np.asarray(kwh, dtype="float64"),
        "kvarh_lag": np.asarray(kvarh_lag, dtype="float64"),
        "kvarh_lead": np.asarray(kvarh_lead, dtype="float64"),
        "kwh_received": nan if kwh_received is None else np.asarray(kwh_received, dtype="float64"),
        "estimated": np.zeros(n, bool) if estimated is None else np.asarray(estimated, dtype=bool),
        "line": np.arange(2, n + 2) if line is None else np.asarray(line, dtype="int64"),
    })


def numeric_column(values: pd.Series, lines: np.ndarray, column: str, file: str,
                   required: bool = True) -> np.ndarray:
    """Values as float64; a non-numeric or (when required) empty cell is an InputError naming it."""
    if values.dtype.kind in "fiu":
        out = values.to_numpy(dtype="float64")
        bad_empty = np.isnan(out) if required else np.zeros(len(out), bool)
        bad_text = np.zeros(len(out), bool)
    else:
        text = values.astype("string").str.strip()
        out = pd.to_numeric(text, errors="coerce").to_numpy(dtype="float64", na_value=np.nan)
        empty = text.isna().to_numpy() | (text == "").fillna(True).to_numpy()
        bad_text = np.isnan(out) & ~empty
        # "nan"/"inf" parse as numbers in pandas but are never a reading
        bad_text |= ~np.isfinite(out) & ~np.isnan(out)
        bad_text |= text.str.lower().isin(["nan", "inf", "-inf", "+inf", "infinity"]).fillna(False).to_numpy()
        bad_empty = empty if required else np.zeros(len(out), bool)
    if not np.isfinite(out[~np.isnan(out)]).all():
        bad_text |= np.isinf(out)
    problems = []
    for i in np.flatnonzero(bad_text)[:MAX_PROBLEMS]:
        problems.append(Problem(f"not a number: {str(values.iloc[i])[:40]!r}", int(lines[i]), column))
    for i in np.flatnonzero(bad_empty & ~bad_text)[:MAX_PROBLEMS]:
        problems.append(Problem("empty value", int(lines[i]), column))
    if problems:
        problems.sort(key=lambda p: p.line or 0)
        raise InputError(file, problems[:MAX_PROBLEMS])
    return out
