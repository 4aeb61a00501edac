"""The audit orchestration: JSON contract, warnings, periods, and run() with replaced kvarh."""
from __future__ import annotations

import json
import math
from datetime import date

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from auditor.audit import audit, prepare_audit
from auditor.errors import UsageError
from auditor.quantities import BillingPeriod
from auditor.render import to_json
from auditor.tariffs import EXAMPLES_DIR, load_tariff
from tests.audit_helpers import TZ, interval_frame, june_frame, tariff

PERIOD_KEYS = {
    "start", "end", "kwh", "kvarh_lag", "kvarh_lead", "pf", "tan_phi", "peak_kw", "peak_kw_at",
    "peak_kva", "peak_kva_at", "peak_kvar", "pf_at_peak", "load_factor", "coverage", "estimated_intervals",
    "charges", "reactive_total", "total",
}

ALL_IN = tariff(
    [
        {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05,
         "windows": [{"days": "weekdays", "hours": [6, 22]}]},
        {"kind": "pf_demand_adjust", "base_pf": 0.9},
        {"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 2.0},
        {"kind": "leading_kvarh", "price_per_kvarh": 0.03, "hours": [22, 6]},
        {"kind": "pf_percent", "threshold_pf": 0.92, "percent_per_hundredth": 0.5, "applies_to": ["energy"]},
        {"kind": "kvarh_banded", "tan_phi_limit": 0.3,
         "bands": [{"min_pf": 0.9, "price_per_kvarh": 0.0}, {"min_pf": 0.0, "price_per_kvarh": 0.01}]},
    ],
    fixed={"price_per_period": 20.0},
    calendar={"country": "DE", "subdivision": "BY"},
)


def year_frame(seed: int = 3, minutes: int = 15) -> pd.DataFrame:
    """An invented plant: 2025 in Berlin, day shift load with lagging reactive energy, a little
    leading energy at night."""
    rng = np.random.default_rng(seed)
    f = interval_frame("2025-01-01", "2026-01-01", minutes=minutes)
    h = f.index.tz_convert(TZ).hour.to_numpy()
    n = len(f)
    kwh = (20 + 30 * ((h >= 7) & (h < 18)) + rng.uniform(0, 5, n)) * minutes / 15
    f["kwh"] = kwh
    f["kvarh_lag"] = kwh * rng.uniform(0.4, 0.9, n)
    f["kvarh_lead"] = np.where(h < 5, rng.uniform(0, 2, n), 0.0)
    return f


def test_json_contract_and_totals():
    f = june_frame()
    r = audit(f, ALL_IN, tz=TZ, interval_minutes=60)
    d = json.loads(to_json(r.to_dict(meter="M-7")))
    assert set(d) == {"meter", "tariff", "currency", "periods", "totals", "warnings"}
    assert (d["meter"], d["tariff"], d["currency"]) == ("M-7", "Test tariff", "EUR")
    (p,) = d["periods"]
    assert set(p) == PERIOD_KEYS
    assert (p["start"], p["end"]) == ("2025-06-01", "2025-07-01")
    assert p["peak_kw_at"] == "2025-06-10T10:00:00+02:00"
    assert set(p["charges"]) == {"energy", "demand", "fixed", "kvarh_excess", "pf_demand_adjust",
                                 "kvar_demand", "leading_kvarh", "pf_percent", "kvarh_banded"}
    reactive = sum(v for k, v in p["charges"].items() if k not in ("energy", "demand", "fixed"))
    assert_allclose(p["reactive_total"], reactive)
    assert_allclose(p["total"], sum(p["charges"].values()))
    assert_allclose(p["pf"], 1 / math.sqrt(1.36))
    t = d["totals"]
    for k in ["kwh", "kvarh_lag", "kvarh_lead", "reactive_total", "total", *p["charges"]]:
        assert_allclose(t[k], p[k] if k in p else p["charges"][k])
    assert_allclose(t["pf"], p["pf"])
    assert d["warnings"] == []
    assert_allclose(r.total, p["total"])


def test_totals_sum_periods_over_a_year():
    r = audit(year_frame(minutes=60), ALL_IN, tz=TZ, interval_minutes=60)
    assert len(r.periods) == 12 and r.warnings == []
    assert_allclose(r.totals["total"], sum(p.total for p in r.periods))
    assert_allclose(r.totals["kvarh_excess"], sum(p.charges["kvarh_excess"] for p in r.periods))
    kwh, lag = r.totals["kwh"], r.totals["kvarh_lag"]
    assert_allclose(r.totals["pf"], kwh / math.hypot(kwh, lag))  # energy PF of the whole range
    frame = r.periods_frame()
    assert len(frame) == 12
    assert {"charge_energy", "charge_kvarh_excess", "billing_pf", "partial", "peak_kva_at"} <= set(frame.columns)
    assert_allclose(frame["total"].sum(), r.total)


def test_zero_load_month_has_no_pf_and_says_so():
    f = interval_frame("2025-06-01", "2025-07-01", minutes=60, kwh=0.0, kvarh_lag=0.0)
    t = tariff([{"kind": "pf_percent", "threshold_pf": 0.9, "percent_per_hundredth": 1, "applies_to": ["energy", "demand", "fixed"]},
                {"kind": "pf_demand_adjust", "base_pf": 0.9}], fixed={"price_per_period": 30.0})
    r = audit(f, t, tz=TZ, interval_minutes=60)
    p = r.to_dict()["periods"][0]
    assert p["pf"] is None and p["pf_at_peak"] is None and p["tan_phi"] is None and p["load_factor"] is None
    assert p["charges"]["pf_percent"] == 0.0 and p["charges"]["pf_demand_adjust"] == 0.0
    assert p["total"] == 30.0
    assert any("2025-06: no load, so no power factor" in w for w in r.warnings)


def test_coverage_estimated_and_partial_warnings():
    f = interval_frame("2025-03-01", "2025-04-16", minutes=15)
    f = f.drop(f.index[100:110])
    f.iloc[200:203, f.columns.get_loc("estimated")] = True
    r = audit(f, tariff(), tz=TZ, interval_minutes=15)
    march, april = r.periods
    # March 2025 in Berlin: 31 x 96 - 4 = 2,972 quarter hours (spring DST change).
    assert_allclose(march.coverage, 2962 / 2972)
    assert march.estimated_intervals == 3 and not march.partial
    assert april.partial and april.coverage == pytest.approx(15 * 96 / 2880)
    w = r.warnings
    assert "2025-03: coverage 99.7 % (10 of 2972 intervals missing)" in w
    assert "2025-03: 3 estimated intervals" in w
    assert any(x.startswith("2025-04: partial period: data cover 2025-04-01T00:00:00+02:00 to 2025-04-16T00:00:00+02:00") for x in w)
    assert "2025-04: coverage 50.0 % (1440 of 2880 intervals missing)" in w


def test_explicit_periods_billing_day_and_clipping():
    f = june_frame()
    ps = [BillingPeriod(date(2025, 6, 3), date(2025, 6, 10)), BillingPeriod(date(2025, 6, 20), date(2025, 6, 27))]
    r = audit(f, tariff(), tz=TZ, interval_minutes=60, periods=ps)
    assert [p.kwh for p in r.periods] == [7 * 24 * 100.0] * 2
    assert any("fall outside every billing period" in w for w in r.warnings)
    r = audit(f, tariff(), tz=TZ, interval_minutes=60, billing_day=15)
    assert [(p.start, p.end) for p in r.periods] == [(date(2025, 5, 15), date(2025, 6, 15)), (date(2025, 6, 15), date(2025, 7, 15))]
    assert all(p.partial for p in r.periods)
    r = audit(f, tariff(), tz=TZ, interval_minutes=60, start=date(2025, 6, 5), end=date(2025, 6, 12))
    (p,) = r.periods
    assert (p.start, p.end, p.coverage, p.kwh) == (date(2025, 6, 5), date(2025, 6, 12), 1.0, 167 * 100.0 + 250.0)
    assert p.partial and any("partial billing period" in w for w in r.warnings)


def test_run_with_replaced_kvarh_equals_auditing_the_changed_frame():
    # A 30 kvar fixed bank on a 15-minute year: 7.5 kvarh less lagging energy per interval,
    # the surplus becoming leading energy (load view: Q_net drops by Qc).
    f = year_frame()
    for path in sorted(EXAMPLES_DIR.glob("*.toml")):
        t = load_tariff(path)
        prepared = prepare_audit(f, t, tz=TZ, interval_minutes=15)
        net = f["kvarh_lag"].to_numpy() - f["kvarh_lead"].to_numpy() - 7.5
        lag, lead = np.maximum(net, 0), np.maximum(-net, 0)
        fast = prepared.run(lag, lead)
        g = f.copy()
        g["kvarh_lag"], g["kvarh_lead"] = lag, lead
        slow = audit(g, t, tz=TZ, interval_minutes=15)
        assert_allclose([p.total for p in fast.periods], [p.total for p in slow.periods], rtol=1e-12)
        assert fast.to_dict() == slow.to_dict()
        base = prepared.run()
        assert fast.totals["kvarh_lag"] < base.totals["kvarh_lag"]
        assert_allclose(prepared.run_charges(lag, lead).total, [p.total for p in fast.periods])


def test_run_rejects_wrong_shapes_and_negative_energy():
    prepared = prepare_audit(june_frame(), tariff(), tz=TZ, interval_minutes=60)
    with pytest.raises(UsageError, match="one value per interval"):
        prepared.run(np.zeros(3))
    with pytest.raises(UsageError, match="not negative"):
        prepared.run(-np.ones(len(prepared.index)))
    assert len(prepared.kw) == len(prepared.index) == 720
    assert prepared.index.is_monotonic_increasing


def test_bad_frames_and_options():
    f = june_frame()
    with pytest.raises(UsageError, match="kvarh_lead"):
        audit(f.drop(columns="kvarh_lead"), tariff(), tz=TZ, interval_minutes=60)
    with pytest.raises(UsageError, match="timezone-aware"):
        audit(f.tz_localize(None), tariff(), tz=TZ, interval_minutes=60)
    with pytest.raises(UsageError, match="duplicate"):
        audit(pd.concat([f, f.iloc[:1]]).sort_index(), tariff(), tz=TZ, interval_minutes=60)
    with pytest.raises(UsageError, match=r"duplicate interval starts \(first: 2025-06-03T00:00:00\+00:00\)"):
        audit(pd.concat([f, f.iloc[50:51]]).iloc[::-1], tariff(), tz=TZ, interval_minutes=60)
    for column in ("kwh", "kvarh_lag", "kvarh_lead"):
        for bad in (np.nan, np.inf, -np.inf, -0.5):
            g = f.copy()
            g.iloc[100, g.columns.get_loc(column)] = bad
            with pytest.raises(UsageError, match=f"^column {column} must hold finite values of at least 0$"):
                audit(g, tariff(), tz=TZ, interval_minutes=60)
    with pytest.raises(UsageError, match="end .* after start"):
        audit(f, tariff(), tz=TZ, interval_minutes=60, start=date(2025, 6, 5), end=date(2025, 6, 1))
    with pytest.raises(UsageError, match="no interval data"):
        audit(f.iloc[:0], tariff(), tz=TZ, interval_minutes=60)


def test_unsorted_frame_audits_as_the_sorted_one():
    f = june_frame()
    shuffled = f.sample(frac=1.0, random_state=3)
    assert audit(shuffled, tariff(), tz=TZ, interval_minutes=60).to_dict() == \
        audit(f, tariff(), tz=TZ, interval_minutes=60).to_dict()


def test_period_without_data_bills_fixed_and_ratchet():
    f = june_frame()
    ps = [BillingPeriod(date(2025, 6, 1), date(2025, 7, 1)), BillingPeriod(date(2025, 7, 1), date(2025, 8, 1))]
    t = tariff(demand={"basis": "kw", "price_per_kw": 10.0, "ratchet_percent": 60}, fixed={"price_per_period": 9.0})
    r = audit(f, t, tz=TZ, interval_minutes=60, periods=ps)
    july = r.periods[1]
    assert july.charges == {"energy": 0.0, "demand": 0.6 * 250 * 10, "fixed": 9.0}
    assert "2025-07: no interval data; only fixed charges (and any demand ratchet) are billed" in r.warnings
    assert r.to_dict()["periods"][1]["peak_kw"] is None


@settings(max_examples=25, deadline=None)
@given(scale=st.floats(0.0, 2.0), shift=st.integers(0, 719))
def test_more_lagging_energy_never_lowers_the_bill(scale, shift):
    # Every mechanism of ALL_IN is non-decreasing in lagging kvarh (the credit is off), so a bill
    # with extra lagging energy in one interval is never lower.
    prepared = prepare_audit(june_frame(), ALL_IN, tz=TZ, interval_minutes=60)
    lag = prepared.kvarh_lag.copy()
    base = prepared.run_charges(lag).total.sum()
    lag[shift] += 100 * scale
    assert prepared.run_charges(lag).total.sum() >= base - 1e-9


def test_period_figures_and_the_audit_give_the_same_figures():
    """One copy of the period figures: quantities.period_figures and PreparedAudit.run share
    their functions, so every common figure agrees exactly, gaps, leading hours and a partial
    month included (the figures themselves are checked against hand-worked values above)."""
    from auditor.quantities import period_figures
    from tests.audit_helpers import set_at

    rng = np.random.default_rng(7)
    f = interval_frame("2025-03-01", "2025-05-10", minutes=15)
    f["kwh"] = rng.uniform(0, 80, len(f))
    f["kvarh_lag"] = rng.uniform(0, 50, len(f))
    f["kvarh_lead"] = np.where(rng.uniform(size=len(f)) < 0.1, rng.uniform(0, 20, len(f)), 0.0)
    f["estimated"] = rng.uniform(size=len(f)) < 0.01
    f = f.drop(f.index[1000:1100])  # a gap
    set_at(f, "2025-04-02 10:00", kwh=0.0, kvarh_lag=0.0, kvarh_lead=5.0)
    periods = [BillingPeriod(date(2025, 3, 1), date(2025, 4, 1)), BillingPeriod(date(2025, 4, 1), date(2025, 5, 1)),
               BillingPeriod(date(2025, 5, 1), date(2025, 6, 1))]
    fig = period_figures(f, periods, "Europe/Berlin", 15)
    res = audit(f, tariff(), tz="Europe/Berlin", interval_minutes=15, periods=periods)
    for k, p in enumerate(res.periods):
        row = fig.iloc[k]
        for name in ("kwh", "kvarh_lag", "kvarh_lead", "pf", "tan_phi", "peak_kw", "peak_kva", "peak_kvar",
                     "pf_at_peak", "load_factor", "coverage"):
            assert getattr(p, name) == row[name] or (np.isnan(getattr(p, name)) and np.isnan(row[name])), name
        assert (p.intervals, p.expected_intervals, p.estimated_intervals) == (
            row["intervals"], row["expected_intervals"], row["estimated_intervals"])
        assert (p.peak_kw_at, p.peak_kva_at, p.pf_at_peak_sense) == (
            row["peak_kw_at"], row["peak_kva_at"], row["pf_at_peak_sense"])
