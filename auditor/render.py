"""Terminal rendering shared by the commands: a plain aligned table and JSON from one dict.

numpy is not imported here: a value can only be a numpy scalar once numpy is loaded, so the
numpy cases are looked up in ``sys.modules`` (``auditor --help`` stays free of numpy).
"""
from __future__ import annotations

import json
import math
import sys
from collections.abc import Iterable, Sequence
from datetime import date, datetime
from typing import Any

import click


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


def table(headers: Sequence[str], rows: Iterable[Sequence[Any]], digits: int = 2) -> str:
    """An aligned plain-text table; numbers right-aligned."""
    np = _numpy()
    raw = [list(r) for r in rows]  # rows may be a generator: read it once
    cells = [[fmt(c, digits) for c in row] for row in raw]
    widths = [len(h) for h in headers]
    for row in cells:
        for i, c in enumerate(row):
            widths[i] = max(widths[i], len(c))
    numeric = [
        all(isinstance(r[i], int | float | np.number) or r[i] is None for r in raw) and raw
        for i in range(len(headers))
    ]
    def line(values: Sequence[str]) -> str:
        return "  ".join(
            v.rjust(widths[i]) if numeric[i] else v.ljust(widths[i]) for i, v in enumerate(values)
        ).rstrip()
    out = [line(list(headers)), "  ".join("-" * w for w in widths)]
    out.extend(line(r) for r in cells)
    return "\n".join(out)
