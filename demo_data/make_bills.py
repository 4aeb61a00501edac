#!/usr/bin/env python3
"""Deterministic generator of ``bills_demo.csv``: the utility's bills for the demo meters.

The bills are computed through the project's own audit (:func:`auditor.audit.audit`) from the
demo data under the demo tariff (``harrowgate_industrial_tou``), over the meter read dates of
each site (not calendar months): Kestrel Quay is read early in the month (KQ-MAIN, KQ-DOCKS),
Alder Row mid-month (AR-01). The utility's meter has no gaps, so the few intervals missing from
the demo exports are filled on the utility's side (the same quarter hour one week earlier):
those bills differ slightly from the data and the check must warn about coverage, not find.

Two errors are planted, of different kinds:

1. **KQ-MAIN, bill 2025-08-05 to 2025-09-03: wrong multiplier.** The utility billed with a CT
   ratio of 1000/5 where 800/5 is installed, so kWh, kvarh, peak kW, peak kVA and every charge
   that follows from them are 1.25 times too high (the PF is unchanged).
2. **AR-01, bill 2025-06-16 to 2025-07-16: reactive charge above the PF threshold.** The
   utility applied its weekday-daytime reactive clause without the tan phi 0.4 allowance,
   charging every lagging kvarh in the window, although the period's PF is above the threshold
   (0.928) at which the clause charges nothing.

Every other bill is correct (rounded as a bill prints it). Each bill carries the (invented)
utility's account number of the meter and an invoice number. Run::

    python demo_data/make_bills.py      # rewrites bills_demo.csv beside this script
"""
from __future__ import annotations

import dataclasses
import tempfile
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
OUT = HERE / "bills_demo.csv"
FIGURES = ["kwh", "kvarh", "peak_kw", "peak_kva", "pf", "reactive_charge", "total"]
COLUMNS = ["meter", "period_start", "period_end", *FIGURES, "account", "invoice"]
ACCOUNTS = {"KQ-MAIN": "HG-300418-01", "KQ-DOCKS": "HG-300418-02", "AR-01": "HG-512207-01"}

KESTREL_READS = ["2025-01-06", "2025-02-04", "2025-03-05", "2025-04-03", "2025-05-06", "2025-06-04",
                 "2025-07-03", "2025-08-05", "2025-09-03", "2025-10-06", "2025-11-04", "2025-12-03"]
ALDER_READS = ["2025-01-16", "2025-02-17", "2025-03-17", "2025-04-16", "2025-05-16", "2025-06-16",
               "2025-07-16", "2025-08-18", "2025-09-16", "2025-10-16", "2025-11-17", "2025-12-16"]
READS = {"KQ-MAIN": KESTREL_READS, "KQ-DOCKS": KESTREL_READS, "AR-01": ALDER_READS}
MULTIPLIER_ERROR = ("KQ-MAIN", date(2025, 8, 5), 1.25)
ALLOWANCE_ERROR = ("AR-01", date(2025, 6, 16))


def periods_of(reads: list[str]):
    from auditor.quantities import BillingPeriod

    ds = [date.fromisoformat(x) for x in reads]
    return [BillingPeriod(a, b) for a, b in zip(ds, ds[1:], strict=False)]


def fill_gaps(frame: pd.DataFrame, interval_minutes: int) -> pd.DataFrame:
    """The utility's complete series: intervals missing from the export take the values of the
    same interval one week earlier."""
    step = pd.Timedelta(minutes=interval_minutes)
    full = pd.date_range(frame.index[0], frame.index[-1], freq=step, name="start")
    out = frame.reindex(full)
    week = frame.reindex(full - pd.Timedelta(days=7))
    missing = out["kwh"].isna().to_numpy()
    for c in ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received"):
        out.loc[missing, c] = week[c].to_numpy()[missing]
    out["estimated"] = False
    return out.fillna(0.0)


def rows_of(meter: str, result, tariff) -> list[dict]:
    """Bill rows as a bill prints them (energies whole, demand to 0.1, PF and money to 0.01)."""
    from auditor.bills import expected_figures

    rows = []
    for p in result.periods:
        e = expected_figures(p, tariff)
        rows.append({"meter": meter, "period_start": p.start.isoformat(), "period_end": p.end.isoformat(),
                     "kwh": round(e["kwh"]), "kvarh": round(e["kvarh"]), "peak_kw": round(e["peak_kw"], 1),
                     "peak_kva": round(e["peak_kva"], 1), "pf": round(e["pf"], 2),
                     "reactive_charge": round(e["reactive_charge"], 2), "total": round(e["total"], 2),
                     "account": ACCOUNTS[meter], "invoice": invoice_number(meter, p.end)})
    return rows


def invoice_number(meter: str, issued: date) -> str:
    """The invented utility's invoice number: year and month of issue, then the account's serial."""
    return f"HGI-{issued:%y%m}-{ACCOUNTS[meter][3:9]}{ACCOUNTS[meter][-1]}"


def bills_for(meter: str, frame: pd.DataFrame, tariff, *, tz: str, interval_minutes: int) -> list[dict]:
    """The utility's bills of one meter, with the planted error if it has one."""
    from auditor.audit import audit

    periods = periods_of(READS[meter])
    full = fill_gaps(frame, interval_minutes)
    kw = dict(tz=tz, interval_minutes=interval_minutes, periods=periods)
    rows = rows_of(meter, audit(full, tariff, **kw), tariff)
    if meter == MULTIPLIER_ERROR[0]:
        k = next(i for i, p in enumerate(periods) if p.start == MULTIPLIER_ERROR[1])
        p = periods[k]
        local = full.index.tz_convert(tz)
        inside = (local >= pd.Timestamp(p.start, tz=tz)) & (local < pd.Timestamp(p.end, tz=tz))
        scaled = full.copy()
        cols = ["kwh", "kvarh_lag", "kvarh_lead", "kwh_received"]
        scaled.loc[inside, cols] = scaled.loc[inside, cols].to_numpy() * MULTIPLIER_ERROR[2]
        rows[k] = rows_of(meter, audit(scaled, tariff, **kw), tariff)[k]
    if meter == ALLOWANCE_ERROR[0]:
        k = next(i for i, p in enumerate(periods) if p.start == ALLOWANCE_ERROR[1])
        no_allowance = dataclasses.replace(tariff, reactive=tuple(
            dataclasses.replace(m, tan_phi_limit=0.0) if m.kind == "kvarh_excess" else m for m in tariff.reactive))
        wrong = rows_of(meter, audit(full, no_allowance, **kw), no_allowance)[k]
        rows[k] = {**rows[k], "reactive_charge": wrong["reactive_charge"], "total": wrong["total"]}
    return rows


def build(store) -> pd.DataFrame:
    """Every demo bill, from a store holding the demo data."""
    from auditor.services.audit import resolve_tariff
    from auditor.services.demo import DEMO_TARIFF
    from auditor.services.meters import load_meter

    tariff = resolve_tariff(DEMO_TARIFF)
    rows = []
    for meter in READS:
        d = load_meter(store, meter)
        rows += bills_for(meter, d.frame, tariff, tz=d.timezone, interval_minutes=d.interval_minutes)
    df = pd.DataFrame(rows, columns=COLUMNS)
    assert np.isfinite(df[FIGURES].to_numpy(float)).all()
    return df


def write(df: pd.DataFrame, path: Path = OUT) -> Path:
    df.to_csv(path, index=False, lineterminator="\n")
    return path


def main() -> None:
    from auditor.services.demo import load_demo
    from auditor.store import open_store

    with tempfile.TemporaryDirectory() as tmp:
        store = open_store(f"sqlite:///{Path(tmp) / 'bills.sqlite3'}")
        load_demo(store)
        path = write(build(store))
        store.engine.dispose()
    print("wrote", path.name)


if __name__ == "__main__":
    main()
