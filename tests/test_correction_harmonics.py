"""Harmonics: the frequency scan, harmonic voltages, THD and capacitor duty, against hand work
and published limits."""
from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from auditor.correction import BankDesign, SiteElectrical, tuning_order
from auditor.correction.harmonics import (
    HarmonicStudy,
    branch_impedance,
    bus_impedance,
    capacitor_reactance_ohm,
    estimate_spectrum,
    frequency_scan,
    ieee519_voltage_limits,
    scan_grid,
    spectrum_from_table,
    study,
)
from auditor.correction.screening import (
    ScreeningLimits,
    rule_capacitor_duty,
    rule_harmonic_distortion,
    screen,
)
from auditor.errors import UsageError

V = 400.0
S_SC = 1000 / 0.06  # kVA: a 1000 kVA transformer of 6 % impedance (S_T / z, IEEE Std 1036)


def test_frequency_scan_worked_by_hand_at_the_fifth():
    """One order of the scan by hand (the per-phase model of the module docstring).

    Bus 400 V, S_sc = 16 666.67 kVA; a 300 kvar bank rated 440 V with a 7 % reactor; 300 kW of
    load damping; order h = 5; 100 A of 5th-harmonic current injected::

        X_s   = V² / S_sc            = 160 000 / 16 666 667        = 0.009600 Ω
        X_c'  = U_r² / Q_r           = 193 600 / 300 000           = 0.645333 Ω
        Z_s   = j·h·X_s              = j·0.048000 Ω
        Z_b   = j·(h·p·X_c' − X_c'/h) = j·(0.225867 − 0.129067)    = j·0.096800 Ω
        R     = V² / P               = 160 000 / 300 000           = 0.533333 Ω
        Y     = 1/Z_s + 1/Z_b + 1/R  = −j20.8333 − j10.3306 + 1.875 = 1.875 − j31.1639 S
        |Z|   = 1 / |Y|              = 1 / 31.2203                 = 0.032030 Ω
        V_5   = I_5 · |Z|            = 100 × 0.032030              = 3.2030 V
              = 100 · V_5 / (V/√3)   = 3.2030 / 230.940            = 1.3869 % of the phase voltage
        I_c,5 = V_5 / |Z_b|          = 3.2030 / 0.0968             = 33.089 A
        V_c,5 = I_c,5 · X_c'/5       = 33.089 × 0.129067           = 4.2707 V

    The complex arithmetic is repeated below with Python's cmath, independently of numpy.
    """
    xs = V**2 / (S_SC * 1000)
    xc = 440.0**2 / 300_000
    h, p, r = 5, 0.07, V**2 / 300_000
    zs, zb = 1j * h * xs, 1j * (h * p * xc - xc / h)
    z_hand = 1 / (1 / zs + 1 / zb + 1 / r)
    assert_allclose([xs, xc, zb.imag, r], [0.0096, 0.645333, 0.0968, 0.533333], rtol=1e-5)
    assert_allclose(abs(z_hand), 0.032030, rtol=1e-4)
    assert_allclose(cmath.phase(z_hand), math.atan2(31.1639, 1.875), rtol=1e-4)
    z = bus_impedance([5], voltage_v=V, short_circuit_kva=S_SC, xc_ohm=capacitor_reactance_ohm(300, 440),
                      detuning_percent=7, load_kw=300)
    assert_allclose(z[0, 0], z_hand, rtol=1e-12)
    spectrum = spectrum_from_table([5], voltage_v=V, current_a=[100.0], fundamental_a=500.0)
    st = study(voltage_v=V, short_circuit_kva=S_SC, stage_rated_kvar=np.array([300.0]), rated_voltage_v=440,
               detuning_percent=7, spectrum=spectrum, load_kw=300)
    assert_allclose(st.v_with_pct[0, 0], 100 * 3.2030 / (V / math.sqrt(3)), rtol=1e-4)
    assert_allclose(st.v_with_pct[0, 0], 1.3869, rtol=1e-4)
    # the capacitor: fundamental (V/√3)/(1 − p) plus the 5th, V_c,5 = 4.2707 V
    vc1 = (V / math.sqrt(3)) / 0.93
    assert_allclose(st.v_peak_pct[0], 100 * (vc1 + 4.2707) / (440 / math.sqrt(3)), rtol=1e-4)
    assert_allclose(st.v_rms_pct[0], 100 * math.hypot(vc1, 4.2707) / (440 / math.sqrt(3)), rtol=1e-4)
    i_rated = 300_000 / (math.sqrt(3) * 440)
    assert_allclose(st.i_rms_pct[0], 100 * math.hypot(vc1 / xc, 33.089) / i_rated, rtol=1e-4)
    assert_allclose(st.kvar_pct[0], st.v_rms_pct[0] * st.i_rms_pct[0] / 100)
    # without the bank: R in parallel with j·h·X_s only
    z0 = 1 / (1 / zs + 1 / r)
    assert_allclose(st.v_without_pct[0], 100 * 100 * abs(z0) / (V / math.sqrt(3)), rtol=1e-12)


@pytest.mark.parametrize("q_kvar", [100.0, 300.0, 600.0])
def test_undamped_scan_resonance_is_sqrt_ssc_over_qc(q_kvar):
    # IEEE Std 1036: h_r = √(S_sc / Q_c); the scan's |Z| peak sits within one grid step of it
    h = scan_grid()
    step = h[1] - h[0]
    scan = frequency_scan(voltage_v=V, short_circuit_kva=S_SC, stage_rated_kvar=np.array([q_kvar]),
                          rated_voltage_v=V, detuning_percent=0.0, load_kw=None)
    expected = math.sqrt(S_SC / q_kvar)
    assert abs(scan["with"][0]["resonance_order"] - expected) <= step + 1e-9
    assert scan["damped"] is False and len(scan["orders"]) == len(scan["impedance_ohm_without"]) == 491


def test_detuned_branch_is_tuned_to_one_over_sqrt_p():
    # common practice (IEEE Std 1531): a reactor of p tunes the branch to h = 1/√p
    for p, h in ((5.67, 4.2), (7.0, 3.78), (14.0, 2.67)):
        assert_allclose(tuning_order(p), 1 / math.sqrt(p / 100), rtol=1e-12)
        assert_allclose(tuning_order(p), h, atol=0.005)
        zb = branch_impedance([tuning_order(p)], capacitor_reactance_ohm(100, 440), p)
        assert abs(zb[0, 0]) < 1e-12  # series resonance: the branch is a short circuit there
    # and the detuned bank's parallel resonance with the supply lies below it: 1/√(Q/S + p)
    scan = frequency_scan(voltage_v=V, short_circuit_kva=S_SC, stage_rated_kvar=np.array([300.0]),
                          rated_voltage_v=440, detuning_percent=7.0, load_kw=None)
    q_own = 300 * (V / 440) ** 2  # the capacitor's own kvar at the bus voltage
    assert abs(scan["with"][0]["resonance_order"] - 1 / math.sqrt(q_own / S_SC + 0.07)) <= 0.1 + 1e-9


def test_ieee519_voltage_limits():
    # IEEE Std 519-2014 Table 1: ≤ 1 kV: 5 % individual, 8 % THD; 1–69 kV: 3 % and 5 %
    assert ieee519_voltage_limits(400) == (5.0, 8.0)
    assert ieee519_voltage_limits(1000) == (5.0, 8.0)
    assert ieee519_voltage_limits(11_000) == (3.0, 5.0)
    assert ieee519_voltage_limits(69_000) == (3.0, 5.0)
    assert ieee519_voltage_limits(None) == (5.0, 8.0)


def _study(**arrays) -> HarmonicStudy:
    base = dict(orders=np.array([5]), current_a=np.array([10.0]), v_without_pct=np.array([1.0]),
                v_with_pct=np.array([[1.0]]), thd_without_pct=1.0, thd_with_pct=np.array([1.0]),
                v_rms_pct=np.array([100.0]), v_peak_pct=np.array([100.0]), i_rms_pct=np.array([100.0]),
                kvar_pct=np.array([100.0]), individual_limit_pct=5.0, thd_limit_pct=8.0, source="measured")
    base.update(arrays)
    return HarmonicStudy(**base)


@pytest.mark.parametrize("field, value, status", [
    # IEEE Std 18: continuous limits 110 % rms voltage, 120 % peak voltage, 135 % rms current,
    # 135 % kvar; a caution within 5 points of each (project default)
    ("v_rms_pct", 111.0, "fail"), ("v_rms_pct", 109.0, "caution"), ("v_rms_pct", 104.0, "pass"),
    ("v_peak_pct", 121.0, "fail"), ("v_peak_pct", 119.0, "caution"),
    ("i_rms_pct", 136.0, "fail"), ("i_rms_pct", 134.0, "caution"),
    ("kvar_pct", 136.0, "fail"), ("kvar_pct", 129.0, "pass"),
])
def test_capacitor_duty_against_ieee_std_18(field, value, status):
    st = _study(**{field: np.array([value])})
    rule, _ = rule_capacitor_duty(BankDesign.fixed(100), ScreeningLimits(), V, st, 0.5)
    assert rule.status == status, rule.message
    assert "IEEE Std 18" in rule.message


def test_distortion_rule_fails_only_what_the_bank_makes_worse():
    # IEEE Std 519-2014, bus ≤ 1 kV: THD 8 %
    limits = ScreeningLimits()
    spectrum = spectrum_from_table([5], voltage_v=V, current_pct=[20.0], fundamental_a=400.0)
    worse = _study(thd_without_pct=4.0, thd_with_pct=np.array([9.0]), v_without_pct=np.array([4.0]),
                   v_with_pct=np.array([[9.0]]))
    r = rule_harmonic_distortion(BankDesign.fixed(100), worse, limits, spectrum, S_SC)
    assert r.status == "fail" and r.limit == 8.0 and "IEEE Std 519-2014" in r.message
    already = _study(thd_without_pct=9.5, thd_with_pct=np.array([9.0]), v_without_pct=np.array([4.5]),
                     v_with_pct=np.array([[4.4]]))
    assert rule_harmonic_distortion(BankDesign.fixed(100), already, limits, spectrum, S_SC).status == "caution"
    amplified = _study(thd_without_pct=1.0, thd_with_pct=np.array([3.0]), v_without_pct=np.array([1.0]),
                       v_with_pct=np.array([[3.0]]))
    assert rule_harmonic_distortion(BankDesign.fixed(100), amplified, limits, spectrum, S_SC).status == "caution"
    r = rule_harmonic_distortion(BankDesign.fixed(100), None, limits, None, S_SC)
    assert r.status == "caution" and not r.checked and "not assessed" in r.message


def test_estimate_from_drive_share_is_labelled_and_six_pulse():
    # six-pulse characteristic orders 6k ± 1 with 1/h of the drives' fundamental (from memory)
    s = estimate_spectrum(0.4, load_kw=300, pf=0.8, voltage_v=V)
    assert s.source == "estimated" and s.estimated and "estimate" in s.note
    assert s.orders[:6] == (5, 7, 11, 13, 17, 19) and max(s.orders) <= 49
    i1 = 300_000 / (math.sqrt(3) * V * 0.8)
    assert_allclose(s.fundamental_a, i1)
    assert_allclose(s.current_a[0], 0.4 * i1 / 5)
    assert_allclose(s.current_pct[1], 40 / 7)
    with pytest.raises(UsageError, match="drive share"):
        estimate_spectrum(1.5, load_kw=300, pf=0.8, voltage_v=V)


def test_spectrum_in_percent_needs_its_fundamental():
    s = spectrum_from_table([1, 5, 7], voltage_v=V, current_a=[400.0, 80.0, 40.0])
    assert s.orders == (5, 7) and s.fundamental_a == 400.0 and s.current_pct == (20.0, 10.0)
    s = spectrum_from_table([5], voltage_v=V, current_pct=[20.0], kw=300, pf=0.8)
    assert_allclose(s.current_a[0], 0.2 * 300_000 / (math.sqrt(3) * V * 0.8))
    with pytest.raises(UsageError, match="fundamental"):
        spectrum_from_table([5], voltage_v=V, current_pct=[20.0])


def test_strong_fifth_and_seventh_fail_a_plain_bank_near_seven_and_pass_its_detuned_version():
    site = SiteElectrical(transformer_kva=1000, transformer_impedance_percent=6, nominal_voltage_v=V)
    spectrum = spectrum_from_table([5, 7, 11, 13], voltage_v=V, current_pct=[25.0, 12.0, 6.0, 4.0],
                                   kw=300, pf=0.8)
    plain = screen(BankDesign.fixed(300), site, spectrum=spectrum, load_kw=300)  # h_r = 7.45
    assert not plain.passed
    failed = {r.rule for r in plain.failed_rules}
    assert {"resonance", "harmonic_distortion"} <= failed
    assert plain.harmonics.thd_with_pct[-1] > 8.0 > plain.harmonics.thd_without_pct
    detuned = screen(BankDesign.fixed(300, 7, 440), site, spectrum=spectrum, load_kw=300)
    assert detuned.rule("resonance").status == "pass"
    assert detuned.rule("harmonic_distortion").status == "pass"
    assert detuned.harmonics.thd_with_pct[-1] < detuned.harmonics.thd_without_pct  # it absorbs some
