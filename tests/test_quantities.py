"""Per-interval P, Q, S, PF; phasor power; billing periods; period figures."""
from __future__ import annotations

import cmath
import math
from datetime import date

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from auditor.errors import UsageError
from auditor.quantities import (
    BillingPeriod,
    billing_periods,
    complex_power,
    complex_power_rms,
    energy_pf,
    expected_intervals,
    interval_power,
    local_iso_times,
    period_figures,
    power_factor,
    reactive_period_figures,
    round_pf,
    segment_argmax,
    segment_max,
    segment_sum,
)
from tests.audit_helpers import interval_frame, june_frame, set_at

# ---------------------------------------------------------------------------------------------
# Phasors
# ---------------------------------------------------------------------------------------------


def test_complex_power_worked_example_leading_current():
    # Worked example, common practice: a 4 V-peak source whose 1.42 A-peak current leads the
    # voltage by 45 degrees gives P ~ 2.0 W and Q ~ -2.0 var (capacitive, load view).
    v = cmath.rect(4.0, 0.0)
    i = cmath.rect(1.42, math.radians(45.0))
    s = complex_power(v, i)
    assert_allclose(s.real, 2.0, rtol=5e-3)
    assert_allclose(s.imag, -2.0, rtol=5e-3)
    pf, sense = power_factor(s.real, s.imag)
    assert_allclose(pf, math.cos(math.radians(45.0)), rtol=1e-12)
    assert sense == "lead"


def test_complex_power_lagging_current_is_positive_q():
    # IEEE Std 1459-2010, 3.1.1 sign convention: current lagging voltage (inductive) gives Q > 0.
    s = complex_power(cmath.rect(10.0, 0.0), cmath.rect(2.0, math.radians(-30.0)))
    assert s.imag > 0
    assert_allclose(s.real, 0.5 * 10 * 2 * math.cos(math.radians(30.0)))


phasor = st.tuples(
    st.floats(0.01, 1e4, allow_nan=False), st.floats(-math.pi, math.pi, allow_nan=False)
)


@settings(max_examples=200, deadline=None)
@given(v=phasor, i=phasor)
def test_complex_power_matches_ieee_1459_formulas(v, i):
    # IEEE Std 1459-2010, section 3.1.1 (sinusoidal case): P = 1/2 Vm Im cos(theta - phi),
    # Q = 1/2 Vm Im sin(theta - phi); reference values computed with math/cmath.
    (vm, theta), (im, phi) = v, i
    s = complex_power(cmath.rect(vm, theta), cmath.rect(im, phi))
    p_ref = 0.5 * vm * im * math.cos(theta - phi)
    q_ref = 0.5 * vm * im * math.sin(theta - phi)
    scale = 0.5 * vm * im
    assert_allclose([s.real, s.imag], [p_ref, q_ref], atol=1e-9 * scale)
    # |S| from cmath.polar is the apparent power; PF = |P| / |S| = |cos(theta - phi)|.
    assert_allclose(cmath.polar(s)[0], scale, rtol=1e-9)
    pf, sense = power_factor(s.real, s.imag)
    assert_allclose(pf, abs(math.cos(theta - phi)), atol=1e-9)
    # rms phasors (peak / sqrt 2) give the same complex power.
    s_rms = complex_power_rms(cmath.rect(vm / math.sqrt(2), theta), cmath.rect(im / math.sqrt(2), phi))
    assert_allclose([s_rms.real, s_rms.imag], [s.real, s.imag], atol=1e-9 * scale)


@settings(max_examples=50, deadline=None)
@given(v=phasor, i=phasor)
def test_complex_power_equals_average_of_instantaneous_power(v, i):
    # Independent reference (numpy sampling of the waveforms): the mean of p(t) = v(t) i(t) over
    # one cycle is P, and for sinusoids Q = mean(v(t) * i(t + T/4)), the current advanced by a
    # quarter period (IEEE Std 1459-2010, 3.1.1: P and Q of the sinusoidal case).
    (vm, theta), (im, phi) = v, i
    wt = np.linspace(0.0, 2 * np.pi, 4096, endpoint=False)
    vt = vm * np.cos(wt + theta)
    it = im * np.cos(wt + phi)
    it_quarter_ahead = im * np.cos(wt + phi + np.pi / 2)
    s = complex_power(cmath.rect(vm, theta), cmath.rect(im, phi))
    scale = vm * im
    assert_allclose(np.mean(vt * it), s.real, atol=1e-9 * scale)
    assert_allclose(np.mean(vt * it_quarter_ahead), s.imag, atol=1e-9 * scale)


# ---------------------------------------------------------------------------------------------
# Per-interval power
# ---------------------------------------------------------------------------------------------


def test_interval_power_converts_energy_to_demand_and_keeps_sense():
    f = interval_frame("2025-01-06", "2025-01-06 01:00", minutes=15, kwh=[10.0, 0.0, 5.0, 3.0],
                       kvarh_lag=[7.5, 0.0, 0.0, 0.0], kvarh_lead=[0.0, 0.0, 0.0, 4.0])
    p = interval_power(f, 15)
    # kW = kWh x 60 / interval minutes (common practice)
    assert_allclose(p["kw"], [40.0, 0.0, 20.0, 12.0])
    assert_allclose(p["kvar_net"], [30.0, 0.0, 0.0, -16.0])
    assert_allclose(p["kva"], [50.0, 0.0, 20.0, 20.0])  # 3-4-5 triangles
    assert_allclose(p["pf"], [0.8, np.nan, 1.0, 0.6])
    assert list(p["pf_sense"]) == ["lag", "", "", "lead"]


def test_zero_load_has_no_pf_not_one_not_zero():
    pf, sense = power_factor(np.array([0.0, 0.0]), np.array([0.0, 3.0]))
    assert np.isnan(pf[0]) and sense[0] == ""
    assert pf[1] == 0.0 and sense[1] == "lag"  # pure reactive load: PF 0, defined
    assert np.isnan(energy_pf(0.0, 0.0))


@settings(max_examples=50, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 1e3), st.floats(0, 1e3), st.floats(0, 1e3)), min_size=1, max_size=40))
def test_interval_power_satisfies_s_squared_identity(rows):
    # IEEE Std 1459-2010, 3.1.1: S^2 = P^2 + Q^2 and PF = P / S.
    a = np.array(rows)
    idx = pd.date_range("2025-01-01", periods=len(a), freq="15min", tz="UTC")
    f = pd.DataFrame({"kwh": a[:, 0], "kvarh_lag": a[:, 1], "kvarh_lead": a[:, 2]}, index=idx)
    p = interval_power(f, 15)
    assert_allclose(p["kva"] ** 2, p["kw"] ** 2 + p["kvar_net"] ** 2, rtol=1e-9, atol=1e-6)
    ok = p["kva"] > 0
    assert_allclose(p["pf"][ok], (p["kw"] / p["kva"])[ok], rtol=1e-12)
    assert p["pf"][~ok].isna().all()


def test_energy_pf_relations_tan_phi():
    # Common practice (domain relations): tan phi 0.4 <-> PF 0.928, 0.329 <-> 0.95, 0.484 <-> 0.90.
    assert_allclose(energy_pf(1.0, np.array([0.4, 0.329, 0.484])), [0.928, 0.95, 0.90], atol=1e-3)


def test_round_pf_is_half_up():
    # 0.845 in binary is 0.84499999...; tariffs mean schoolbook rounding -> 0.85.
    assert_allclose(round_pf([0.845, 0.8449, 0.855, 0.9], 2), [0.85, 0.84, 0.86, 0.9])
    assert_allclose(round_pf([0.8449], None), [0.8449])
    assert np.isnan(round_pf(np.nan, 2))


def test_interval_minutes_must_divide_a_day():
    f = interval_frame("2025-01-06", "2025-01-06 01:00", minutes=15)
    with pytest.raises(UsageError, match="interval_minutes"):
        interval_power(f, 7)


# ---------------------------------------------------------------------------------------------
# Billing periods and coverage
# ---------------------------------------------------------------------------------------------


def _utc(local: str, tz: str = "Europe/Berlin") -> pd.Timestamp:
    return pd.Timestamp(local, tz=tz).tz_convert("UTC")


def test_calendar_months_follow_local_dates():
    # 2025-01-31 23:30 UTC is already 1 February in Berlin.
    ps = billing_periods(_utc("2025-01-15"), pd.Timestamp("2025-01-31 23:30", tz="UTC"), "Europe/Berlin")
    assert ps == [BillingPeriod(date(2025, 1, 1), date(2025, 2, 1)), BillingPeriod(date(2025, 2, 1), date(2025, 3, 1))]
    assert ps[0].label == "2025-01"


def test_billing_day_cycles_and_short_months():
    ps = billing_periods(_utc("2025-01-20"), _utc("2025-03-10"), "Europe/Berlin", billing_day=15)
    assert [(p.start, p.end) for p in ps] == [
        (date(2025, 1, 15), date(2025, 2, 15)),
        (date(2025, 2, 15), date(2025, 3, 15)),
    ]
    assert ps[0].label == "2025-01-15..2025-02-15"
    # Day 31 means the month's last day in short months.
    ps = billing_periods(_utc("2025-02-10"), _utc("2025-03-05"), "Europe/Berlin", billing_day=31)
    assert [(p.start, p.end) for p in ps] == [(date(2025, 1, 31), date(2025, 2, 28)), (date(2025, 2, 28), date(2025, 3, 31))]
    with pytest.raises(UsageError, match="billing day"):
        billing_periods(_utc("2025-02-10"), _utc("2025-03-05"), "Europe/Berlin", billing_day=0)


def test_explicit_periods_sorted_and_checked():
    a = BillingPeriod(date(2025, 2, 3), date(2025, 3, 4))
    b = BillingPeriod(date(2025, 1, 2), date(2025, 2, 3))
    assert billing_periods(None, None, "UTC", explicit=[a, b]) == [b, a]
    with pytest.raises(UsageError, match="overlap"):
        billing_periods(None, None, "UTC", explicit=[a, BillingPeriod(date(2025, 3, 1), date(2025, 4, 1))])
    with pytest.raises(UsageError, match="end must be after start"):
        BillingPeriod(date(2025, 3, 1), date(2025, 3, 1))


def test_expected_intervals_on_dst_days():
    # Common practice: a local day with a one-hour DST change has 92 or 100 quarter hours.
    days = [
        BillingPeriod(date(2025, 3, 30), date(2025, 3, 31)),  # EU spring forward
        BillingPeriod(date(2025, 10, 26), date(2025, 10, 27)),  # EU fall back
        BillingPeriod(date(2025, 3, 1), date(2025, 4, 1)),  # March: 31 x 96 - 4
    ]
    assert list(expected_intervals(days, "Europe/Berlin", 15)) == [92, 100, 2972]
    us = [BillingPeriod(date(2025, 3, 9), date(2025, 3, 10)), BillingPeriod(date(2025, 11, 2), date(2025, 11, 3))]
    assert list(expected_intervals(us, "America/New_York", 15)) == [92, 100]
    assert list(expected_intervals(days[:1], "UTC", 30)) == [48]


# ---------------------------------------------------------------------------------------------
# Segment reductions and period figures
# ---------------------------------------------------------------------------------------------


def test_segment_reductions_handle_empty_periods():
    v = np.array([1.0, 5.0, 2.0, 7.0, 7.0, 3.0])
    bounds = np.array([0, 3, 3, 6])  # second period empty
    assert_allclose(segment_sum(v, bounds), [8.0, 0.0, 17.0])
    assert_allclose(segment_max(v, bounds), [5.0, np.nan, 7.0])
    assert list(segment_argmax(v, bounds)) == [1, -1, 3]  # first of tied maxima
    assert_allclose(segment_sum(np.vstack([v, 2 * v]), bounds), [[8, 0, 17], [16, 0, 34]])


def _bit_equal(a, b) -> bool:
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    return a.shape == b.shape and bool(np.all((a == b) | (np.isnan(a) & np.isnan(b))))


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.sampled_from([0.0, 1.0, 2.5, 1e-200, 1e-150, 1e150, 1e200, 3.0, 4.0]),
                          st.sampled_from([0.0, 1.0, -1.0, 2.5, -4.0, 1e-160, 1e160, 3.0, 4.0, np.nan])),
                max_size=40),
       st.lists(st.integers(0, 40), max_size=5))
def test_kva_peak_is_numpys_hypot_peak_to_the_bit(rows, cuts):
    # The kVA peak and its (first) interval must be exactly what numpy's hypot over every
    # interval gives, whatever the ties, zero-load or empty periods, extreme magnitudes and NaN.
    kw = np.array([r[0] for r in rows], dtype=float)
    net = np.array([r[1] for r in rows], dtype=float)
    bounds = np.array([0, *sorted(min(c, len(rows)) for c in cuts), len(rows)], dtype=np.int64)
    lag, lead = np.where(net > 0, net, 0.0) / 4.0, np.where(net < 0, -net, 0.0) / 4.0
    lag[np.isnan(net)] = np.nan
    r = reactive_period_figures(kw, lag, lead, bounds, 15, np.full(len(bounds) - 1, -1))
    kva = np.hypot(kw, (lag - lead) * 4.0)
    assert _bit_equal(r.peak_kva, segment_max(kva, bounds))
    assert list(r.peak_kva_pos) == list(segment_argmax(kva, bounds))
    assert _bit_equal(r.kva, kva)
    assert _bit_equal(r.peak_kvar, segment_max(lag * 4.0, bounds))


def test_kva_peak_ties_and_near_ties():
    # 3-4-5 and 5-0 give the same kVA (a tie: the first wins); 1 ulp below 5 is not a tie
    kw = np.array([3.0, 5.0, np.nextafter(5.0, 0), 4.0, 0.0, 0.0])
    lag = np.array([1.0, 0.0, 0.0, 0.75, 0.0, 0.0])
    bounds = np.array([0, 4, 6])
    r = reactive_period_figures(kw, lag, np.zeros(6), bounds, 15, np.array([1, -1]))
    assert list(r.peak_kva_pos) == [0, 4] and r.peak_kva[0] == 5.0 and r.peak_kva[1] == 0.0


@pytest.mark.parametrize("unit", ["s", "ms", "us", "ns"])
@pytest.mark.parametrize("tz", ["Europe/Berlin", "Australia/Lord_Howe", "America/St_Johns", "UTC", "Europe/Amsterdam"])
def test_local_iso_times_write_what_pandas_writes(tz, unit):
    # The reference is pandas' own Timestamp.isoformat, across both DST changes of a year
    # (the repeated autumn hour included), half-hour shifts and a local-mean-time offset (1890).
    for start, freq, n in (("2025-01-01", "15min", 35040), ("1890-01-01", "7h", 3000)):
        local = pd.date_range(start, periods=n, freq=freq, tz="UTC", unit=unit).tz_convert(tz)
        positions = np.r_[np.arange(0, n, 5), -1]
        want = [local[p].isoformat() for p in positions[:-1]] + [None]
        assert local_iso_times(local, positions) == want


def test_local_iso_times_between_microseconds_and_other_zone_types():
    local = (pd.date_range("2025-10-26", periods=12, freq="15min", tz="UTC", unit="ns")
             + pd.Timedelta(7, "ns")).tz_convert("Europe/Berlin")
    assert local_iso_times(local, [0, -1, 11]) == [local[0].isoformat(), None, local[11].isoformat()]
    assert local_iso_times(local, [0])[0].endswith(".000000007+02:00")
    dateutil_zone = local.tz_convert("dateutil/Europe/Berlin")
    assert local_iso_times(dateutil_zone, [4, 8]) == [dateutil_zone[4].isoformat(), dateutil_zone[8].isoformat()]


def test_period_figures_of_the_hand_worked_month():
    """June 2025 (tests.audit_helpers.june_frame): kWh 72,150, kvarh 43,290, tan phi 0.6,
    PF = 1 / sqrt(1 + 0.36) = 0.857493, peak kW 250 at 2025-06-10 10:00 local (+02:00),
    peak kVA = sqrt(250^2 + 150^2) = 291.548, peak kvar 150, PF at peak 250 / 291.548 = 0.857493,
    load factor = 72,150 / (250 x 720 h) = 0.400833, coverage 720 / 720."""
    f = june_frame()
    f.iloc[:3, f.columns.get_loc("estimated")] = True
    fig = period_figures(f, [BillingPeriod(date(2025, 6, 1), date(2025, 7, 1))], "Europe/Berlin", 60).iloc[0]
    assert_allclose(
        [fig.kwh, fig.kvarh_lag, fig.pf, fig.tan_phi, fig.peak_kw, fig.peak_kva, fig.peak_kvar, fig.pf_at_peak, fig.load_factor],
        [72150, 43290, 1 / math.sqrt(1.36), 0.6, 250, math.hypot(250, 150), 150, 1 / math.sqrt(1.36), 72150 / (250 * 720)],
        rtol=1e-12,
    )
    assert fig.peak_kw_at == "2025-06-10T10:00:00+02:00"
    assert fig.coverage == 1.0 and fig.expected_intervals == 720
    assert fig.estimated_intervals == 3


def test_period_figures_kvarh_basis_and_gaps():
    f = interval_frame("2025-06-01", "2025-06-03", minutes=60, kwh=10.0, kvarh_lag=8.0, kvarh_lead=2.0)
    f = f.drop(f.index[5:17])  # 12 hours missing on day one
    set_at(f, "2025-06-02 12:00", kwh=30.0)
    ps = [BillingPeriod(date(2025, 6, 1), date(2025, 6, 2)), BillingPeriod(date(2025, 6, 2), date(2025, 6, 3))]
    fig = period_figures(f, ps, "Europe/Berlin", 60, kvarh_basis="net")
    assert_allclose(fig["coverage"], [0.5, 1.0])
    assert_allclose(fig["pf_basis"], [10 / math.hypot(10, 6), 260 / math.hypot(260, 144)])
    # Load factor uses the hours with data, so a gap does not depress it.
    assert_allclose(fig["load_factor"], [1.0, 260 / (30 * 24)])
