"""Terminal rendering shared by the commands: a plain aligned table and JSON from one dict.

Tables fit :data:`WIDTH` (120) columns: a command gives each column a ``detail`` flag, and
only ``--wide`` shows the detail columns; a table still too wide has its longest text cells
shortened with "…" (numbers are never cut); a table whose every word matters (a specification)
is written by :func:`wrapped_table`, its long cells continuing on the next lines instead. Times
are shown by :func:`local_time`, in the site's local time with the zone named (the JSON keeps
UTC ISO strings).

numpy is not imported here: a value can only be a numpy scalar once numpy is loaded, so the
numpy cases are looked up in ``sys.modules`` (``auditor --help`` stays free of numpy).
"""
from __future__ import annotations

import json
import math
import sys
import textwrap
from collections.abc import Iterable, Sequence
from datetime import UTC, date, datetime
from typing import Any

import click

#: Terminal columns a table fits in unless ``--wide`` is given.
WIDTH = 120
#: Text columns are never shortened below this many characters.
MIN_TEXT = 10


class _NoNumpy:
    """Stands in for numpy's scalar types while numpy is not loaded (nothing is an instance)."""

    integer = floating = bool_ = number = type("_Never", (), {})


def _numpy():
    return sys.modules.get("numpy") or _NoNumpy


def _default(value: Any) -> Any:
    np = _numpy()
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return None if not np.isfinite(value) else float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if hasattr(value, "isoformat"):
        return value.isoformat()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def _clean(value: Any) -> Any:
    """Replace NaN/inf by None so the JSON is standard (no bare NaN tokens)."""
    np = _numpy()
    if isinstance(value, float | np.floating):
        return None if not math.isfinite(float(value)) else float(value)
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    return value


def to_json(data: Any) -> str:
    return json.dumps(_clean(data), indent=2, default=_default, allow_nan=False)


def echo_json(data: Any) -> None:
    click.echo(to_json(data))


def fmt(value: Any, digits: int = 2) -> str:
    np = _numpy()
    if value is None:
        return "-"
    if isinstance(value, float | np.floating):
        if not math.isfinite(float(value)):
            return "-"
        return f"{value:,.{digits}f}"
    return str(value)


def local_time(value: Any, tz: str | None = None, *, zone: bool = True, seconds: bool = False) -> str:
    """An instant as local wall time: ``2025-01-14 10:15 CET``.

    ``value`` is an ISO 8601 text (with a UTC offset or ``Z``), an aware or naive (taken as
    UTC) ``datetime``, or UTC epoch seconds; ``tz`` the IANA zone to show it in (default: the
    offset the value carries). ``zone`` appends the zone's abbreviation for that instant (CET /
    CEST, GMT / BST; the numeric offset where a zone has no abbreviation), so a time in the
    repeated autumn hour stays unambiguous. None or an empty text gives ``-``.
    """
    if value is None or value == "":
        return "-"
    if isinstance(value, datetime):
        dt = value
    elif isinstance(value, int | float) and not isinstance(value, bool):
        dt = datetime.fromtimestamp(float(value), UTC)
    else:
        text = str(value).strip()
        dt = datetime.fromisoformat(text[:-1] + "+00:00" if text.endswith("Z") else text)
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=UTC)
    if tz:
        from zoneinfo import ZoneInfo

        dt = dt.astimezone(ZoneInfo(tz))
    out = dt.strftime("%Y-%m-%d %H:%M:%S" if seconds else "%Y-%m-%d %H:%M")
    if zone:
        out += " " + (dt.tzname() or dt.strftime("%z"))
    return out


def wrap(text: str, indent: str = "", width: int = WIDTH) -> str:
    """A line of prose (a warning, an explanation) wrapped to ``width`` columns, continuation
    lines indented under the first line's text."""
    return textwrap.fill(text, width=width, initial_indent=indent, subsequent_indent=indent + "  ",
                         break_long_words=False, break_on_hyphens=False)


def _shorten(text: str, width: int) -> str:
    return text if len(text) <= width else text[: max(1, width - 1)] + "…"


def table(headers: Sequence[str], rows: Iterable[Sequence[Any]], digits: int | Sequence[int] = 2, *,
          detail: Sequence[bool] | None = None, wide: bool = False, width: int | None = WIDTH,
          right: Sequence[bool] | None = None) -> str:
    """An aligned plain-text table; numbers right-aligned.

    Parameters
    ----------
    headers, rows
        Column headings and rows of cells (numbers, texts, None for "-").
    digits
        Decimals of the number cells: one for all columns, or one per column.
    detail
        Per column, True for a detail column: left out unless ``wide``.
    wide
        Show the detail columns and never shorten a cell.
    width
        The most columns a line may take (default :data:`WIDTH`); when the table is wider,
        its longest text columns are shortened with "…", never below :data:`MIN_TEXT` or their
        heading. None: no limit.
    right
        Per column, True to right-align it whatever its cells (numbers already formatted as
        text, with decimals that differ by row).
    """
    np = _numpy()
    headers = list(headers)
    raw = [list(r) for r in rows]  # rows may be a generator: read it once
    per_col = list(digits) if isinstance(digits, Sequence) else [digits] * len(headers)
    forced = list(right) if right is not None else [False] * len(headers)
    if detail is not None and not wide:
        keep = [i for i, d in enumerate(detail) if not d]
        headers = [headers[i] for i in keep]
        per_col = [per_col[i] for i in keep]
        forced = [forced[i] for i in keep]
        raw = [[r[i] for i in keep] for r in raw]
    cells = [[fmt(c, per_col[i]) for i, c in enumerate(row)] for row in raw]
    widths = [len(h) for h in headers]
    for row in cells:
        for i, c in enumerate(row):
            widths[i] = max(widths[i], len(c))
    numeric = [
        forced[i] or (all(isinstance(r[i], int | float | np.number) or r[i] is None for r in raw) and bool(raw))
        for i in range(len(headers))
    ]
    if width is not None and not wide:
        widths = _fit(widths, headers, numeric, width)
        cells = [[c if numeric[i] else _shorten(c, widths[i]) for i, c in enumerate(row)] for row in cells]

    def line(values: Sequence[str]) -> str:
        return "  ".join(
            v.rjust(widths[i]) if numeric[i] else v.ljust(widths[i]) for i, v in enumerate(values)
        ).rstrip()
    out = [line(headers), "  ".join("-" * w for w in widths)]
    out.extend(line(r) for r in cells)
    return "\n".join(out)


def _fit(widths: list[int], headers: Sequence[str], numeric: Sequence[bool], width: int) -> list[int]:
    """Column widths shortened, widest text column first, until the table fits ``width``."""
    widths = list(widths)
    floor = [max(MIN_TEXT, len(h)) for h in headers]
    while sum(widths) + 2 * (len(widths) - 1) > width:
        text = [i for i in range(len(widths)) if not numeric[i] and widths[i] > floor[i]]
        if not text:
            break
        i = max(text, key=lambda k: widths[k])
        over = sum(widths) + 2 * (len(widths) - 1) - width
        others = [widths[k] for k in text if k != i]
        # cut the widest down to the next widest (or as far as needed), whichever is less
        target = max(floor[i], widths[i] - over, max(others, default=0))
        widths[i] = target if target < widths[i] else widths[i] - 1
    return widths


def wrapped_table(headers: Sequence[str], rows: Iterable[Sequence[Any]], wrap_cols: dict[int, int],
                  wide: bool = False, width: int = WIDTH) -> str:
    """A table of text whose long cells (and headings) continue on the next lines instead of
    being cut: a specification or a comparison, where every word of a rating or a note matters.
    ``wrap_cols`` maps each column that may wrap to the narrowest width it may be given; they
    share what the other columns leave of ``width``, the last taking the rest. With ``wide`` a
    plain table, nothing wrapped. Cells are shown as text (``fmt``), left-aligned."""
    rows = [[fmt(c) for c in r] for r in rows]
    if wide:
        return table(headers, rows, wide=True)
    n = len(headers)
    natural = [max([len(headers[i])] + [len(r[i]) for r in rows]) for i in range(n)]
    words = [max([len(w) for w in str(headers[i]).split()] or [0]) for i in range(n)]
    floor = {i: max(m, words[i]) for i, m in wrap_cols.items()}
    widths = list(natural)
    cols = sorted(wrap_cols)
    room = width - sum(natural[i] for i in range(n) if i not in wrap_cols) - 2 * (n - 1)
    for k, i in enumerate(cols):
        left = len(cols) - k
        share = (room - sum(widths[j] for j in cols[:k])) // left if k < len(cols) - 1 else \
            room - sum(widths[j] for j in cols[:k])
        widths[i] = max(floor[i], min(natural[i], share))

    def cut(text: str, i: int) -> list[str]:
        if i not in wrap_cols:
            return [text]
        return textwrap.wrap(text, widths[i], break_long_words=True, break_on_hyphens=False) or [""]

    def lines_of(cells: Sequence[str]) -> list[list[str]]:
        parts = [cut(str(c), i) for i, c in enumerate(cells)]
        depth = max(len(p) for p in parts)
        return [[p[k] if k < len(p) else "" for p in parts] for k in range(depth)]

    head = lines_of(headers)
    body = [line for r in rows for line in lines_of(r)]
    shown = [max(len(x[i]) for x in head + body) for i in range(n)]
    out = ["  ".join(v.ljust(shown[i]) for i, v in enumerate(x)).rstrip() for x in head]
    out.append("  ".join("-" * w for w in shown))
    out += ["  ".join(v.ljust(shown[i]) for i, v in enumerate(x)).rstrip() for x in body]
    return "\n".join(out)
