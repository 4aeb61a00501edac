"""The plain CSV: ``meter,start,kwh,kvarh_lag,kvarh_lead`` (the project's own contract).

Optional columns: ``kwh_received``; ``end`` in place of ``start`` (interval-ending labels);
``flag`` (``A`` actual, ``E`` estimated). Timestamps are ISO 8601; without an offset they are
local wall time in ``--timezone``. Any other column is an error that names it.
"""
from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd

from auditor.errors import InputError, Problem
from auditor.ingest.frame import (
    MAX_PROBLEMS,
    ReadInfo,
    ReadOptions,
    ReadOutput,
    canonical,
    numeric_column,
)
from auditor.ingest.timestamps import WallClock, parse_iso

FORMAT = "plain_csv"
REQUIRED = ("meter", "kwh", "kvarh_lag", "kvarh_lead")
OPTIONAL = ("kwh_received", "flag")
TIME_COLUMNS = ("start", "end")


# Detection looks at this many columns: the plain CSV has at most seven.
SNIFF_COLUMNS = 64


def header_of(head: str, limit: int = -1) -> list[str]:
    """The header's column names, lower case and stripped (the first ``limit + 1`` when given)."""
    first = head.lstrip("\ufeff").split("\n", 1)[0].rstrip("\r") if head.strip() else ""
    cols = first.lower().split(",", limit)
    if limit >= 0:
        cols = cols[:limit]
    return [c.strip() for c in cols] if any(c != c.strip() for c in cols) else cols


def sniff(path: Path, head: str) -> bool:
    cols = header_of(head, SNIFF_COLUMNS)
    return "meter" in cols and "kwh" in cols and ("start" in cols or "end" in cols)


def check_header(cols: list[str], file: str) -> str:
    problems = []
    seen = set()
    known = set(REQUIRED) | set(OPTIONAL) | set(TIME_COLUMNS)
    unknown = 0
    for c in cols:
        if c in seen and len(problems) < MAX_PROBLEMS:
            problems.append(Problem(f"column {c!r} appears twice", 1, c))
        seen.add(c)
        if c not in known:
            unknown += 1
            if unknown == 1:
                problems.insert(0, Problem(
                    f"unknown column {c[:80]!r}; the plain CSV has meter, start (or end), kwh, kvarh_lag, "
                    "kvarh_lead and optionally kwh_received, flag (other layouts need a mapping profile)", 1, c[:80],
                    cli_hint="give --profile FILE"))
    if unknown > 1:
        problems.insert(1, Problem(f"{unknown - 1:,} more unknown column(s) after it ({len(cols):,} columns in all)", 1))
    for c in REQUIRED:
        if c not in seen:
            problems.append(Problem(f"missing column {c!r}", 1, c))
    if "start" in seen and "end" in seen:
        problems.append(Problem("give either 'start' or 'end', not both", 1, "end"))
    elif "start" not in seen and "end" not in seen:
        problems.append(Problem("missing column 'start' (or 'end' for interval-ending labels)", 1, "start"))
    if problems:
        raise InputError(file, problems[:MAX_PROBLEMS])
    return "start" if "start" in cols else "end"


def read(path: Path, options: ReadOptions) -> ReadOutput:
    file = str(path)
    head = read_header_line(path, file)
    cols = header_of(head)
    time_col = check_header(cols, file)
    info = ReadInfo(format=FORMAT)
    info.quantities = tuple(q for q in ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received") if q in cols)
    info.label = time_col
    return ReadOutput(info, _chunks(path, cols, time_col, options, file))


def _chunks(path: Path, cols: list[str], time_col: str, options: ReadOptions, file: str) -> Iterator[pd.DataFrame]:
    # meter as category: the C parser builds each distinct id once, so stripping and checking
    # touch a handful of strings, not every cell (pandas 3 string ops run per cell in Python)
    dtypes = {"meter": "category", time_col: "object"}
    if "flag" in cols:
        dtypes["flag"] = "string"
    _check_first_row(path, cols, file)
    # index_col=False: a longer row later in the file is a parser error naming its line (pandas
    # would otherwise take surplus leading fields as an index).
    first_line = 2
    window = options.time_window()
    clock = WallClock(options.timezone, file, window)
    try:
        # inside the try: pandas reads the first block when the reader is made
        reader = pd.read_csv(
            path, header=0, names=cols, dtype=dtypes, chunksize=options.chunk_rows, index_col=False,
            skip_blank_lines=False, encoding="utf-8-sig", engine="c", on_bad_lines="error",
            na_filter=True, keep_default_na=False, na_values=[""],
        )
        for chunk in reader:
            lines = np.arange(first_line, first_line + len(chunk))
            first_line += len(chunk)
            # a blank line is a row of NaN: look at the meter column first, the rest only there
            blank = chunk["meter"].isna().to_numpy().copy()
            if blank.any():
                blank[blank] = chunk.loc[blank].isna().all(axis=1).to_numpy()
            if blank.any():
                chunk = chunk.loc[~blank]
                lines = lines[~blank]
            if not len(chunk):
                continue
            yield _canonical(chunk, lines, time_col, options, file, clock, window)
        clock.finish()
    except pd.errors.ParserError as exc:
        raise InputError(file, Problem(_parser_message(exc))) from None
    except UnicodeDecodeError:
        raise InputError(file, undecodable(path)) from None


# A header longer than this is no meter export (the widest layout has a few hundred columns).
MAX_HEADER_BYTES = 64 << 20


def read_header_line(path: Path, file: str) -> str:
    """The first line as text; bytes that are not UTF-8 there are an error naming line 1."""
    with open(path, "rb") as fh:
        raw = fh.readline(MAX_HEADER_BYTES + 1)
    if len(raw) > MAX_HEADER_BYTES:
        raise InputError(file, Problem(f"the header line is longer than {MAX_HEADER_BYTES >> 20} MiB: not a meter "
                                       "export", 1))
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(file, undecodable(path)) from None


def undecodable(path: Path) -> Problem:
    """Where the file stops being UTF-8: line and byte (pandas' own offset is per chunk)."""
    with open(path, "rb") as fh:
        for n, raw in enumerate(fh, start=1):
            try:
                raw.decode("utf-8-sig" if n == 1 else "utf-8")
            except UnicodeDecodeError as exc:
                return Problem(f"not UTF-8 text (byte {exc.start + 1} of the line: {exc.reason}); save the "
                               "file as UTF-8", n, f"byte {exc.start + 1}")
    return Problem("not UTF-8 text; save the file as UTF-8")


def _check_first_row(path: Path, cols: list[str], file: str) -> None:
    """pandas silently drops surplus fields of the first data row with index_col=False: check it."""
    import csv

    with open(path, encoding="utf-8-sig", errors="replace", newline="") as fh:
        fh.readline()
        rows = csv.reader(fh)
        try:
            for row in rows:
                if not row:
                    continue
                if len(row) > len(cols):
                    raise InputError(file, Problem(f"{len(row)} fields where the header has {len(cols)}",
                                                   rows.line_num + 1))
                return
        except csv.Error as exc:
            # e.g. a field longer than the csv module's limit: that row is no meter reading
            raise InputError(file, Problem(f"malformed CSV: {exc}", rows.line_num + 1)) from None


def _parser_message(exc: Exception) -> str:
    text = str(exc).strip().splitlines()[-1]
    # pandas says "Expected 5 fields in line 7, saw 6": keep that, it already names the line
    return f"malformed CSV: {text}"


def _canonical(chunk: pd.DataFrame, lines: np.ndarray, time_col: str, options: ReadOptions, file: str,
               clock: WallClock, window: tuple[int, int]) -> pd.DataFrame:
    cat = chunk["meter"].cat
    names = np.array([str(c).strip() for c in cat.categories] + [""], dtype=object)
    codes = cat.codes.to_numpy()
    meter_ids = names[np.where(codes < 0, len(names) - 1, codes)]
    empty_meter = meter_ids == ""
    if empty_meter.any():
        raise InputError(file, [Problem("empty meter id", int(lines[i]), "meter")
                                for i in np.flatnonzero(empty_meter)[:MAX_PROBLEMS]])
    raw_time = chunk[time_col]
    missing = raw_time.isna().to_numpy()
    if missing.any():
        raise InputError(file, [Problem("empty timestamp", int(lines[i]), time_col)
                                for i in np.flatnonzero(missing)[:MAX_PROBLEMS]])
    start = parse_iso(raw_time, lines, time_col, file, options.timezone, meter_ids, clock=clock, window=window)
    values = {q: numeric_column(chunk[q], lines, q, file) for q in ("kwh", "kvarh_lag", "kvarh_lead")}
    received = (numeric_column(chunk["kwh_received"], lines, "kwh_received", file)
                if "kwh_received" in chunk.columns else None)
    estimated = None
    if "flag" in chunk.columns:
        flag = chunk["flag"].str.strip().str.upper().fillna("A")
        bad = ~flag.isin(["A", "E", ""]).to_numpy()
        if bad.any():
            raise InputError(file, [Problem(f"flag must be A (actual) or E (estimated), not {chunk['flag'].iloc[i]!r}",
                                            int(lines[i]), "flag") for i in np.flatnonzero(bad)[:MAX_PROBLEMS]])
        estimated = (flag == "E").to_numpy()
    return canonical(meter_ids, start, values["kwh"], values["kvarh_lag"],
                     values["kvarh_lead"], received, estimated, lines)
