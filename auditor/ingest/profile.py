"""Mapping profiles: a TOML description of any meter-export CSV, read by ``profile_csv``.

A profile says where the meter id, the timestamp and each quantity are in a CSV, in which units,
with which multiplier and time convention. Every key is checked when the profile is loaded; an
unknown key, a wrong type or a value outside the allowed set is a
:class:`~auditor.errors.ProfileError` naming the key (dotted, e.g. ``quantities.kwh.unit``) and
what is allowed.

Keys
----
Top level
    ``name`` (text, default: the file's stem), ``description`` (text).
``[file]`` (optional table)
    ``delimiter`` one character, default ``","`` (``"\\t"`` for tab);
    ``decimal`` ``"."`` (default) or ``","``;
    ``thousands`` one character grouping digits (e.g. ``"."`` with decimal commas), default none;
    ``encoding`` a Python text codec, default ``"utf-8"`` (a byte-order mark is skipped);
    codecs that are not text (rot13, zlib, hex, base64) are refused; ``utf-16`` and ``utf-32``
    need a byte-order mark at the start of the file (else name the byte order: ``utf-16-le``);
    ``header_line`` 1-based line of the header row, default 1; lines above it are skipped;
    ``0`` means the file has no header and every column is given by position;
    ``skip_after_header`` lines between the header and the first data row (e.g. a units row),
    default 0.
``[meter]`` (required table)
    exactly one of ``column`` (header name, or 1-based position as an integer) and ``id``
    (a fixed meter id for single-meter files); ``multiplier`` the CT × VT ratio applied to every
    quantity, a number from 1e-6 to 1e8, default 1 (the largest transmission metering has a CT ×
    VT ratio in the order of 1e7, e.g. 4000/1 A × 400 kV/100 V; from memory).
``[time]`` (required table)
    ``column`` one timestamp column, or ``date_column`` and ``time_column`` (joined with one
    space before parsing); ``format`` ``"iso"`` (ISO 8601, default) or a strptime pattern such
    as ``"%d.%m.%Y %H:%M"`` that holds day, month, year, hour and minute (a clock time of
    ``24:00`` is read as midnight ending the day); ``label`` ``"start"`` (default) or ``"end"``
    (the timestamp labels the interval's end; the reader subtracts ``interval_minutes``);
    ``timezone`` an IANA name (the local zone of wall-time stamps; an explicit ``--timezone``
    overrides it) or ``"offset"`` (every timestamp carries its UTC offset; a strptime
    ``format`` must then contain ``%z``); ``interval_minutes`` 5, 15, 30 or 60 (required).
``[quantities.<name>]`` (at least ``kwh`` or ``kwh_net``)
    ``<name>`` is ``kwh``, ``kvarh_lag``, ``kvarh_lead``, ``kwh_received``, or a signed channel
    split by sign: ``kwh_net`` (positive import → ``kwh``, negative → ``kwh_received``) or
    ``kvarh_net`` (positive lagging → ``kvarh_lag``, negative leading → ``kvarh_lead``);
    ``column`` (required) header name or 1-based position; ``unit`` (required) ``Wh``, ``kWh``,
    ``MWh`` for active, ``varh``, ``kvarh``, ``Mvarh`` for reactive quantities; ``multiplier``
    an extra channel factor > 0 (e.g. a pulse weight), default 1, applied on top of
    ``meter.multiplier``; ``invert`` true to flip the sign (meters wired the other way round,
    exports that write received energy as negative numbers), default false.
``[estimated]`` (optional table)
    ``column`` header name or position of a status column; ``values`` the text (or list of
    texts) in it that means estimated, compared without case or surrounding blanks; any other
    text means an actual read.

Quantities absent from a profile: ``kvarh_lag`` / ``kvarh_lead`` are read as 0 (with a warning),
``kwh_received`` as NaN.
"""
from __future__ import annotations

import codecs
import tomllib
from dataclasses import dataclass
from datetime import datetime, timedelta
from datetime import timezone as dt_timezone
from pathlib import Path

from auditor.errors import ProfileError
from auditor.ingest.frame import ALLOWED_INTERVALS

ACTIVE_UNITS = {"wh": ("Wh", 1e-3), "kwh": ("kWh", 1.0), "mwh": ("MWh", 1e3)}
REACTIVE_UNITS = {"varh": ("varh", 1e-3), "kvarh": ("kvarh", 1.0), "mvarh": ("Mvarh", 1e3)}
QUANTITY_UNITS = {"kwh": ACTIVE_UNITS, "kwh_received": ACTIVE_UNITS, "kwh_net": ACTIVE_UNITS,
                  "kvarh_lag": REACTIVE_UNITS, "kvarh_lead": REACTIVE_UNITS, "kvarh_net": REACTIVE_UNITS}
# A signed channel stands for the pair it splits into; neither may be mapped beside it.
NET_SPLITS = {"kwh_net": ("kwh", "kwh_received"), "kvarh_net": ("kvarh_lag", "kvarh_lead")}
OFFSET = "offset"
# The range of a multiplier (meter CT × VT, or a channel's own factor such as a pulse weight).
MIN_MULTIPLIER = 1e-6
MAX_MULTIPLIER = 1e8

_TOP_KEYS = ("name", "description", "file", "meter", "time", "quantities", "estimated")
_FILE_KEYS = ("delimiter", "decimal", "thousands", "encoding", "header_line", "skip_after_header")
_METER_KEYS = ("column", "id", "multiplier")
_TIME_KEYS = ("column", "date_column", "time_column", "format", "label", "timezone", "interval_minutes")
_QUANTITY_KEYS = ("column", "unit", "multiplier", "invert")
_ESTIMATED_KEYS = ("column", "values")

Column = str | int


@dataclass(frozen=True)
class QuantityMap:
    """Where one quantity is in the file and how its numbers become kWh / kvarh."""

    quantity: str  # a canonical quantity, or kwh_net / kvarh_net
    column: Column
    unit: str  # canonical spelling, e.g. "Wh"
    multiplier: float  # the channel's own factor (meter.multiplier is separate)
    invert: bool
    factor: float  # unit factor × meter multiplier × channel multiplier × (−1 if inverted)


@dataclass(frozen=True)
class Profile:
    """A validated mapping profile (see the module docstring for the keys)."""

    name: str
    interval_minutes: int
    quantities: tuple[QuantityMap, ...]
    meter_column: Column | None = None
    meter_id: str | None = None
    multiplier: float = 1.0
    timestamp_column: Column | None = None
    date_column: Column | None = None
    time_column: Column | None = None
    timestamp_format: str = "iso"
    label: str = "start"
    timezone: str | None = None  # IANA name, "offset", or None: the --timezone option
    delimiter: str = ","
    decimal: str = "."
    thousands: str | None = None
    encoding: str = "utf-8"
    header_line: int = 1
    skip_after_header: int = 0
    estimated_column: Column | None = None
    estimated_values: tuple[str, ...] = ()
    description: str = ""
    source: str | None = None

    def quantity(self, name: str) -> QuantityMap | None:
        return next((q for q in self.quantities if q.quantity == name), None)


class _Checker:
    """Pops keys from one TOML table, naming each by its dotted path."""

    def __init__(self, table: object, path: str, allowed: tuple[str, ...], file: str | None):
        self.path, self.file = path, file
        if not isinstance(table, dict):
            raise ProfileError(path, f"must be a table ([{path}]), not {type(table).__name__}", file)
        unknown = [k for k in table if k not in allowed]
        if unknown:
            raise ProfileError(self.key(unknown[0]), "unknown key; allowed here: " + ", ".join(allowed), file)
        self.table = table

    def key(self, name: str) -> str:
        return f"{self.path}.{name}" if self.path else name

    def error(self, name: str, message: str) -> ProfileError:
        return ProfileError(self.key(name), message, self.file)

    def has(self, name: str) -> bool:
        return name in self.table

    def text(self, name: str, default: str | None = None, required: bool = False) -> str | None:
        if name not in self.table:
            if required:
                raise self.error(name, "missing (text)")
            return default
        value = self.table[name]
        if not isinstance(value, str):
            raise self.error(name, f"must be text, not {value!r}")
        return value

    def integer(self, name: str, default: int | None = None, minimum: int = 0,
                required: bool = False) -> int | None:
        if name not in self.table:
            if required:
                raise self.error(name, "missing (a whole number)")
            return default
        value = self.table[name]
        if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
            raise self.error(name, f"must be a whole number ≥ {minimum}, not {value!r}")
        return value

    def positive(self, name: str, default: float = 1.0) -> float:
        """A multiplier: a number from MIN_MULTIPLIER to MAX_MULTIPLIER."""
        if name not in self.table:
            return default
        value = self.table[name]
        if isinstance(value, bool) or not isinstance(value, int | float) or not value > 0 or value == float("inf"):
            raise self.error(name, f"must be a number > 0, not {value!r}")
        if not MIN_MULTIPLIER <= value <= MAX_MULTIPLIER:
            raise self.error(name, f"{value:g} is outside the plausible range of a multiplier "
                                   f"({MIN_MULTIPLIER:g} to {MAX_MULTIPLIER:g})")
        return float(value)

    def boolean(self, name: str, default: bool = False) -> bool:
        value = self.table.get(name, default)
        if not isinstance(value, bool):
            raise self.error(name, f"must be true or false, not {value!r}")
        return value

    def column(self, name: str, positional_only: bool, required: bool = False) -> Column | None:
        if name not in self.table:
            if required:
                raise self.error(name, "missing (a header name, or a 1-based column position)")
            return None
        value = self.table[name]
        if isinstance(value, bool) or not isinstance(value, str | int):
            raise self.error(name, f"must be a header name or a 1-based column position, not {value!r}")
        if isinstance(value, int) and value < 1:
            raise self.error(name, f"column positions count from 1, not {value}")
        if isinstance(value, str) and not value.strip():
            raise self.error(name, "must not be empty")
        if isinstance(value, str) and positional_only:
            raise self.error(name, f"file.header_line = 0 (no header): give the column by position, "
                                   f"not by name {value!r}")
        return value.strip() if isinstance(value, str) else value

    def choice(self, name: str, allowed: tuple, default=None):
        if name not in self.table:
            return default
        value = self.table[name]
        if value not in allowed:
            raise self.error(name, f"must be one of {', '.join(map(repr, allowed))}, not {value!r}")
        return value


def load_profile(path: str | Path) -> Profile:
    """Load and validate a mapping profile.

    Parameters
    ----------
    path
        A TOML file (keys: see the module docstring).

    Returns
    -------
    Profile

    Raises
    ------
    ProfileError
        For an unreadable file, bad TOML, an unknown key, a wrong type or a value outside the
        allowed set; the message names the key and what is allowed.
    """
    file = str(path)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except OSError as exc:
        raise ProfileError("(file)", f"cannot read the profile: {exc.strerror}", file) from None
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError("(syntax)", f"not valid TOML: {exc}", file) from None
    except UnicodeDecodeError:
        raise ProfileError("(syntax)", "not valid TOML: the profile must be UTF-8 text", file) from None
    return profile_from_dict(data, file, default_name=Path(path).stem)


def profile_from_dict(data: dict, file: str | None = None, default_name: str = "profile") -> Profile:
    """Validate an already-parsed TOML document (see :func:`load_profile`)."""
    top = _Checker(data, "", _TOP_KEYS, file)
    name = top.text("name", default_name)
    description = top.text("description", "")

    f = _Checker(data.get("file", {}), "file", _FILE_KEYS, file)
    delimiter = f.text("delimiter", ",")
    if len(delimiter) != 1 or delimiter in "\r\n\"":
        raise f.error("delimiter", f"must be one character other than a quote or line break, not {delimiter!r}")
    decimal = f.choice("decimal", (".", ","), ".")
    if decimal == delimiter:
        raise f.error("decimal", f"{decimal!r} is also the delimiter")
    thousands = f.text("thousands")
    if thousands is not None and (len(thousands) != 1 or thousands in (decimal, delimiter) or thousands.isdigit()):
        raise f.error("thousands", f"must be one character, neither a digit nor the decimal separator "
                                   f"{decimal!r} nor the delimiter {delimiter!r}; not {thousands!r}")
    encoding = f.text("encoding", "utf-8")
    try:
        info = codecs.lookup(encoding)
    except LookupError:
        raise f.error("encoding", f"unknown text encoding {encoding!r} (e.g. utf-8, cp1252, latin-1)") from None
    if not getattr(info, "_is_text_encoding", True):
        raise f.error("encoding", f"{encoding!r} is not a text encoding (it transforms bytes or text); use a "
                                  "character set such as utf-8, cp1252 or latin-1")
    encoding = info.name
    header_line = f.integer("header_line", 1, minimum=0)
    skip_after_header = f.integer("skip_after_header", 0, minimum=0)
    positional = header_line == 0

    if "meter" not in data:
        raise ProfileError("meter", "missing table [meter] (give meter.column or meter.id)", file)
    m = _Checker(data["meter"], "meter", _METER_KEYS, file)
    meter_column = m.column("column", positional)
    meter_id = m.text("id")
    if (meter_column is None) == (meter_id is None):
        raise m.error("column", "give exactly one of meter.column (a column of meter ids) and meter.id "
                                "(a fixed id for a single-meter file)")
    if meter_id is not None and not meter_id.strip():
        raise m.error("id", "must not be empty")
    multiplier = m.positive("multiplier")

    if "time" not in data:
        raise ProfileError("time", "missing table [time]", file)
    t = _Checker(data["time"], "time", _TIME_KEYS, file)
    ts_column = t.column("column", positional)
    date_column = t.column("date_column", positional)
    time_column = t.column("time_column", positional)
    if ts_column is not None and (date_column is not None or time_column is not None):
        raise t.error("column", "give either time.column or time.date_column + time.time_column, not both")
    if ts_column is None and (date_column is None or time_column is None):
        missing = "date_column" if date_column is None and time_column is not None else \
            "time_column" if time_column is None and date_column is not None else "column"
        raise t.error(missing, "missing: give time.column, or both time.date_column and time.time_column")
    fmt = t.text("format", "iso")
    label = t.choice("label", ("start", "end"), "start")
    tz = t.text("timezone")
    if tz is not None and tz != OFFSET:
        from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

        try:
            ZoneInfo(tz)
        except (ZoneInfoNotFoundError, ValueError):
            raise t.error("timezone", f"unknown time zone {tz!r}; use an IANA name such as Europe/Berlin, "
                                      f"or {OFFSET!r} when every timestamp carries its UTC offset") from None
    if fmt != "iso":
        _check_format(fmt, t)
        if "%z" in fmt and tz != OFFSET:
            raise t.error("timezone", f"time.format reads a UTC offset (%z): set timezone = {OFFSET!r}")
        if tz == OFFSET and "%z" not in fmt:
            raise t.error("format", f"timezone = {OFFSET!r} needs %z in the format to read the offset")
    if "interval_minutes" not in t.table:
        raise t.error("interval_minutes", "missing; one of " + ", ".join(map(str, ALLOWED_INTERVALS)))
    interval = t.choice("interval_minutes", ALLOWED_INTERVALS)
    if isinstance(interval, bool) or not isinstance(interval, int):
        raise t.error("interval_minutes", "must be one of " + ", ".join(map(str, ALLOWED_INTERVALS)))

    if "quantities" not in data:
        raise ProfileError("quantities", "missing table [quantities.kwh] (at least kwh or kwh_net)", file)
    qtable = _Checker(data["quantities"], "quantities", tuple(QUANTITY_UNITS), file)
    quantities = []
    for qname in QUANTITY_UNITS:
        if not qtable.has(qname):
            continue
        q = _Checker(qtable.table[qname], f"quantities.{qname}", _QUANTITY_KEYS, file)
        column = q.column("column", positional, required=True)
        unit_text = q.text("unit", required=True)
        units = QUANTITY_UNITS[qname]
        if unit_text.strip().lower() not in units:
            raise q.error("unit", f"{unit_text!r} is not a unit of {qname}; use one of "
                                  + ", ".join(n for n, _ in units.values()))
        unit, unit_factor = units[unit_text.strip().lower()]
        channel = q.positive("multiplier")
        invert = q.boolean("invert")
        quantities.append(QuantityMap(qname, column, unit, channel, invert,
                                      unit_factor * multiplier * channel * (-1.0 if invert else 1.0)))
    present = {q.quantity for q in quantities}
    for net, pair in NET_SPLITS.items():
        clash = present & set(pair)
        if net in present and clash:
            raise ProfileError(f"quantities.{sorted(clash)[0]}",
                               f"quantities.{net} already gives {pair[0]} and {pair[1]}; map one or the other", file)
    if "kwh" not in present and "kwh_net" not in present:
        raise ProfileError("quantities.kwh", "missing: every profile maps kwh (or the signed kwh_net)", file)

    est_column, est_values = None, ()
    if "estimated" in data:
        e = _Checker(data["estimated"], "estimated", _ESTIMATED_KEYS, file)
        est_column = e.column("column", positional, required=True)
        raw = e.table.get("values")
        if raw is None:
            raise e.error("values", "missing: the text (or list of texts) that marks an estimated interval")
        if isinstance(raw, str):
            raw = [raw]
        if not isinstance(raw, list) or not raw or not all(isinstance(v, str) and v.strip() for v in raw):
            raise e.error("values", f"must be a non-empty text or a list of non-empty texts, not {raw!r}")
        est_values = tuple(v.strip().casefold() for v in raw)

    return Profile(
        name=name, description=description, interval_minutes=interval, quantities=tuple(quantities),
        meter_column=meter_column, meter_id=meter_id.strip() if meter_id else None, multiplier=multiplier,
        timestamp_column=ts_column, date_column=date_column, time_column=time_column,
        timestamp_format=fmt, label=label, timezone=tz, delimiter=delimiter, decimal=decimal,
        thousands=thousands, encoding=encoding, header_line=header_line,
        skip_after_header=skip_after_header, estimated_column=est_column, estimated_values=est_values,
        source=file,
    )


def _check_format(fmt: str, t: _Checker) -> None:
    """A strptime pattern must round-trip a full date and time (day, month, year, hour, minute)."""
    sample = datetime(2031, 11, 23, 17, 45, tzinfo=dt_timezone(timedelta(hours=-3, minutes=-30)))
    try:
        shown = sample.strftime(fmt)
        back = datetime.strptime(shown, fmt)
    except ValueError as exc:
        raise t.error("format", f"not a usable strptime pattern ({exc}); e.g. \"%d.%m.%Y %H:%M\" or \"iso\"") from None
    got = (back.year, back.month, back.day, back.hour, back.minute)
    if got != (2031, 11, 23, 17, 45):
        raise t.error("format", f"{fmt!r} does not hold a full date and time (needs day, month, year, hour "
                                "and minute, e.g. \"%d.%m.%Y %H:%M\"), or give \"iso\"")
