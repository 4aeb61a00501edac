"""Jinja filters for numbers: thousands separators, fixed decimals, a dash for "no value"."""
from __future__ import annotations

import math

from markupsafe import Markup

DIGITS = {"int": 0, "energy": 0, "power": 1, "pf": 3, "percent": 1, "money": 2}


def num(value, digits: int = 2) -> str:
    """``1,234.50``; ``–`` for None, NaN or infinity (an undefined figure, never 0)."""
    if value is None or isinstance(value, bool):
        return "–" if value is None else str(value)
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(x):
        return "–"
    return f"{x:,.{digits}f}"


def cell(value, kind: str = "text") -> str:
    """A table cell by column kind (see :class:`auditor.services.report.Column`)."""
    if kind == "text":
        return "–" if value is None else str(value)
    return num(value, DIGITS.get(kind, 2))


def pct(value, digits: int = 1) -> str:
    """A fraction as percent: 0.9971 → ``99.7 %``."""
    if value is None:
        return "–"
    return f"{num(100.0 * float(value), digits)} %"


def years(value) -> str:
    return "no payback" if value is None else f"{num(value, 1)} years"


def jsonblock(text: str) -> Markup:
    """JSON text made safe inside ``<script type="application/json">``: ``<``, ``>`` and ``&``
    become JSON escapes, so no value can close the element."""
    return Markup(str(text).replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026"))


def sortkey(value) -> str:
    """A ``data-value`` for client-side sorting: the number, or empty for no value."""
    if value is None:
        return ""
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    return repr(x) if math.isfinite(x) else ""


def register_filters(filters: dict) -> None:
    filters.update(num=num, cell=cell, pct=pct, years=years, jsonblock=jsonblock, sortkey=sortkey)
