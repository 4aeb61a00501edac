"""The portfolio: one row per meter under a tariff, and the tariffs the dashboard offers by name.

Its neighbours by concern: :mod:`auditor.services.cache` (the cached audits and sizing cases,
the data version), :mod:`auditor.services.meter_charts` (a meter's chart data) and
:mod:`auditor.services.import_views` (import batches and data quality). Everything here reads
the store and calls the audit and correction services; nothing is recomputed by hand.

References
----------
.. [1] IEEE Std 1459-2010, sinusoidal definitions: PF = 1 / √(1 + tan² φ) (tariff thresholds).
"""
from __future__ import annotations

import math
import threading
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import date
from pathlib import Path

from auditor.errors import NotFoundError, TariffError, UsageError
from auditor.services.cache import cached_audit
from auditor.services.correction import best_scenario, list_scenarios
from auditor.services.meters import list_meters
from auditor.store import Store
from auditor.tariffs import EXAMPLES_DIR, Tariff, load_tariff

__all__ = ["TariffChoice", "tariff_choices", "find_tariff", "load_named_tariff", "tariff_threshold_pf",
           "portfolio_summary"]


# --------------------------------------------------------------------------------------------
# tariffs by name
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TariffChoice:
    """A tariff file the dashboard offers: its name (file stem), path and title."""

    name: str
    path: Path
    title: str
    error: str | None = None


def tariff_choices(extra_dirs: Iterable[str | Path] = ()) -> list[TariffChoice]:
    """The shipped example tariffs and the ``*.toml`` files of ``extra_dirs``, by name.

    ``extra_dirs`` holds folders and single tariff files; a later entry overrides an earlier one
    (and any example) of the same name. A file that does not validate is listed with its error
    rather than hidden.
    """
    found: dict[str, Path] = {p.stem: p for p in sorted(EXAMPLES_DIR.glob("*.toml"))}
    for d in extra_dirs:
        d = Path(d)
        if d.is_dir():
            found.update({p.stem: p for p in sorted(d.glob("*.toml"))})
        elif d.is_file():
            found[d.stem] = d
    out = []
    for name, path in sorted(found.items()):
        try:
            out.append(TariffChoice(name, path, _load_cached(path).name))
        except TariffError as exc:
            out.append(TariffChoice(name, path, name, error=exc.message))
    return out


def find_tariff(name: str, extra_dirs: Iterable[str | Path] = ()) -> TariffChoice:
    """The tariff called ``name`` (a file stem, never a path: the browser chooses by name)."""
    for c in tariff_choices(extra_dirs):
        if c.name == name:
            if c.error:
                raise TariffError("-", c.error)
            return c
    known = ", ".join(c.name for c in tariff_choices(extra_dirs))
    raise NotFoundError(f"no tariff {name!r}; known tariffs: {known}")


_tariff_cache: dict[tuple[str, float], Tariff] = {}
_tariff_lock = threading.Lock()


def _load_cached(path: Path) -> Tariff:
    key = (str(path), path.stat().st_mtime)
    with _tariff_lock:
        if key in _tariff_cache:
            return _tariff_cache[key]
    t = load_tariff(path)
    with _tariff_lock:
        _tariff_cache[key] = t
    return t


def load_named_tariff(name: str, extra_dirs: Iterable[str | Path] = ()) -> Tariff:
    return _load_cached(find_tariff(name, extra_dirs).path)


def tariff_threshold_pf(tariff: Tariff) -> list[dict]:
    """The power factors at which the tariff's reactive clauses start to charge.

    tan φ limits are turned into PF by PF = 1 / √(1 + tan² φ) (IEEE Std 1459-2010, sinusoidal
    definitions); clauses without a PF threshold (kVA demand, leading energy) are left out.
    """
    out = []
    for m in tariff.reactive:
        key = Tariff.key_of(m)
        if m.kind in ("kvarh_excess", "kvarh_banded"):
            out.append({"key": key, "pf": 1.0 / math.hypot(1.0, m.tan_phi_limit)})
        elif m.kind == "pf_demand_adjust":
            out.append({"key": key, "pf": m.base_pf})
        elif m.kind == "pf_percent":
            out.append({"key": key, "pf": m.threshold_pf})
        elif m.kind == "kvar_demand":
            out.append({"key": key, "pf": 1.0 / math.hypot(1.0, m.allowance_ratio)})
    return out


# --------------------------------------------------------------------------------------------
# portfolio
# --------------------------------------------------------------------------------------------
def _year_before(d: date) -> date:
    try:
        return d.replace(year=d.year - 1)
    except ValueError:  # 29 February
        return d.replace(year=d.year - 1, day=28)


def portfolio_summary(store: Store, tariff: Tariff) -> list[dict]:
    """One row per meter, worst power factor first.

    Keys: site, meter, latest_pf and latest_period (last billing period with a PF),
    reactive_12m and total_12m (charges of the periods ending within the last 12 months of
    data, in the tariff's currency), months_12m, coverage (intervals present / expected over
    the meter's span), best (the saved scenario with the best NPV: name, annual_savings,
    simple_payback_years, npv) and error (why a meter could not be audited).
    """
    rows = []
    for m in list_meters(store):
        row = {"site": m["site"], "meter": m["meter"], "coverage": m["coverage"],
               "first": m["first"], "last": m["last"], "intervals": m["intervals"],
               "latest_pf": None, "latest_period": None, "reactive_12m": None, "total_12m": None,
               "months_12m": 0, "currency": tariff.currency, "best": best_scenario(store, m["meter"]),
               "scenarios": len(list_scenarios(store, m["meter"])), "error": None}
        if m["intervals"]:
            try:
                periods = cached_audit(store, m["meter"], tariff).result.periods
            except (UsageError, NotFoundError) as exc:
                row["error"] = exc.message
                periods = []
            with_pf = [p for p in periods if p.intervals and math.isfinite(p.pf)]
            if with_pf:
                row["latest_pf"] = with_pf[-1].pf
                row["latest_period"] = with_pf[-1].label
            if periods:
                cutoff = _year_before(periods[-1].end)
                recent = [p for p in periods if p.end > cutoff]
                row["reactive_12m"] = float(sum(p.reactive_total for p in recent))
                row["total_12m"] = float(sum(p.total for p in recent))
                row["months_12m"] = len(recent)
        else:
            row["error"] = "no readings"
        rows.append(row)
    rows.sort(key=lambda r: (r["latest_pf"] is None, r["latest_pf"] if r["latest_pf"] is not None else 0.0))
    return rows


