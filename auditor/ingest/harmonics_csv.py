"""A harmonic current spectrum measured at the point of connection, from CSV.

The contract
------------
Optional leading comment lines give the measurement's fundamental, then a header row and one
row per harmonic order::

    # fundamental_a = 433
    # (or)  kw = 250
    #       pf = 0.86
    # voltage_v = 400            (optional: the bus voltage at the measurement)
    order,current_pct,voltage_pct
    5,18.0,1.1
    7,11.5,0.8

Columns: ``order`` (required, a whole number 1 … 50) and exactly one of ``current_pct``
(percent of the fundamental current at the measurement) and ``current_a`` (amperes rms, per
phase); ``voltage_pct`` (optional) is the background voltage distortion of the supply per order,
in percent of the nominal phase voltage. An order-1 row may give the fundamental (its
``current_a``, or 100 in ``current_pct``). With ``current_pct`` the fundamental current must be
known: a ``fundamental_a`` comment (or an order-1 row in amperes), or ``kw`` and ``pf``
comments, or the same values given by the caller. Comment keys are ``key = value`` or
``key: value``; unknown keys are errors, like unknown columns.

Every problem names the file, the line and the column; all problems of a file are collected
(the first 50) before anything is used. Numbers use a decimal point; a byte-order mark is
skipped; the delimiter is a comma or a semicolon (from the header line).
"""
from __future__ import annotations

import csv
import difflib
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

from auditor.errors import InputError, Problem

__all__ = ["MeasuredSpectrum", "read_spectrum", "parse_spectrum", "COLUMNS", "COMMENT_KEYS"]

COLUMNS = ("order", "current_pct", "current_a", "voltage_pct")
COMMENT_KEYS = ("fundamental_a", "kw", "pf", "voltage_v")
MAX_PROBLEMS = 50
MAX_BYTES = 1_000_000  # a spectrum is a few dozen rows; anything larger is not one


@dataclass(frozen=True)
class MeasuredSpectrum:
    """What the file says, checked: orders and currents, and the measurement's fundamental."""

    name: str
    orders: tuple[int, ...]
    current_pct: tuple[float, ...] | None
    current_a: tuple[float, ...] | None
    voltage_pct: tuple[float, ...] | None
    fundamental_a: float | None = None
    kw: float | None = None
    pf: float | None = None
    voltage_v: float | None = None
    lines: tuple[int, ...] = field(default=(), repr=False)

    def to_dict(self) -> dict:
        return {"name": self.name, "orders": list(self.orders),
                "current_pct": None if self.current_pct is None else list(self.current_pct),
                "current_a": None if self.current_a is None else list(self.current_a),
                "voltage_pct": None if self.voltage_pct is None else list(self.voltage_pct),
                "fundamental_a": self.fundamental_a, "kw": self.kw, "pf": self.pf,
                "voltage_v": self.voltage_v}


def read_spectrum(path: str | Path) -> MeasuredSpectrum:
    """Read and check a spectrum file (module docstring). Raises InputError."""
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_BYTES:
            raise InputError(str(path), f"{size:,} bytes is too large for a harmonic spectrum "
                                        f"(at most {MAX_BYTES:,}); is this the right file?")
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(str(path), f"cannot read the file ({exc.strerror})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise InputError(str(path), Problem("not UTF-8 text", line)) from None
    return parse_spectrum(text, str(path))


def _number(text: str, line: int, column: str, problems: list[Problem], *, low: float = 0.0,
            high: float | None = None, what: str = "a number") -> float | None:
    try:
        value = float(text.strip())
    except ValueError:
        problems.append(Problem(f"{text.strip()!r} is not {what}", line, column))
        return None
    if not math.isfinite(value) or value < low or (high is not None and value > high):
        bounds = f"from {low:g}" + (f" to {high:g}" if high is not None else " up")
        problems.append(Problem(f"{text.strip()} is out of range ({bounds})", line, column))
        return None
    return value


def parse_spectrum(text: str, name: str) -> MeasuredSpectrum:
    """Check a spectrum given as text; ``name`` names it in every error (a file name)."""
    problems: list[Problem] = []
    meta: dict[str, float] = {}
    lines = text.splitlines()
    header_at = None
    for i, line in enumerate(lines, start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            body = stripped.lstrip("#").strip()
            if not body or ("=" not in body and ":" not in body):
                continue  # a plain comment
            sep = "=" if "=" in body and (":" not in body or body.index("=") < body.index(":")) else ":"
            key, _, value = body.partition(sep)
            key = key.strip().lower()
            if key not in COMMENT_KEYS:
                close = difflib.get_close_matches(key, COMMENT_KEYS, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else f"; known: {', '.join(COMMENT_KEYS)}"
                problems.append(Problem(f"unknown measurement key {key!r}{hint}", i, key))
                continue
            if key in meta:
                problems.append(Problem(f"{key} is given twice", i, key))
                continue
            high = 1.0 if key == "pf" else None
            number = _number(value, i, key, problems, high=high, what="a number")
            if number is not None:
                if number <= 0:
                    problems.append(Problem(f"{key} must be greater than 0", i, key))
                else:
                    meta[key] = number
            continue
        header_at = i
        break
    if header_at is None:
        raise InputError(name, Problem("no header row: expected order,current_pct (or current_a) "
                                       "and optionally voltage_pct", len(lines) or 1))
    header_line = lines[header_at - 1]
    delimiter = ";" if header_line.count(";") > header_line.count(",") else ","
    rows = list(csv.reader(io.StringIO("\n".join(lines[header_at - 1:])), delimiter=delimiter))
    header = [h.strip().lower() for h in rows[0]]
    for h in header:
        if h not in COLUMNS:
            close = difflib.get_close_matches(h, COLUMNS, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else f"; allowed: {', '.join(COLUMNS)}"
            problems.append(Problem(f"unknown column{hint}", header_at, h))
    for h in set(header):
        if header.count(h) > 1:
            problems.append(Problem("column given twice", header_at, h))
    if "order" not in header:
        problems.append(Problem("the column 'order' is required", header_at, "order"))
    current = [c for c in ("current_pct", "current_a") if c in header]
    if len(current) != 1:
        problems.append(Problem("give exactly one of the columns current_pct and current_a", header_at,
                                current[1] if len(current) > 1 else "current_pct"))
    if problems:
        raise InputError(name, problems[:MAX_PROBLEMS])
    cur = current[0]
    pos = {h: header.index(h) for h in header}
    orders: list[int] = []
    currents: list[float] = []
    voltages: list[float] = []
    line_of: list[int] = []
    seen: dict[int, int] = {}
    for k, row in enumerate(rows[1:], start=header_at + 1):
        if not row or all(not c.strip() for c in row) or row[0].lstrip().startswith("#"):
            continue
        if len(row) != len(header):
            problems.append(Problem(f"{len(row)} cells where the header has {len(header)}", k))
            continue
        o_text = row[pos["order"]].strip()
        try:
            order = int(o_text)
        except ValueError:
            problems.append(Problem(f"{o_text!r} is not a whole harmonic order", k, "order"))
            order = None
        if order is not None and not 1 <= order <= 50:
            problems.append(Problem(f"order {order} is out of range (1 to 50)", k, "order"))
            order = None
        if order is not None and order in seen:
            problems.append(Problem(f"order {order} is given twice (first on line {seen[order]})", k, "order"))
            order = None
        high = 100.0 if cur == "current_pct" and order != 1 else None
        value = _number(row[pos[cur]], k, cur, problems, high=high)
        if cur == "current_pct" and order == 1 and value is not None and abs(value - 100.0) > 1e-6:
            problems.append(Problem("the fundamental (order 1) is 100 % of itself", k, cur))
        volt = 0.0
        if "voltage_pct" in pos:
            cell = row[pos["voltage_pct"]]
            volt = 0.0 if not cell.strip() else _number(cell, k, "voltage_pct", problems, high=100.0)
        if order is None or value is None or volt is None:
            if len(problems) >= MAX_PROBLEMS:
                break
            continue
        seen[order] = k
        orders.append(order)
        currents.append(value)
        voltages.append(volt)
        line_of.append(k)
    if not problems and not any(o >= 2 for o in orders):
        problems.append(Problem("no harmonic rows (orders 2 to 50)", len(lines)))
    if problems:
        raise InputError(name, problems[:MAX_PROBLEMS])
    if cur == "current_a" and 1 in orders:
        meta.setdefault("fundamental_a", currents[orders.index(1)])
    return MeasuredSpectrum(
        name=Path(name).name, orders=tuple(orders),
        current_pct=tuple(currents) if cur == "current_pct" else None,
        current_a=tuple(currents) if cur == "current_a" else None,
        voltage_pct=tuple(voltages) if "voltage_pct" in pos else None,
        fundamental_a=meta.get("fundamental_a"), kw=meta.get("kw"), pf=meta.get("pf"),
        voltage_v=meta.get("voltage_v"), lines=tuple(line_of))
