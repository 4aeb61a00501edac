"""The dashboard's tables: which columns each page shows first and which wait behind "All
columns" (``detail``), so that at 1280 × 800 the columns a reader came for are in sight on
arrival and a printout never runs past the page.

A column is a header (unit in it), a getter over one row's dict, a kind for the number filters
of :mod:`auditor.presentation` (``text``, ``int``, ``energy``, ``power``, ``pf``, ``percent``,
``money``, ``time``) and the ``detail`` flag. A getter may return ``{"value": x, "note": text}``:
the macro shows the note (a peak's local time) under the value.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from auditor.presentation import localtime


@dataclass(frozen=True)
class Col:
    header: str
    get: Callable[[dict], object]
    kind: str = "text"
    detail: bool = False

    @property
    def numeric(self) -> bool:
        return self.kind not in ("text", "time")


def rows_of(columns: list[Col], items: list[dict]) -> list[list]:
    return [[c.get(item) for c in columns] for item in items]


def _pct(x):
    return None if x is None else 100.0 * x


def peak(value, at: str | None, tz: str | None) -> dict:
    """A peak with the local time of its interval start under it, zone named (``at`` is an ISO
    time, ``tz`` the site's IANA zone)."""
    return {"value": value, "note": localtime(at, tz) if at else None}


def period_label(p: dict) -> str:
    from auditor.charts import period_label as label

    return label(p)


def audit_columns(audit: dict, charge_keys: list[str]) -> list[Col]:
    """The meter page's audit by period: the period, energy, PF, the kW peak and when, every
    charge, reactive and total charges and coverage first; the other figures on demand."""
    cur = audit.get("currency") or ""
    tz = audit.get("timezone")
    cols = [
        Col("Period", period_label),
        Col("Start", lambda p: p["start"], detail=True),
        Col("End (excl.)", lambda p: p["end"], detail=True),
        Col("Energy (kWh)", lambda p: p["kwh"], "energy"),
        Col("Lagging (kvarh)", lambda p: p["kvarh_lag"], "energy", detail=True),
        Col("Leading (kvarh)", lambda p: p["kvarh_lead"], "energy", detail=True),
        Col("Energy PF (0–1)", lambda p: p["pf"], "pf"),
        Col("tan φ", lambda p: p["tan_phi"], "pf", detail=True),
        Col("Peak (kW), local time", lambda p: peak(p["peak_kw"], p.get("peak_kw_at"), tz), "power"),
        Col("Peak (kVA), local time", lambda p: peak(p["peak_kva"], p.get("peak_kva_at"), tz), "power", detail=True),
        Col("Peak lagging (kvar)", lambda p: p["peak_kvar"], "power", detail=True),
        Col("PF at kW peak (0–1)", lambda p: p["pf_at_peak"], "pf", detail=True),
        Col("Load factor (%)", lambda p: _pct(p["load_factor"]), "percent", detail=True),
        Col("Estimated intervals", lambda p: p["estimated_intervals"], "int", detail=True),
    ]
    for k in charge_keys:
        cols.append(Col(f"{k.replace('_', ' ')} ({cur})", lambda p, k=k: p["charges"].get(k), "money"))
    cols.append(Col(f"Reactive charges ({cur})", lambda p: p["reactive_total"], "money"))
    cols.append(Col(f"Total ({cur})", lambda p: p["total"], "money"))
    cols.append(Col("Coverage (%)", lambda p: _pct(p["coverage"]), "percent"))
    return cols
