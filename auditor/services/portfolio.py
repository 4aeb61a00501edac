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
from datetime import date

from auditor.errors import NotFoundError, UsageError
from auditor.services.cache import cached_audit
from auditor.services.correction import best_scenario, list_scenarios
from auditor.services.meters import list_meters
from auditor.store import Store
from auditor.tariffs import Tariff, threshold_pfs
from auditor.tariffs.catalog import TariffChoice, find_tariff, load_named_tariff, tariff_choices

__all__ = ["TariffChoice", "tariff_choices", "find_tariff", "load_named_tariff", "tariff_threshold_pf",
           "portfolio_summary"]


# --------------------------------------------------------------------------------------------
# tariffs by name
# --------------------------------------------------------------------------------------------
def tariff_threshold_pf(tariff: Tariff) -> list[dict]:
    """The power factors at which the tariff's reactive clauses start to charge (see
    :func:`auditor.tariffs.facts.threshold_pfs`)."""
    return threshold_pfs(tariff)


# --------------------------------------------------------------------------------------------
# portfolio
# --------------------------------------------------------------------------------------------
def _year_before(d: date) -> date:
    try:
        return d.replace(year=d.year - 1)
    except ValueError:  # 29 February
        return d.replace(year=d.year - 1, day=28)


def portfolio_summary(store: Store, tariff: Tariff, own_tariffs: bool = False) -> list[dict]:
    """One row per meter, worst power factor first.

    Keys: site, meter, latest_pf and latest_period (last billing period with a PF),
    reactive_12m and total_12m (charges of the periods ending within the last 12 months of
    data, in the tariff's currency), months_12m, coverage (intervals present / expected over
    the meter's span), best (the saved scenario with the best NPV: name, annual_savings,
    simple_payback_years, npv) and error (why a meter could not be audited); tariff, currency and
    tariff_source ("own" when ``own_tariffs`` and the meter has a tariff of its own, which is
    then used instead of ``tariff``).
    """
    from auditor.services.meter_tariff import meter_tariffs

    own = meter_tariffs(store) if own_tariffs else {}
    rows = []
    for m in list_meters(store):
        t = own[m["meter"]].tariff if m["meter"] in own else tariff
        row = {"site": m["site"], "meter": m["meter"], "coverage": m["coverage"],
               "first": m["first"], "last": m["last"], "intervals": m["intervals"],
               "latest_pf": None, "latest_period": None, "reactive_12m": None, "total_12m": None,
               "months_12m": 0, "currency": t.currency, "tariff": t.name,
               "tariff_source": "own" if m["meter"] in own else "chosen", "best": best_scenario(store, m["meter"]),
               "scenarios": len(list_scenarios(store, m["meter"])), "error": None}
        if m["intervals"]:
            try:
                periods = cached_audit(store, m["meter"], t,
                                       own[m["meter"]].billing_day if m["meter"] in own else None).result.periods
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


