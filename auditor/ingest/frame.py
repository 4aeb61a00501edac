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
