"""The day-per-row wide CSV: one row per meter, local day and quantity.

Layout
------
::

    meter,date,quantity,unit,1,2,3,...,96
    PLANT-7,2024-03-30,kwh,kWh,12.5,12.1,...
    PLANT-7,2024-03-30,kvarh_lag,kvarh,6.0,5.8,...

* ``meter``, ``date`` and ``quantity`` are the first three columns, in that order. An optional
  ``unit`` column may follow them. Header names are case-insensitive.
* The remaining columns are the interval positions of the day, named ``1`` to ``N`` in order.
  ``N`` sets the interval length: a normal day has 1440 / m intervals of m minutes, the spring
  DST day 60 / m fewer and the autumn day 60 / m more, so ``N`` may be any of the three counts
  (for 15 minutes: 92, 96 or 100). A 100-column header holds the autumn day; a 96-column one
  cannot, and such a day is reported as an error.
* ``date`` is the local calendar day, ``YYYY-MM-DD``, in the time zone given by
  ``ReadOptions.timezone`` (``--timezone``), which is therefore required.
* ``quantity`` is one of ``kwh``, ``kvarh_lag``, ``kvarh_lead``, ``kwh_received``.
* ``unit`` (optional; default kWh / kvarh) is one of ``Wh``, ``kWh``, ``MWh`` for the active
  quantities and ``varh``, ``kvarh``, ``Mvarh`` for the reactive ones; values are converted to
  kWh / kvarh.

Value position ``j`` (1-based) of a row is the interval starting ``(j - 1) × m`` minutes of
elapsed time after local midnight; that instant is converted to UTC. A day therefore holds as
many values as it has intervals in that zone (92 on a 15-minute spring day in Europe/Berlin),
filled from position 1 with no empty cell in between and nothing after; any other count is an
error naming the line and the date. Missing intervals cannot be expressed in this layout: a
meter export that has gaps should use the plain CSV or a mapping profile.

Joining rows into the canonical frame
-------------------------------------
Rows of the same meter and day are joined into one canonical row per interval. Every day needs
a ``kwh`` row; the canonical ``line`` is the line of that row. A quantity that appears
somewhere in the file must appear on every day of every meter: a day without it is an error
naming the day (a silent zero would understate the reactive energy of that day). A reactive
quantity absent from the whole file is taken as 0.0 with a :class:`ReadInfo` warning; an absent
``kwh_received`` is NaN, as the canonical contract says. Two rows of the same meter, day and
quantity are an error naming both lines.

The file is read whole (a meter-year is about 1,100 lines); conversion is whole-array numpy
work on the value block, with no Python loop over days or intervals.
"""
from __future__ import annotations

import re
import warnings
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd

from auditor.errors import InputError, Problem
from auditor.ingest.frame import (
    ALLOWED_INTERVALS,
    MAX_PROBLEMS,
    ReadInfo,
    ReadOptions,
    ReadOutput,
    canonical,
    check_window,
)
from auditor.ingest.timestamps import _zone

FORMAT = "wide_csv"
LEADING = ("meter", "date", "quantity")
QUANTITIES = ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received")
ACTIVE_UNITS = {"wh": ("Wh", 1e-3), "kwh": ("kWh", 1.0), "mwh": ("MWh", 1e3)}
REACTIVE_UNITS = {"varh": ("varh", 1e-3), "kvarh": ("kvarh", 1.0), "mvarh": ("Mvarh", 1e3)}
UNITS_BY_QUANTITY = {"kwh": ACTIVE_UNITS, "kwh_received": ACTIVE_UNITS,
                     "kvarh_lag": REACTIVE_UNITS, "kvarh_lead": REACTIVE_UNITS}
DEFAULT_UNIT = {"kwh": "kWh", "kwh_received": "kWh", "kvarh_lag": "kvarh", "kvarh_lead": "kvarh"}
SECONDS_PER_DAY = 86_400


def _interval_for_columns(n: int) -> int | None:
    """Interval minutes whose 23-, 24- or 25-hour day has ``n`` intervals (unique for 5/15/30/60)."""
    for minutes in ALLOWED_INTERVALS:
        if n in (1380 // minutes, 1440 // minutes, 1500 // minutes):
            return minutes
    return None


def _split_header(line: str, limit: int = -1) -> list[str]:
    cells = line.lstrip("\ufeff").rstrip("\r\n").split(",", limit)
    return [c.strip().strip('"').strip().lower() for c in (cells[:limit] if limit >= 0 else cells)]


def sniff(path: Path, head: str) -> bool:
    first = head.lstrip("\ufeff").split("\n", 1)[0]
    return _split_header(first, 3) == list(LEADING)


def check_header(cols: list[str], file: str) -> tuple[bool, int]:
    """Validate the header; return (has unit column, interval minutes)."""
    problems = []
    for i, name in enumerate(LEADING):
        if i >= len(cols) or cols[i] != name:
            found = cols[i] if i < len(cols) else "nothing"
            problems.append(Problem(f"column {i + 1} must be {name!r} (found {found!r}); the day-per-row "
                                    "layout begins meter,date,quantity", 1, name))
    if problems:
        raise InputError(file, problems)
    has_unit = len(cols) > 3 and cols[3] == "unit"
    interval_cols = cols[4 if has_unit else 3:]
    for j, name in enumerate(interval_cols):
        if name != str(j + 1):
            problems.append(Problem(f"interval columns must be numbered 1, 2, 3, ... in order; "
                                    f"expected {str(j + 1)!r} here, found {name!r}", 1, name or f"#{j + 1}"))
            break
    if problems:
        raise InputError(file, problems)
    minutes = _interval_for_columns(len(interval_cols))
    if minutes is None:
        counts = ", ".join(f"{1440 // m} ({m} min)" for m in ALLOWED_INTERVALS)
        raise InputError(file, Problem(
            f"{len(interval_cols)} interval columns do not match any interval length; a day has "
            f"{counts}, or 60/m fewer or more on DST days", 1, interval_cols[-1] if interval_cols else "quantity"))
    return has_unit, minutes


def read(path: Path, options: ReadOptions) -> ReadOutput:
    """Read a day-per-row file into canonical frames.

    Parameters
    ----------
    path
        The CSV (UTF-8).
    options
        ``timezone`` is required: it places each local day in time.

    Returns
    -------
    ReadOutput
        ``info.interval_minutes`` from the header; chunks of at most ``options.chunk_rows`` rows,
        sorted by meter and interval start.

    Raises
    ------
    InputError
        Naming line and column of every cell, row or header that cannot be read.
    """
    file = str(path)
    try:
        with open(path, encoding="utf-8-sig", errors="strict") as fh:
            head = fh.readline()
    except UnicodeDecodeError as exc:
        raise InputError(file, Problem(f"not UTF-8 text (byte {exc.start}: {exc.reason}); "
                                       "save the file as UTF-8", 1)) from None
    except OSError as exc:
        raise InputError(file, Problem(f"cannot read the file: {exc.strerror}")) from None
    cols = _split_header(head)
    has_unit, minutes = check_header(cols, file)
    info = ReadInfo(format=FORMAT, interval_minutes=minutes)
    frame = _read_all(path, cols, has_unit, minutes, options, file, info)
    return ReadOutput(info, _chunked(frame, options.chunk_rows))


def _chunked(frame: pd.DataFrame, rows: int) -> Iterator[pd.DataFrame]:
    for at in range(0, len(frame), max(rows, 1)):
        yield frame.iloc[at:at + rows].reset_index(drop=True)


_EXTRA = "(beyond the header)"


def _parse(path: Path, cols: list[str], value_cols: list[str], value_dtype: str, file: str) -> pd.DataFrame:
    dtypes = {c: "string" for c in cols if c not in value_cols}
    dtypes.update({c: value_dtype for c in value_cols})
    dtypes[_EXTRA] = "string"
    try:
        with warnings.catch_warnings():
            # A spare column catches a field past the header (an empty one, from a trailing
            # comma, is harmless); pandas' warning about still longer rows is covered by it.
            warnings.simplefilter("ignore", pd.errors.ParserWarning)
            table = pd.read_csv(path, header=None, skiprows=1, names=[*cols, _EXTRA], dtype=dtypes, skip_blank_lines=False,
                                encoding="utf-8-sig", engine="c", keep_default_na=False, na_values=[""],
                                skipinitialspace=True, index_col=False)
    except pd.errors.ParserError as exc:
        raise InputError(file, Problem("malformed CSV: " + str(exc).strip().splitlines()[-1])) from None
    except UnicodeDecodeError as exc:
        raise InputError(file, Problem(f"not UTF-8 text (byte {exc.start}: {exc.reason}); "
                                       "save the file as UTF-8")) from None
    extra = table[_EXTRA].str.strip()
    over = np.flatnonzero((extra.notna() & (extra != "")).to_numpy(dtype=bool, na_value=False))
    if len(over):
        raise InputError(file, [Problem(f"more fields than the {len(cols)} columns of the header", int(i) + 2)
                                for i in over[:MAX_PROBLEMS]])
    return table.drop(columns=_EXTRA)


# pandas' C parser reads a float column made only of TRUE/FALSE cells as 1.0/0.0: such a file
# takes the slow path, which names every cell that is not a number.
_BOOLEAN_CELL = re.compile(rb"(?im)(?:^|[,\s\"])(?:true|false)(?=[,\s\"]|$)")


def _value_block(path: Path, cols: list[str], value_cols: list[str], file: str) -> tuple[pd.DataFrame, np.ndarray]:
    """The table and its value block as float64 (NaN = empty); bad cells raise naming line and column."""
    try:
        # Fast path: the C parser converts the whole block; it refuses any non-numeric cell.
        if _BOOLEAN_CELL.search(path.read_bytes()):
            raise ValueError("a TRUE or FALSE cell")
        table = _parse(path, cols, value_cols, "float64", file)
        block = table[value_cols].to_numpy(dtype="float64")
        if np.isinf(block).any():
            raise ValueError("a cell too large for a number")  # the slow path quotes the cell as written
        text = None
    except ValueError:
        table = _parse(path, cols, value_cols, "string", file)
        text = table[value_cols].to_numpy(dtype=object, na_value=None)
        flat = pd.Series(text.ravel(), dtype="string").str.strip()
        block = pd.to_numeric(flat, errors="coerce").to_numpy(dtype="float64", na_value=np.nan)
        empty = (flat.isna() | (flat == "")).to_numpy(dtype=bool, na_value=True)
        named_nan = flat.str.lower().isin(["nan", "inf", "-inf", "+inf", "infinity"]).to_numpy(dtype=bool, na_value=False)
        bad = (np.isnan(block) & ~empty) | named_nan
        block[empty] = np.nan
        block[bad] = np.inf  # reported below together with cells the fast path let through
        block = block.reshape(text.shape)
    bad_rows, bad_cols = np.nonzero(np.isinf(block))
    if len(bad_rows):
        problems = []
        for r, c in list(zip(bad_rows, bad_cols, strict=True))[:MAX_PROBLEMS]:
            shown = text[r, c] if text is not None else table[value_cols[c]].iloc[r]
            problems.append(Problem(f"not a number: {str(shown).strip()[:40]!r}", int(r) + 2, value_cols[c]))
        raise InputError(file, problems)
    return table, block


def _read_all(path: Path, cols: list[str], has_unit: bool, minutes: int, options: ReadOptions,
              file: str, info: ReadInfo) -> pd.DataFrame:
    value_cols = cols[4 if has_unit else 3:]
    table, block = _value_block(path, cols, value_cols, file)
    lines = np.arange(2, len(table) + 2)
    keep = ~(table[[c for c in cols if c not in value_cols]].isna().all(axis=1).to_numpy()
             & np.isnan(block).all(axis=1))
    table, block, lines = table.loc[keep].reset_index(drop=True), block[keep], lines[keep]
    if not len(table):
        raise InputError(file, Problem("no data rows below the header", 2))

    meter = _text_column(table, "meter", lines, file)
    quantity = pd.Series(_text_column(table, "quantity", lines, file), dtype="string").str.lower().to_numpy(dtype=object)
    unknown = ~np.isin(quantity, QUANTITIES)
    if unknown.any():
        raise InputError(file, [Problem(f"unknown quantity {table['quantity'].iloc[i]!r}; use one of "
                                        + ", ".join(QUANTITIES), int(lines[i]), "quantity")
                                for i in np.flatnonzero(unknown)[:MAX_PROBLEMS]])
    factor = _unit_factors(table, quantity, lines, has_unit, file, info)
    day_text = _text_column(table, "date", lines, file)
    # strptime-style parsing would read full-width or other Unicode digits: ASCII only
    ascii_day = np.fromiter((t.isascii() for t in day_text), bool, len(day_text))
    day = pd.to_datetime(pd.Series(np.where(ascii_day, day_text, ""), dtype="string"), format="%Y-%m-%d",
                         errors="coerce")
    bad_day = day.isna().to_numpy()
    if bad_day.any():
        raise InputError(file, [Problem(f"not a date (YYYY-MM-DD): {day_text[i]!r}", int(lines[i]), "date")
                                for i in np.flatnonzero(bad_day)[:MAX_PROBLEMS]])
    # a local day lies within 14 hours of the same UTC day: checked before it is placed in time
    check_window(day.to_numpy().astype("datetime64[s]").astype("int64"), lines, "date", file,
                 options.time_window(), margin=2 * SECONDS_PER_DAY, shown=day_text)
    if options.timezone is None:
        raise InputError(file, Problem(
            f"the day-per-row layout holds local days: its time zone (e.g. Europe/Berlin) is needed to place "
            f"{day_text[0]!r} in time", int(lines[0]), "date", cli_hint="give --timezone ZONE"))
    day_start, day_intervals = _day_bounds(day, minutes, options.timezone, lines, file)
    day_iso = day.dt.strftime("%Y-%m-%d").to_numpy(dtype=object)
    _check_counts(block, day_intervals, lines, day_iso, minutes, options.timezone, value_cols, file)

    # One key per (meter, day); each quantity maps a key to its row (or -1).
    key = pd.MultiIndex.from_arrays([meter, day_iso])
    codes, uniques = pd.factorize(key)
    n_days = len(uniques)
    row_of: dict[str, np.ndarray] = {}
    for q in QUANTITIES:
        rows = np.flatnonzero(quantity == q)
        if not len(rows):
            continue
        _check_duplicates(codes[rows], rows, lines, meter, day_iso, q, file)
        mapping = np.full(n_days, -1, dtype=np.int64)
        mapping[codes[rows]] = rows
        row_of[q] = mapping
    first_row = np.full(n_days, len(table), dtype=np.int64)
    np.minimum.at(first_row, codes, np.arange(len(table)))
    if "kwh" not in row_of:
        raise InputError(file, Problem("the file has no kwh rows; every day needs one", int(lines[0]), "quantity"))
    for q, mapping in row_of.items():
        missing = np.flatnonzero(mapping < 0)
        if len(missing):
            where = row_of["kwh"][missing]
            anchor = np.where(where >= 0, where, first_row[missing])
            raise InputError(file, [Problem(
                f"meter {meter[first_row[d]]!r} has no {q} row for {day_iso[first_row[d]]} while other days "
                "have one", int(lines[a]), "quantity") for d, a in zip(missing[:MAX_PROBLEMS], anchor[:MAX_PROBLEMS], strict=True)])
    for q in ("kvarh_lag", "kvarh_lead"):
        if q not in row_of:
            info.warnings.append(Problem(f"the file has no {q} rows; {q} is taken as 0"))
    info.quantities = tuple(q for q in QUANTITIES if q in row_of)

    # Canonical rows, days in meter order then time: flat interval index -> (day, position).
    kwh_rows = row_of["kwh"]
    order = np.lexsort((day_start[kwh_rows], np.asarray(meter[kwh_rows], dtype=str)))
    per_day = day_intervals[kwh_rows][order]
    day_of = np.repeat(order, per_day)
    offsets = np.repeat(np.cumsum(per_day) - per_day, per_day)
    pos = np.arange(len(day_of)) - offsets
    start = day_start[kwh_rows][day_of] + pos * (minutes * 60)

    def values(q: str) -> np.ndarray | None:
        if q not in row_of:
            return None
        rows = row_of[q][day_of]
        return block[rows, pos] * factor[rows]

    zeros = np.zeros(len(day_of))
    kwh = values("kwh")
    lag = values("kvarh_lag")
    lead = values("kvarh_lead")
    return canonical(np.asarray(meter[kwh_rows], dtype=object)[day_of], start, kwh,
                     zeros if lag is None else lag, zeros if lead is None else lead,
                     values("kwh_received"), None, lines[kwh_rows][day_of])


def _text_column(table: pd.DataFrame, column: str, lines: np.ndarray, file: str) -> np.ndarray:
    text = table[column].str.strip()
    empty = (text.isna() | (text == "")).to_numpy(dtype=bool, na_value=True)
    if empty.any():
        raise InputError(file, [Problem(f"empty {column}", int(lines[i]), column)
                                for i in np.flatnonzero(empty)[:MAX_PROBLEMS]])
    return text.to_numpy(dtype=object)


def _unit_factors(table: pd.DataFrame, quantity: np.ndarray, lines: np.ndarray, has_unit: bool,
                  file: str, info: ReadInfo) -> np.ndarray:
    if not has_unit:
        info.source_units = {q: DEFAULT_UNIT[q] for q in QUANTITIES if (quantity == q).any()}
        return np.ones(len(quantity))
    unit = table["unit"].str.strip().fillna("")
    lowered = unit.str.lower().to_numpy(dtype=object)
    factor = np.full(len(quantity), np.nan)
    info.source_units = {}
    for q, units in UNITS_BY_QUANTITY.items():
        is_q = quantity == q
        if not is_q.any():
            continue
        blank = is_q & (lowered == "")
        factor[blank] = 1.0
        seen = set()
        if blank.any():
            seen.add(DEFAULT_UNIT[q])
        for key, (name, f) in units.items():
            hit = is_q & (lowered == key)
            if hit.any():
                factor[hit] = f
                seen.add(name)
        info.source_units[q] = "/".join(sorted(seen))
    bad = np.isnan(factor)
    if bad.any():
        problems = []
        for i in np.flatnonzero(bad)[:MAX_PROBLEMS]:
            allowed = ", ".join(n for n, _ in UNITS_BY_QUANTITY[quantity[i]].values())
            problems.append(Problem(f"unit {unit.iloc[i]!r} does not fit {quantity[i]}; use {allowed}",
                                    int(lines[i]), "unit"))
        raise InputError(file, problems)
    return factor


def _day_bounds(day: pd.Series, minutes: int, timezone: str, lines: np.ndarray, file: str
                ) -> tuple[np.ndarray, np.ndarray]:
    """UTC epoch seconds of each row's local midnight and the day's number of intervals."""
    zone = _zone(timezone, file)
    unique_days = pd.DatetimeIndex(pd.unique(day))
    edges = unique_days.append(unique_days + pd.Timedelta(days=1))
    # The day begins at the first instant of its date: where midnight is repeated take the
    # earlier one, where clocks skip midnight take the first wall time that exists.
    utc = edges.tz_localize(zone, ambiguous=np.ones(len(edges), bool), nonexistent="shift_forward")
    seconds = utc.as_unit("s").asi8
    begin, end = seconds[:len(unique_days)], seconds[len(unique_days):]
    length = end - begin
    step = minutes * 60
    index = unique_days.get_indexer(pd.DatetimeIndex(day))
    uneven = np.flatnonzero(length[index] % step != 0)
    if len(uneven):
        i = int(uneven[0])
        raise InputError(file, Problem(
            f"{day.iloc[i]:%Y-%m-%d} lasts {length[index[i]] / 3600:g} hours in {timezone}, not a whole "
            f"number of {minutes}-minute intervals", int(lines[i]), "date"))
    return begin[index], length[index] // step


def _check_counts(block: np.ndarray, expected: np.ndarray, lines: np.ndarray, day_iso: np.ndarray,
                  minutes: int, timezone: str, value_cols: list[str], file: str) -> None:
    filled = ~np.isnan(block)
    count = filled.sum(axis=1)
    should = np.arange(block.shape[1])[None, :] < expected[:, None]
    wrong = np.flatnonzero((filled != should).any(axis=1) | (expected > block.shape[1]))
    problems = []
    for i in wrong[:MAX_PROBLEMS]:
        if expected[i] > block.shape[1]:
            problems.append(Problem(
                f"{day_iso[i]} has {expected[i]} intervals of {minutes} minutes in {timezone}, but the header "
                f"has only {block.shape[1]} interval columns (use {expected[i]} or more)", int(lines[i]), "date"))
        elif count[i] != expected[i]:
            problems.append(Problem(
                f"{day_iso[i]} has {expected[i]} intervals of {minutes} minutes in {timezone}; the row has "
                f"{count[i]} values", int(lines[i]), "date"))
        else:
            j = int(np.flatnonzero(~filled[i, :expected[i]])[0])
            problems.append(Problem(
                f"empty value inside {day_iso[i]} (values fill columns 1 to {expected[i]} without gaps)",
                int(lines[i]), value_cols[j]))
    if problems:
        raise InputError(file, problems)


def _check_duplicates(day_codes: np.ndarray, rows: np.ndarray, lines: np.ndarray, meter: np.ndarray,
                      day_iso: np.ndarray, q: str, file: str) -> None:
    dup = pd.Series(day_codes).duplicated().to_numpy()
    if not dup.any():
        return
    first_of = dict(zip(day_codes[::-1], rows[::-1], strict=True))  # reversed so the earliest row wins
    problems = [Problem(f"second {q} row for meter {meter[r]!r} on {day_iso[r]} (first on line "
                        f"{lines[first_of[c]]})", int(lines[r]), "quantity")
                for c, r in zip(day_codes[dup][:MAX_PROBLEMS], rows[dup][:MAX_PROBLEMS], strict=True)]
    raise InputError(file, problems)
