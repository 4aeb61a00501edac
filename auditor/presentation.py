"""Presentation shared by the dashboard and the exported documents (report, billing query).

Jinja filters for numbers (thousands separators, fixed decimals, a dash for "no value"), for
instants in a site's local time with the zone named (``localtime``, from
:func:`auditor.render.local_time`, the one formatting the command line uses too) and
:func:`document_environment`, the plain Jinja environment (no Flask) that renders the report
and the billing query from the dashboard's template folder. It sits below both the web layer
and the services and imports neither.
"""
from __future__ import annotations

import math
from functools import lru_cache
from pathlib import Path

from markupsafe import Markup

from auditor.render import local_time

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
    """A table cell by column kind (see :class:`auditor.services.report.Column`; ``time`` shows an
    ISO instant as local wall time with its zone)."""
    if kind == "text":
        return "–" if value is None else str(value)
    if kind == "time":  # an ISO instant carrying its local offset
        return localtime(value)
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


def localtime(value, tz: str | None = None, zone: bool = True) -> str:
    """An instant (ISO text, datetime or epoch seconds) in ``tz``: ``2025-01-14 10:15 CET``;
    ``–`` for no value or a text that is not a time."""
    if value is None or value == "":
        return "–"
    try:
        return local_time(value, tz, zone=zone)
    except (ValueError, TypeError, KeyError):
        return str(value)


def register_filters(filters: dict) -> None:
    filters.update(num=num, cell=cell, pct=pct, years=years, jsonblock=jsonblock, sortkey=sortkey,
                   localtime=localtime)


def web_folder() -> Path:
    """The folder of the ``auditor.web`` package (templates and static files), found without
    importing it (importing it would load Flask)."""
    from importlib.util import find_spec

    spec = find_spec("auditor.web")
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError("the auditor.web package files are missing from this installation")
    return Path(next(iter(spec.submodule_search_locations)))


@lru_cache(maxsize=1)
def document_environment():
    """A Jinja environment over the dashboard's templates with the number filters, HTML
    autoescaped, for documents rendered outside a request (report, billing query)."""
    from jinja2 import Environment, FileSystemLoader, select_autoescape

    env = Environment(loader=FileSystemLoader(str(web_folder() / "templates")),
                      autoescape=select_autoescape(["html"]))
    register_filters(env.filters)
    return env


def stylesheet() -> str:
    """The dashboard's style sheet (inlined in self-contained HTML documents)."""
    return (web_folder() / "static" / "style.css").read_text(encoding="utf-8")
