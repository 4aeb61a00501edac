"""Bill reconciliation (auditor.bills): every cause on a hand-built case, tolerance edges,
missing and estimated data, money and severity rules.

The hand-worked month (common practice arithmetic): June 2025 in Europe/Berlin, 720 hourly
intervals of 100 kWh and 60 kvarh lagging. kWh = 72,000; kvarh = 43,200; energy PF =
100 / sqrt(100^2 + 60^2) = 0.8575 -> 0.86 rounded; test tariff: energy 0.10 / kWh = 7,200,
demand 10 / kW x 100 kW = 1,000, excess kvarh above tan phi 0.4: (43,200 - 28,800) x 0.02 = 288;
total 8,488.
"""
from __future__ import annotations

import math
from datetime import date

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.bills import BillRecord, Tolerances, check, fill_gaps_high, pf_threshold
from auditor.errors import UsageError
from tests.audit_helpers import TZ, interval_frame, set_at, tariff

JUNE = (date(2025, 6, 1), date(2025, 7, 1))
EXCESS = {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.02}
HAND = {"kwh": 72_000.0, "kvarh": 43_200.0, "peak_kw": 100.0, "peak_kva": math.hypot(100, 60), "pf": 0.86,
        "reactive_charge": 288.0, "total": 8_488.0}


def T(**top):
    return tariff([EXCESS], **top)


def bill(start=JUNE[0], end=JUNE[1], meter="M1", **fields) -> BillRecord:
    return BillRecord(meter, start, end, **fields)


def run(bills, frame, t=None, minutes=60, **tol):
    return check(bills if isinstance(bills, list) else [bills], frame, t or T(), tz=TZ, interval_minutes=minutes,
                 tolerances=Tolerances(**tol) if tol else None)


def findings_by_field(rec) -> dict:
    return {f.field: f for f in rec.findings}


# --------------------------------------------------------------------------------------------
def test_expected_figures_match_the_hand_worked_month_and_a_correct_bill_has_no_finding():
    rec = run(bill(**HAND), interval_frame("2025-06-01", "2025-07-01"))
    c = rec.checks[0]
    for k, v in HAND.items():
        assert_allclose(c.expected[k], v, rtol=1e-12, err_msg=k)
    assert c.status == "ok" and rec.findings == () and rec.total_disputable == 0
    assert c.coverage == 1.0 and c.warnings == ()


def test_pf_threshold_of_a_tan_phi_limit():
    # tan phi 0.4 <-> cos phi 0.928 (PF = 1 / sqrt(1 + tan^2 phi), IEEE Std 1459-2010 sinusoidal definitions; common practice)
    assert_allclose(pf_threshold(T()), 1 / math.sqrt(1 + 0.4**2))
    assert_allclose(pf_threshold(T()), 0.928, atol=5e-4)
    assert pf_threshold(tariff([])) is None


# --------------------------------------------------------------------------------------------
# Causes
# --------------------------------------------------------------------------------------------
def test_multiplier_same_ratio_on_every_quantity():
    r = 1.2
    billed = {k: HAND[k] * r for k in ("kwh", "kvarh", "peak_kw", "peak_kva")}
    # charges from the scaled quantities: energy and demand scale, the excess kvarh too
    billed.update(pf=0.86, reactive_charge=288.0 * r, total=8_488.0 * r)
    rec = run(bill(**billed), interval_frame("2025-06-01", "2025-07-01"))
    c = rec.checks[0]
    f = findings_by_field(rec)
    assert set(f) == {"kwh", "kvarh", "peak_kw", "peak_kva", "reactive_charge", "total"}
    assert {x.cause for x in f.values()} == {"multiplier"}
    assert_allclose(c.details["multiplier"], r)
    assert "1.2 times" in f["kwh"].explanation
    # money: the total's excess only (it contains every other charge), never the sum of findings
    assert_allclose(rec.total_disputable, 8_488.0 * (r - 1), atol=0.01)
    assert sum(x.money for x in f.values()) > rec.total_disputable
    assert f["total"].severity == "high"


def test_unequal_ratios_are_not_a_multiplier():
    billed = dict(HAND, kwh=HAND["kwh"] * 1.2, kvarh=HAND["kvarh"] * 1.1)
    rec = run(bill(**billed), interval_frame("2025-06-01", "2025-07-01"))
    assert "multiplier" not in rec.checks[0].causes
    assert findings_by_field(rec)["kwh"].cause is None


def test_reactive_charge_billed_although_pf_above_threshold():
    # tan phi 0.3: PF 0.958 -> 0.96, above 0.928, so the excess clause charges nothing
    frame = interval_frame("2025-06-01", "2025-07-01", kvarh_lag=30.0)
    billed = {"kwh": 72_000.0, "kvarh": 21_600.0, "pf": 0.96, "reactive_charge": 150.0, "total": 8_200.0 + 150.0}
    rec = run(bill(**billed), frame)
    f = findings_by_field(rec)
    assert set(f) == {"reactive_charge", "total"}
    assert f["reactive_charge"].cause == f["total"].cause == "reactive_above_threshold"
    assert_allclose(f["reactive_charge"].expected, 0.0)
    assert_allclose(rec.total_disputable, 150.0)
    assert f["total"].severity == "high"


def test_reactive_charge_below_threshold_is_not_that_cause():
    billed = dict(HAND, reactive_charge=HAND["reactive_charge"] + 60, total=HAND["total"] + 60)
    rec = run(bill(**billed), interval_frame("2025-06-01", "2025-07-01"))
    f = findings_by_field(rec)
    assert f["reactive_charge"].cause is None
    assert f["reactive_charge"].severity == "medium"  # money 60, below the 100 of "high"
    assert_allclose(f["reactive_charge"].money, 60.0)


def test_lag_plus_lead_counted_as_lagging():
    # 30 kvarh lagging and 20 leading each hour; the tariff counts lagging only
    frame = interval_frame("2025-06-01", "2025-07-01", kvarh_lag=30.0, kvarh_lead=20.0)
    lpl = 720 * 50.0
    billed = {"kwh": 72_000.0, "kvarh": lpl, "pf": 0.89,  # 100 / sqrt(100^2 + 50^2) = 0.894 -> 0.89
              "reactive_charge": (lpl - 0.4 * 72_000) * 0.02}  # 144 instead of 0
    rec = run(bill(**billed), frame)
    f = findings_by_field(rec)
    assert set(f) == {"kvarh", "pf", "reactive_charge"}
    assert {x.cause for x in f.values()} == {"lag_plus_lead"}
    assert_allclose(f["kvarh"].expected, 720 * 30.0)
    assert_allclose(rec.total_disputable, 144.0)  # no total billed: the reactive charge's excess


def test_lag_plus_lead_needs_leading_energy():
    frame = interval_frame("2025-06-01", "2025-07-01")  # no leading kvarh at all
    rec = run(bill(**dict(HAND, kvarh=HAND["kvarh"] * 1.3)), frame)
    assert findings_by_field(rec)["kvarh"].cause is None


def _ramp_frame():
    """Hourly data 20 May - 15 July whose daily energy rises 48 kWh a day: every whole-day shift
    of a 30-day period changes its kWh by 30 x 48 = 1,440 (about 2.4 %), so a shift is unique."""
    f = interval_frame("2025-05-20", "2025-07-15")
    doy = f.index.tz_convert(TZ).day_of_year.to_numpy()
    f["kwh"] = 2.0 * doy - 250.0
    f["kvarh_lag"] = 0.5 * f["kwh"]
    return f


def _local_sum(frame, col, start, end):
    local = frame.index.tz_convert(TZ)
    inside = (local >= pd.Timestamp(start, tz=TZ)) & (local < pd.Timestamp(end, tz=TZ))
    return float(frame.loc[inside, col].sum())


def test_period_shifted_by_days():
    f = _ramp_frame()
    billed = {"kwh": _local_sum(f, "kwh", "2025-06-04", "2025-07-04"),
              "kvarh": _local_sum(f, "kvarh_lag", "2025-06-04", "2025-07-04")}
    rec = run(bill(**billed), f)
    c = rec.checks[0]
    assert c.details["period_shift"] == 3
    fs = findings_by_field(rec)
    assert set(fs) == {"kwh", "kvarh"} and {x.cause for x in fs.values()} == {"period_shift"}
    # a shift moves energy between bills: listed, low, not disputable
    assert all(x.money == 0 and x.severity == "low" for x in fs.values())
    assert rec.total_disputable == 0
    assert "+3 days" in fs["kwh"].explanation


def test_shift_backwards_and_beyond_the_search():
    f = _ramp_frame()
    back = {"kwh": _local_sum(f, "kwh", "2025-05-29", "2025-06-28")}
    assert run(bill(**back), f).checks[0].details["period_shift"] == -3
    rec = run(bill(**back), f, max_shift_days=2)
    assert "period_shift" not in rec.checks[0].details


def test_high_share_of_estimated_data():
    est = np.zeros(720, bool)
    est[:72] = True  # three days: 10 % of the month
    frame = interval_frame("2025-06-01", "2025-07-01", estimated=est)
    billed = dict(HAND, kwh=HAND["kwh"] * 1.02, total=HAND["total"] + 144.0)
    rec = run(bill(**billed), frame)
    c = rec.checks[0]
    assert_allclose(c.estimated_share, 0.1)
    assert {x.cause for x in rec.findings} == {"estimated_data"}
    assert all(x.money == 0 and x.severity == "low" for x in rec.findings)
    assert rec.total_disputable == 0
    # below the share threshold the same bill is an ordinary, disputable finding
    est2 = np.zeros(720, bool)
    est2[:24] = True  # 3.3 %
    rec2 = run(bill(**billed), interval_frame("2025-06-01", "2025-07-01", estimated=est2))
    assert {x.cause for x in rec2.findings} == {None}
    assert_allclose(rec2.total_disputable, 144.0)


def _peaky_15min():
    """15-minute June: 25 kWh (100 kW) every quarter hour, 50 kWh (200 kW) at 10 June 10:00.
    30-minute peak (10:00-10:30): (50 + 25) kWh / 0.5 h = 150 kW; 60-minute peak: (50 + 75) / 1 h
    = 125 kW (hand-worked)."""
    f = interval_frame("2025-06-01", "2025-07-01", minutes=15, kwh=25.0, kvarh_lag=0.0)
    return set_at(f, "2025-06-10 10:00", kwh=50.0)


@pytest.mark.parametrize(("billed_kw", "minutes"), [(150.0, 30), (125.0, 60)])
def test_demand_from_another_interval_length(billed_kw, minutes):
    rec = run(bill(peak_kw=billed_kw), _peaky_15min(), minutes=15)
    f = findings_by_field(rec)["peak_kw"]
    assert_allclose(f.expected, 200.0)
    assert f.cause == "demand_interval"
    assert rec.checks[0].details["demand_interval"] == {"peak_kw": minutes}
    assert f"{minutes}-minute" in f.explanation and "15-minute" in f.explanation
    assert f.money == 0  # billed below the computed peak: nothing to claim back


def test_demand_unrelated_to_any_interval_is_unexplained():
    rec = run(bill(peak_kw=170.0), _peaky_15min(), minutes=15)
    assert findings_by_field(rec)["peak_kw"].cause is None


# --------------------------------------------------------------------------------------------
# Tolerance edges
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize(("field", "at_edge", "beyond"), [
    ("kwh", 72_000 * 1.005, 72_000 * 1.00501),  # 0.5 %
    ("kvarh", 43_200 * 0.995, 43_200 * 0.99499),
    ("peak_kw", 101.0, 101.001),  # 1 %
    ("pf", 0.85, 0.849),  # 0.01 absolute, against 0.86
    ("pf", 0.87, 0.8701),
    ("total", 8_488 + 84.88, 8_488 + 84.89),  # 1 % of 8,488 is more than 1 unit
    ("reactive_charge", 288 - 2.88, 288 - 2.89),
])
def test_tolerance_edges(field, at_edge, beyond):
    frame = interval_frame("2025-06-01", "2025-07-01")
    assert run(bill(**{field: at_edge}), frame).findings == ()
    (f,) = run(bill(**{field: beyond}), frame).findings
    assert f.field == field


def test_charge_tolerance_is_one_unit_on_small_amounts():
    frame = interval_frame("2025-06-01", "2025-07-01", kvarh_lag=30.0)  # reactive charge 0
    assert run(bill(reactive_charge=1.0), frame).findings == ()
    assert len(run(bill(reactive_charge=1.01), frame).findings) == 1
    assert len(run(bill(reactive_charge=1.01), frame, charge_abs=2.0).findings) == 0


def test_configured_tolerances_change_the_edge():
    frame = interval_frame("2025-06-01", "2025-07-01")
    b = bill(kwh=72_000 * 1.008)
    assert len(run(b, frame).findings) == 1
    assert run(b, frame, energy_percent=1.0).findings == ()


def test_bad_tolerances_are_usage_errors():
    with pytest.raises(UsageError, match="energy_percent"):
        Tolerances(energy_percent=-1)
    with pytest.raises(UsageError, match="min_coverage"):
        Tolerances(min_coverage=1.5)


# --------------------------------------------------------------------------------------------
# Missing data
# --------------------------------------------------------------------------------------------
def _drop_day(frame, day):
    local = frame.index.tz_convert(TZ)
    return frame[~((local >= pd.Timestamp(day, tz=TZ)) & (local < pd.Timestamp(day, tz=TZ) + pd.Timedelta(days=1)))]


def test_missing_day_gives_a_coverage_warning_not_a_false_finding():
    # the utility's meter recorded the whole month; our export lacks 10 June (24 of 720 hours)
    frame = _drop_day(interval_frame("2025-06-01", "2025-07-01"), "2025-06-10")
    rec = run(bill(**HAND), frame)
    c = rec.checks[0]
    assert_allclose(c.coverage, 696 / 720)
    assert c.compared and rec.findings == ()
    assert any("96.7%" in w and "missing" in w for w in rec.warnings)


def test_missing_data_does_not_excuse_a_bill_below_the_data_or_far_above():
    frame = _drop_day(interval_frame("2025-06-01", "2025-07-01"), "2025-06-10")
    low = run(bill(kwh=60_000.0), frame)  # below even the incomplete data
    assert [f.field for f in low.findings] == ["kwh"]
    high = run(bill(kwh=72_000 * 1.25), frame)  # above the gaps filled at the month's maximum
    assert [f.field for f in high.findings] == ["kwh"]
    # money counts only what lies above the top of the range (gaps at 100 kWh: 72,000 kWh)
    assert_allclose(high.findings[0].money, (72_000 * 1.25 - 72_000) * 0.10, rtol=1e-9)


def test_low_coverage_is_not_compared():
    frame = interval_frame("2025-06-01", "2025-06-20")  # 19 of 30 days
    rec = run(bill(kwh=1.0, total=1.0), frame)
    c = rec.checks[0]
    assert not c.compared and c.status == "not_compared" and rec.findings == ()
    assert any("not compared" in w for w in rec.warnings)


def test_fill_gaps_high_uses_the_period_maximum():
    f = interval_frame("2025-06-01", "2025-07-01", kwh=np.arange(720, dtype=float))
    gappy = f.drop(f.index[[5, 6]])
    from auditor.quantities import BillingPeriod

    filled = fill_gaps_high(gappy, [BillingPeriod(*JUNE)], TZ, 60)
    assert len(filled) == 720 and filled.index.equals(f.index)
    assert_allclose(filled["kwh"].iloc[[5, 6]], [719.0, 719.0])


# --------------------------------------------------------------------------------------------
# Money and severity
# --------------------------------------------------------------------------------------------
def test_money_without_a_billed_total_adds_separate_charges_once():
    billed = {"kwh": 79_200.0, "peak_kw": 110.0, "reactive_charge": 338.0, "kvarh": 50_000.0}
    rec = run(bill(**billed), interval_frame("2025-06-01", "2025-07-01"))
    f = findings_by_field(rec)
    assert_allclose(f["kwh"].money, 7_200 * 0.10)  # at the period's average energy price
    assert_allclose(f["peak_kw"].money, 10 * 10.0)  # demand price
    assert_allclose(f["reactive_charge"].money, 50.0)
    assert f["kvarh"].money == 0  # its money shows through the reactive charge
    assert_allclose(rec.total_disputable, 720 + 100 + 50)
    assert (f["kwh"].severity, f["peak_kw"].severity, f["reactive_charge"].severity) == ("high", "high", "medium")


def test_undercharges_have_no_money_and_severity_by_size():
    frame = interval_frame("2025-06-01", "2025-07-01")
    far = findings_by_field(run(bill(kwh=70_000.0), frame))["kwh"]  # 2.8 % below: > 3 x 0.5 %
    near = findings_by_field(run(bill(kwh=71_500.0), frame))["kwh"]  # 0.69 % below
    assert far.money == near.money == 0
    assert (far.severity, near.severity) == ("medium", "low")
    assert_allclose(far.difference, -2_000.0)
    assert_allclose(far.relative_difference, -2_000 / 72_000)


def test_overlapping_bills_are_checked_separately():
    frame = interval_frame("2025-05-01", "2025-07-15")
    a = bill(date(2025, 6, 1), date(2025, 7, 1), kwh=72_000.0)
    b = bill(date(2025, 6, 15), date(2025, 7, 15), kwh=72_000.0)
    rec = run([b, a], frame)
    assert [c.bill.period_start for c in rec.checks] == [date(2025, 6, 1), date(2025, 6, 15)]
    assert rec.findings == ()
    assert any("overlap" in w for w in rec.warnings)


def test_to_dict_has_the_contract_keys():
    d = run(bill(**dict(HAND, kwh=80_000.0)), interval_frame("2025-06-01", "2025-07-01")).to_dict()
    assert set(d) >= {"bills", "findings", "total_disputable", "currency", "warnings", "tolerances"}
    assert set(d["findings"][0]) >= {"period_start", "field", "billed", "expected", "difference", "severity",
                                     "cause", "money"}
    assert d["findings"][0]["period_start"] == "2025-06-01"
    assert set(d["bills"][0]) >= {"period_start", "period_end", "billed", "expected", "coverage", "status",
                                  "disputable"}


def test_one_meter_at_a_time():
    frame = interval_frame("2025-06-01", "2025-07-01")
    with pytest.raises(UsageError, match="one meter"):
        run([bill(meter="A"), bill(date(2025, 7, 1), date(2025, 7, 2), meter="B")], frame)
