"""Validation of one file's canonical rows (the trade's VEE: validation, estimation, editing).

The pipeline streams a file: rows are grouped by meter as they are read, and each meter's rows
are validated as a whole with :func:`validate_meter`, so every rule sees all of a meter's rows
in the file wherever the reader's chunks began and ended.

Hard errors (the file is rejected, nothing stored): negative values, values beyond the
physical bound (below), timestamps outside the plausible window (below), duplicate timestamps
with different values, timestamps off the interval grid, mixed interval lengths, an interval
length that is not 5, 15, 30 or 60 minutes. (Non-numeric cells, unreadable timestamps and DST
problems are caught by the readers.)

Plausibility:

* **Timestamps** must lie in the window of :func:`auditor.ingest.frame.plausible_window`:
  from 1990-01-01 (``frame.EARLIEST``) to one day after the import.
* **Values**: an interval's energy, as the average power over the interval
  (kWh × 60 / interval minutes, kvarh likewise), must not exceed the meter's ``max_kw``:
  ``DEFAULT_MAX_KW`` (2,000,000 kW = 2 GW, i.e. 500,000 kWh in a quarter hour) unless the meter
  has a bound of its own (``auditor import --max-kw``, kept on the meter). The largest single
  industrial sites, an aluminium smelter or a data-centre campus, draw in the order of 1 GW
  (common practice, from memory), so the default only stops values no site can reach —
  1e23 kWh, a cell in the wrong unit by a factor of a million — and a tighter bound per meter
  turns on a sharper screen.

Findings that are normal in meter data are stored as data-quality flags and reported as
warnings, never silently: gaps, implausible spikes, estimated intervals, exact duplicate rows.
``strict`` turns spikes and duplicates into errors. ``estimate_gaps`` fills gaps, flagging every
filled value.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from auditor.errors import InputError, Problem
from auditor.ingest.frame import (
    ALLOWED_INTERVALS,
    MAX_PROBLEMS,
    VALUE_COLUMNS,
    check_window,
    fmt_epoch,
)

# A spike: an interval more than SPIKE_FACTOR times the meter's 99th percentile in the file.
# Common practice for a first screen; the threshold is deliberately loose so that real peaks pass.
SPIKE_FACTOR = 10.0
# A run of this many intervals at another allowed spacing is a change of interval length,
# not a gap.
MIXED_RUN = 8
# Gaps up to this many intervals are filled by straight-line interpolation; longer ones by the
# mean of the same time one week before and after where those exist (common practice).
LINEAR_FILL_MAX = 4
# The physical bound on an interval's average power, kW (module docstring).
DEFAULT_MAX_KW = 2_000_000.0
# Meter ids are stored in a column of this many characters.
MAX_METER_ID = 200


@dataclass
class QualityFinding:
    meter: str
    kind: str  # gap | spike | estimated | duplicate | filled
    start: int
    end: int  # exclusive, epoch seconds
    intervals: int
    detail: str


@dataclass
class MeterRows:
    """One meter's validated rows, sorted by start."""

    meter: str
    interval_minutes: int
    start: np.ndarray
    values: dict[str, np.ndarray]
    flags: np.ndarray  # int16 bit field (store.models FLAG_*)
    findings: list[QualityFinding] = field(default_factory=list)


def _fmt_utc(epoch: int) -> str:
    return fmt_epoch(epoch)


def check_meter_ids(names, lines_of_first: np.ndarray, file: str, column: str = "meter") -> None:
    """Meter ids must fit the store (≤ 200 characters) and hold no control characters."""
    problems = []
    for name, line in zip(names, lines_of_first, strict=True):
        text = str(name)
        if len(text) > MAX_METER_ID:
            problems.append(Problem(f"meter id of {len(text):,} characters (at most {MAX_METER_ID})",
                                    int(line), column))
        elif not text.isprintable():
            problems.append(Problem(f"meter id {text[:40]!r} holds control characters", int(line), column))
        if len(problems) >= MAX_PROBLEMS:
            break
    if problems:
        raise InputError(file, problems)


def validate_meter(meter: str, start: np.ndarray, values: dict[str, np.ndarray], estimated: np.ndarray,
                   lines: np.ndarray, file: str, *, interval_minutes: int | None = None, label: str = "start",
                   stored_interval: int | None = None, strict: bool = False, estimate_gaps: bool = False,
                   window: tuple[int, int] | None = None, max_kw: float | None = None
                   ) -> tuple[MeterRows, list[Problem]]:
    """Check all of one meter's rows in a file (any order) and return them sorted, with warnings."""
    from auditor.store.models import FLAG_ESTIMATED, FLAG_FILLED

    warnings: list[Problem] = []
    _check_negative(values, lines, file)
    if window is not None:
        check_window(start, lines, label, file, window)
    if len(start) > 1 and not (np.diff(start) > 0).all():
        order = np.lexsort((lines, start))
        start, lines, estimated = start[order], lines[order], estimated[order]
        values = {q: v[order] for q, v in values.items()}
    # exact duplicates: drop (warn); differing ones: error naming both lines
    dup = np.flatnonzero(np.diff(start) == 0) + 1
    if len(dup):
        differ = np.zeros(len(dup), bool)
        for v in values.values():
            a, b = v[dup - 1], v[dup]
            differ |= ~((a == b) | (np.isnan(a) & np.isnan(b)))
        bad = dup[differ]
        if len(bad):
            raise InputError(file, [Problem(
                f"duplicate interval {_fmt_utc(start[i])} for meter {meter} with different values "
                f"(first at line {lines[i - 1]})", int(lines[i]), label) for i in bad[:MAX_PROBLEMS]])
        msg = (f"{len(dup)} exact duplicate row(s) for meter {meter} ignored (first at line "
               f"{lines[dup[0]]})")
        if strict:
            raise InputError(file, Problem(msg, int(lines[dup[0]]), label))
        warnings.append(Problem(msg, int(lines[dup[0]])))
        keep = np.ones(len(start), bool)
        keep[dup] = False
        start, lines, estimated = start[keep], lines[keep], estimated[keep]
        values = {q: v[keep] for q, v in values.items()}

    minutes = _interval_of(meter, start, lines, interval_minutes, stored_interval, file, label)
    step = minutes * 60
    if label == "end":
        start = start - step
    _check_bounds(meter, values, lines, minutes, max_kw, file)
    # grid: quarter-hour aligned (every real UTC offset is a multiple of 15 min) and one phase
    base = min(step, 900)
    off = np.flatnonzero(start % base != 0)
    if not len(off) and step > 900:
        phase = start % step
        off = np.flatnonzero(phase != np.bincount((phase // 900).astype(int)).argmax() * 900)
    if len(off):
        raise InputError(file, [Problem(
            f"timestamp {_fmt_utc(start[i] + (step if label == 'end' else 0))} is off the "
            f"{minutes}-minute interval grid", int(lines[i]), label) for i in off[:MAX_PROBLEMS]])
    diffs = np.diff(start)
    _check_mixed(meter, diffs, lines, minutes, file, label)

    flags = np.where(estimated, FLAG_ESTIMATED, 0).astype("int16")
    rows = MeterRows(meter, minutes, start, values, flags)
    _gap_findings(rows, diffs, step)
    _spike_findings(rows, lines, strict, file, warnings)
    _estimated_findings(rows)
    if estimate_gaps and any(f.kind == "gap" for f in rows.findings):
        _fill_gaps(rows, FLAG_FILLED)
    for f in rows.findings:
        if f.kind in ("gap", "spike", "filled"):
            warnings.append(Problem(f"meter {meter}: {f.detail}"))
    est_count = int((rows.flags & FLAG_ESTIMATED != 0).sum())
    if est_count:
        warnings.append(Problem(f"meter {meter}: {est_count} interval(s) flagged estimated in the file"))
    return rows, warnings


def _check_negative(values: dict[str, np.ndarray], lines: np.ndarray, file: str) -> None:
    problems: list[Problem] = []
    for q in VALUE_COLUMNS:
        v = values[q]
        neg = np.flatnonzero(v < 0)
        for i in neg[:MAX_PROBLEMS]:
            problems.append(Problem(f"negative value {v[i]:g}; energy registers count up (export "
                                    "energy goes in kwh_received)", int(lines[i]), q))
    if problems:
        raise InputError(file, sorted(problems, key=lambda p: p.line or 0)[:MAX_PROBLEMS])


def _check_bounds(meter: str, values: dict[str, np.ndarray], lines: np.ndarray, minutes: int,
                  max_kw: float | None, file: str) -> None:
    """Every interval's average power within the meter's physical bound (module docstring)."""
    bound_kw = max_kw or DEFAULT_MAX_KW
    limit = bound_kw * minutes / 60.0
    problems: list[Problem] = []
    for q in VALUE_COLUMNS:
        v = values[q]
        with np.errstate(invalid="ignore"):
            over = np.flatnonzero(v > limit)
        unit = "kvarh" if q.startswith("kvarh") else "kWh"
        for i in over[:MAX_PROBLEMS]:
            problems.append(Problem(
                f"{v[i]:g} {unit} in {minutes} minutes is above the plausible maximum for meter {meter} "
                f"({limit:,.0f} {unit}: {bound_kw:,.0f} kW on average, "
                f"{'its own bound' if max_kw else 'the default'}); if the meter really measures that much, "
                "raise the meter's own bound", int(lines[i]), q, cli_hint="import with --max-kw KW"))
    if problems:
        raise InputError(file, sorted(problems, key=lambda p: p.line or 0)[:MAX_PROBLEMS])


def _interval_of(meter, start, lines, given, stored, file, label) -> int:
    if given is not None:
        minutes = given
    elif len(start) >= 2:
        diffs = np.diff(start)
        diffs = diffs[diffs > 0]
        vals, counts = np.unique(diffs, return_counts=True)
        minutes = int(vals[counts.argmax()]) / 60
        if minutes not in ALLOWED_INTERVALS:
            i = int(np.flatnonzero(np.diff(start) == vals[counts.argmax()])[0]) + 1
            raise InputError(file, Problem(
                f"meter {meter}: rows are {minutes:g} minutes apart; interval length must be 5, 15, 30 "
                "or 60 minutes", int(lines[i]), label))
        minutes = int(minutes)
    elif stored:
        minutes = stored
    else:
        minutes = 15
    if stored and stored != minutes:
        raise InputError(file, Problem(
            f"mixed interval lengths: meter {meter} is stored at {stored}-minute intervals but this "
            f"file has {minutes}-minute intervals", int(lines[0]), label))
    return minutes


def _check_mixed(meter, diffs, lines, minutes, file, label) -> None:
    step = minutes * 60
    for other in ALLOWED_INTERVALS:
        o = other * 60
        if o == step:
            continue
        same = diffs == o
        if same.sum() < MIXED_RUN:
            continue
        # longest run of consecutive diffs at the other spacing
        padded = np.r_[0, same.astype(np.int8), 0]
        edges = np.flatnonzero(np.diff(padded))
        runs = edges[1::2] - edges[::2]
        if len(runs) and runs.max() >= MIXED_RUN:
            i = int(edges[::2][runs.argmax()]) + 1
            raise InputError(file, Problem(
                f"mixed interval lengths for meter {meter}: {other}-minute spacing from this line on, "
                f"{minutes}-minute elsewhere; split the file by interval length", int(lines[i]), label))


def _gap_findings(rows: MeterRows, diffs: np.ndarray, step: int) -> None:
    at = np.flatnonzero(diffs > step)
    for i in at[:10_000]:
        missing = int(diffs[i] // step) - 1
        g0 = int(rows.start[i] + step)
        rows.findings.append(QualityFinding(
            rows.meter, "gap", g0, int(rows.start[i + 1]), missing,
            f"gap of {missing} interval(s) from {_fmt_utc(g0)}"))


def _spike_findings(rows: MeterRows, lines, strict, file, warnings) -> None:
    for q in ("kwh", "kvarh_lag", "kvarh_lead"):
        v = rows.values[q]
        if len(v) < 96:
            continue  # too short to judge
        nan = np.isnan(v)
        if nan.all():
            continue  # a channel the file does not have
        ref = np.percentile(v[~nan] if nan.any() else v, 99)
        if not np.isfinite(ref) or ref <= 0:
            continue
        hits = np.flatnonzero(v > SPIKE_FACTOR * ref)
        for i in hits[:1000]:
            msg = (f"implausible spike {v[i]:g} {q} at {_fmt_utc(rows.start[i])} (over {SPIKE_FACTOR:g}× "
                   f"the meter's 99th percentile {ref:.3g})")
            if strict:
                raise InputError(file, Problem(msg, int(lines[i]), q))
            rows.findings.append(QualityFinding(rows.meter, "spike", int(rows.start[i]),
                                                int(rows.start[i]) + rows.interval_minutes * 60, 1,
                                                f"line {lines[i]}: {msg}"))


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    padded = np.r_[0, mask.astype(np.int8), 0]
    edges = np.flatnonzero(np.diff(padded))
    return list(zip(edges[::2].tolist(), edges[1::2].tolist(), strict=True))


def _estimated_findings(rows: MeterRows) -> None:
    from auditor.store.models import FLAG_ESTIMATED

    step = rows.interval_minutes * 60
    for a, b in _runs((rows.flags & FLAG_ESTIMATED) != 0)[:10_000]:
        rows.findings.append(QualityFinding(rows.meter, "estimated", int(rows.start[a]),
                                            int(rows.start[b - 1]) + step, b - a,
                                            f"{b - a} estimated interval(s) from {_fmt_utc(rows.start[a])}"))


def _fill_gaps(rows: MeterRows, flag_filled: int) -> None:
    """Fill missing intervals (asked for at import: ``auditor import --estimate-gaps`` or the upload
    form); every filled value is flagged."""
    step = rows.interval_minutes * 60
    grid = np.arange(rows.start[0], rows.start[-1] + step, step)
    present = np.isin(grid, rows.start)
    week = 7 * 24 * 3600 // step
    new_vals = {}
    for q, v in rows.values.items():
        s = pd.Series(np.nan, index=grid)
        s[rows.start] = v
        if np.isnan(v).all():
            new_vals[q] = s.to_numpy()
            continue
        before = s.shift(week)
        after = s.shift(-week)
        weekly = pd.concat([before, after], axis=1).mean(axis=1)
        gap_len = _gap_lengths(present)
        filled = s.copy()
        long_gap = (~present) & (gap_len > LINEAR_FILL_MAX) & weekly.notna().to_numpy()
        filled[long_gap] = weekly[long_gap]
        filled = filled.interpolate(method="index", limit_area="inside")
        new_vals[q] = filled.to_numpy()
    flags = np.zeros(len(grid), dtype="int16")
    flags[present] = rows.flags
    flags[~present] |= flag_filled
    n_filled = int((~present).sum())
    rows.findings.append(QualityFinding(rows.meter, "filled", int(grid[0]), int(grid[-1]) + step, n_filled,
                                        f"{n_filled} missing interval(s) estimated (gaps filled as asked at import) and flagged"))
    rows.start, rows.values, rows.flags = grid, new_vals, flags


def _gap_lengths(present: np.ndarray) -> np.ndarray:
    out = np.zeros(len(present), dtype=np.int64)
    for a, b in _runs(~present):
        out[a:b] = b - a
    return out
