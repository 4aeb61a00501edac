"""Any CSV through a mapping profile (:mod:`auditor.ingest.profile`).

The profile says where everything is; this reader only applies it. It is never chosen by
detection (``sniff`` is always False): the pipeline calls it when ``--profile`` is given and
passes the loaded :class:`~auditor.ingest.profile.Profile` as ``ReadOptions.profile``.

Units and multipliers are applied here (values come out in kWh / kvarh), and interval-ending
labels are shifted to interval starts here, because the profile states the interval length:
``ReadInfo.label`` is therefore always ``"start"``. Wall-time stamps are localised with
:func:`auditor.ingest.timestamps.localise` (DST-aware, per meter, in file order).

The file is read in chunks of ``ReadOptions.chunk_rows`` rows; one
:class:`~auditor.ingest.timestamps.WallClock` serves the whole file, so the repeated autumn hour
of a wall-time export is resolved by row order wherever a chunk boundary falls.

Numbers and times must be written with ASCII digits: Python's ``strptime`` (and pandas' parser
for non-ISO formats) would read full-width or other Unicode digits, which in a meter export are
a sign of text pasted from elsewhere; such a cell is an error naming its line.
"""
from __future__ import annotations

import csv
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd

from auditor.errors import InputError, Problem, UsageError
from auditor.ingest.frame import (
    MAX_PROBLEMS,
    ReadInfo,
    ReadOptions,
    ReadOutput,
    canonical,
    check_window,
    numeric_column,
)
from auditor.ingest.profile import NET_SPLITS, OFFSET, Profile
from auditor.ingest.timestamps import WallClock, _bad_cells, parse_iso

FORMAT = "profile_csv"
# "24:00" ends the day in many interval-ending exports; strptime has no hour 24.
_MIDNIGHT_24 = r"(?<![\d:])24(?=:00(?::00)?(?![\d:]))"


def sniff(path: Path, head: str) -> bool:
    return False  # chosen by --profile only, never by content


def _encoding(profile: Profile) -> str:
    # a byte-order mark is never part of the first column's name
    return "utf-8-sig" if profile.encoding == "utf-8" else profile.encoding


def _header(path: Path, profile: Profile, file: str) -> list[str] | None:
    if profile.header_line == 0:
        return None
    try:
        with open(path, encoding=_encoding(profile), errors="strict", newline="") as fh:
            for _ in range(profile.header_line - 1):
                if not fh.readline():
                    break
            line = fh.readline()
    except UnicodeError as exc:
        raise InputError(file, _undecodable(profile, exc, profile.header_line)) from None
    except OSError as exc:
        raise InputError(file, Problem(f"cannot read the file: {exc.strerror}")) from None
    if not line.strip():
        raise InputError(file, Problem(f"no header on line {profile.header_line} (profile key file.header_line)",
                                       profile.header_line))
    try:
        return [c.strip() for c in next(csv.reader([line], delimiter=profile.delimiter))]
    except csv.Error as exc:
        raise InputError(file, Problem(f"malformed header: {exc}", profile.header_line)) from None


def _undecodable(profile: Profile, exc: UnicodeError, line: int | None = None) -> Problem:
    """A decoding failure, naming the profile key that chose the encoding."""
    where = f" (byte {exc.start}: {exc.reason})" if isinstance(exc, UnicodeDecodeError) else f" ({exc})"
    hint = ""
    if profile.encoding in ("utf-16", "utf-32"):
        hint = (f"; {profile.encoding} without a byte-order mark needs the byte order: "
                f"{profile.encoding}-le or {profile.encoding}-be")
    return Problem(f"not {profile.encoding} text{where}; check the profile key file.encoding{hint}", line,
                   "file.encoding")


def _resolve(header: list[str] | None, ref, key: str, profile: Profile, file: str) -> tuple[int, str]:
    """0-based position and display name of a profile column reference."""
    if isinstance(ref, int):
        if header is not None and ref > len(header):
            raise InputError(file, Problem(f"column position {ref} (profile key {key}) is beyond the "
                                           f"{len(header)} columns of the header", profile.header_line))
        name = header[ref - 1] if header is not None and header[ref - 1] else f"#{ref}"
        return ref - 1, name
    if ref in header:
        return header.index(ref), ref
    folded = [h.casefold() for h in header]
    if folded.count(ref.casefold()) == 1:
        return folded.index(ref.casefold()), header[folded.index(ref.casefold())]
    shown = ", ".join(repr(h) for h in header[:20])
    raise InputError(file, Problem(f"no column {ref!r} (profile key {key}); the header has {shown}",
                                   profile.header_line, ref))


def read(path: Path, options: ReadOptions) -> ReadOutput:
    """Read a CSV through ``options.profile`` into canonical frames.

    Parameters
    ----------
    path
        The CSV, in the profile's encoding.
    options
        ``profile`` (required) a loaded :class:`Profile`; ``timezone``, when given, overrides
        the profile's IANA zone for wall-time stamps.

    Returns
    -------
    ReadOutput
        ``info.interval_minutes`` from the profile, ``info.label`` always ``"start"`` (ending
        labels are shifted here), ``info.source_units`` as the profile states them.

    Raises
    ------
    InputError
        A header without a mapped column (naming the profile key), or a cell that cannot be
        read (naming line and column).
    UsageError
        Called without a profile.
    """
    profile = options.profile
    if not isinstance(profile, Profile):
        raise UsageError("the profile reader needs a mapping profile", cli_hint="--profile FILE")
    file = str(path)
    header = _header(path, profile, file)
    refs: dict[str, tuple[object, str]] = {}
    if profile.meter_column is not None:
        refs["meter"] = (profile.meter_column, "meter.column")
    if profile.timestamp_column is not None:
        refs["time"] = (profile.timestamp_column, "time.column")
    else:
        refs["date"] = (profile.date_column, "time.date_column")
        refs["clock"] = (profile.time_column, "time.time_column")
    for q in profile.quantities:
        refs[q.quantity] = (q.column, f"quantities.{q.quantity}.column")
    if profile.estimated_column is not None:
        refs["estimated"] = (profile.estimated_column, "estimated.column")
    columns = {role: _resolve(header, ref, key, profile, file) for role, (ref, key) in refs.items()}

    info = ReadInfo(format=FORMAT, interval_minutes=profile.interval_minutes, label="start")
    present = set()
    units = {}
    for q in profile.quantities:
        for name in NET_SPLITS.get(q.quantity, (q.quantity,)):
            present.add(name)
            units[name] = q.unit
    info.quantities = tuple(q for q in ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received") if q in present)
    info.source_units = units
    for q in ("kvarh_lag", "kvarh_lead"):
        if q not in present:
            info.warnings.append(Problem(f"the profile maps no {q}; {q} is taken as 0"))
    return ReadOutput(info, _chunks(path, profile, columns, options, file))


def _chunks(path: Path, profile: Profile, columns: dict[str, tuple[int, str]], options: ReadOptions,
            file: str) -> Iterator[pd.DataFrame]:
    positions = sorted({pos for pos, _ in columns.values()})
    skip = profile.header_line + profile.skip_after_header
    window = options.time_window()
    offset_in_string = profile.timezone == OFFSET
    clock = WallClock(None if offset_in_string else options.timezone or profile.timezone, file, window)
    try:
        reader = pd.read_csv(
            path, sep=profile.delimiter, header=None, skiprows=skip, usecols=positions,
            dtype="string", chunksize=options.chunk_rows, skip_blank_lines=False,
            encoding=_encoding(profile), engine="c", keep_default_na=False, na_values=[""],
        )
        first_line = skip + 1
        for chunk in reader:
            lines = np.arange(first_line, first_line + len(chunk))
            first_line += len(chunk)
            blank = chunk.isna().all(axis=1).to_numpy()
            if blank.any():
                chunk, lines = chunk.loc[~blank], lines[~blank]
            if len(chunk):
                yield _canonical(chunk, lines, profile, columns, options, file, clock, window)
        clock.finish()
    except pd.errors.EmptyDataError:
        return
    except pd.errors.ParserError as exc:
        raise InputError(file, Problem("malformed CSV: " + str(exc).strip().splitlines()[-1])) from None
    except UnicodeError as exc:
        raise InputError(file, _undecodable(profile, exc)) from None
    except LookupError as exc:
        # a codec Python knows that the CSV parser cannot stream
        raise InputError(file, Problem(f"the encoding {profile.encoding!r} cannot be used for a CSV ({exc})",
                                       None, "file.encoding")) from None


def _cells(chunk: pd.DataFrame, columns: dict[str, tuple[int, str]], role: str) -> tuple[pd.Series, str]:
    pos, name = columns[role]
    return chunk[pos].str.strip(), name


def _ascii_only(values: pd.Series, lines: np.ndarray, name: str, file: str) -> None:
    """Digits and separators must be ASCII: strptime would read full-width or other digits."""
    bad = ~values.str.isascii().to_numpy(dtype=bool, na_value=True)
    if bad.any():
        raise InputError(file, [Problem(f"characters other than ASCII in {values.iloc[i][:40]!r} (write digits "
                                        "0-9)", int(lines[i]), name) for i in np.flatnonzero(bad)[:MAX_PROBLEMS]])


def _required_text(values: pd.Series, lines: np.ndarray, name: str, what: str, file: str) -> None:
    empty = (values.isna() | (values == "")).to_numpy(dtype=bool, na_value=True)
    if empty.any():
        raise InputError(file, [Problem(f"empty {what}", int(lines[i]), name)
                                for i in np.flatnonzero(empty)[:MAX_PROBLEMS]])


def _numbers(values: pd.Series, profile: Profile) -> pd.Series:
    # decimal commas and digit grouping become the plain form pandas parses
    if profile.thousands:
        values = values.str.replace(profile.thousands, "", regex=False)
    if profile.decimal == ",":
        values = values.str.replace(",", ".", regex=False)
    return values


def _canonical(chunk: pd.DataFrame, lines: np.ndarray, profile: Profile, columns: dict[str, tuple[int, str]],
               options: ReadOptions, file: str, clock: WallClock, window: tuple[int, int]) -> pd.DataFrame:
    if profile.meter_id is not None:
        meter = np.repeat(np.array(profile.meter_id, dtype=object), len(chunk))
    else:
        values, name = _cells(chunk, columns, "meter")
        _required_text(values, lines, name, "meter id", file)
        meter = values.to_numpy(dtype=object)
    start = _starts(chunk, lines, profile, columns, meter, file, clock, window)

    out: dict[str, np.ndarray] = {}
    for q in profile.quantities:
        raw, name = _cells(chunk, columns, q.quantity)
        number = numeric_column(_numbers(raw, profile), lines, name, file) * q.factor
        if q.quantity in NET_SPLITS:
            positive, negative = NET_SPLITS[q.quantity]
            out[positive] = np.maximum(number, 0.0)
            out[negative] = np.maximum(-number, 0.0)
        else:
            out[q.quantity] = number
    zeros = np.zeros(len(chunk))
    estimated = None
    if profile.estimated_column is not None:
        flag, _ = _cells(chunk, columns, "estimated")
        estimated = flag.str.casefold().isin(profile.estimated_values).to_numpy(dtype=bool, na_value=False)
    return canonical(meter, start, out["kwh"], out.get("kvarh_lag", zeros), out.get("kvarh_lead", zeros),
                     out.get("kwh_received"), estimated, lines)


def _starts(chunk: pd.DataFrame, lines: np.ndarray, profile: Profile, columns: dict[str, tuple[int, str]],
            meter: np.ndarray, file: str, clock: WallClock, window: tuple[int, int]) -> np.ndarray:
    """UTC interval starts, epoch seconds."""
    if "time" in columns:
        raw, name = _cells(chunk, columns, "time")
        _required_text(raw, lines, name, "timestamp", file)
    else:
        day, day_name = _cells(chunk, columns, "date")
        time_of_day, clock_name = _cells(chunk, columns, "clock")
        _required_text(day, lines, day_name, "date", file)
        _required_text(time_of_day, lines, clock_name, "time", file)
        raw, name = day + " " + time_of_day, f"{day_name}+{clock_name}"
    offset_in_string = profile.timezone == OFFSET
    fmt = profile.timestamp_format
    if fmt == "iso":
        utc = parse_iso(raw, lines, name, file, clock.timezone, meter, clock=clock, window=window)
    else:
        _ascii_only(raw, lines, name, file)
        is_24 = raw.str.contains(_MIDNIGHT_24, regex=True).to_numpy(dtype=bool, na_value=False)
        text = raw.str.replace(_MIDNIGHT_24, "00", regex=True) if is_24.any() else raw
        parsed = pd.to_datetime(text, format=fmt, errors="coerce", utc=offset_in_string)
        _bad_cells(raw, parsed, lines, name, file, f"not a timestamp in the format {fmt!r}")
        if is_24.any():
            parsed = parsed + pd.to_timedelta(is_24.astype("int64"), unit="D")
        if offset_in_string:
            utc = pd.DatetimeIndex(parsed).as_unit("s").asi8
            check_window(utc, lines, name, file, window)
        else:
            utc = clock.to_utc(parsed, lines, name, raw, meter)
    if profile.label == "end":
        utc = utc - profile.interval_minutes * 60
    return np.asarray(utc, dtype="int64")
