"""Screening: parallel resonance, voltage rise, capacitor voltage, over-correction, cautions."""
from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from auditor.correction import (
    CAUTIONS,
    BankDesign,
    SiteElectrical,
    parallel_resonance_order,
    screen,
    voltage_rise_percent,
)
from auditor.errors import UsageError

SITE = SiteElectrical(transformer_kva=1000, transformer_impedance_percent=6, nominal_voltage_v=400)


def test_short_circuit_from_transformer():
    # S_sc ≈ S_T / z — IEEE Std 1036, common practice
    s_sc, why = SITE.short_circuit()
    assert why is None
    assert_allclose(s_sc, 1000 / 0.06)
    assert SiteElectrical(short_circuit_kva=5000, transformer_kva=1000).short_circuit() == (5000, None)


def test_resonance_and_voltage_rise_formulas():
    # IEEE Std 1036 (common practice): h = √(Ssc/Qc), ΔU% = 100 Qc / Ssc; hand values
    assert_allclose(parallel_resonance_order(16_666.67, 300.0), math.sqrt(16_666.67 / 300), rtol=1e-12)
    assert_allclose(voltage_rise_percent(16_666.67, 300.0), 1.8, rtol=1e-6)
    # detuned: 1 / √(Qc/Ssc + p), below the tuning order 1/√p (circuit theory)
    h = parallel_resonance_order(16_666.67, 300.0, 7.0)
    assert_allclose(h, 1 / math.sqrt(300 / 16_666.67 + 0.07))
    assert h < 1 / math.sqrt(0.07)


def test_resonance_near_seventh_fails_and_recommends_detuning():
    res = screen(BankDesign.fixed(300), SITE)  # h = 7.45, within ±10 % of 7
    assert_allclose(res.resonance_order, math.sqrt((1000 / 0.06) / 300))
    assert res.resonance_near == 7 and not res.passed
    assert any("detuned" in w and "harmonic 7" in w for w in res.warnings)
    d = res.to_dict()
    assert set(d) >= {"resonance_order", "voltage_rise_percent", "leading_intervals"}


def test_automatic_bank_screens_every_stage():
    # 6x50: 300 kvar h = √(16667/300) = 7.45 (near 7); 150 kvar 10.5 (near 11); 100 kvar 12.9 (13)
    res = screen(BankDesign.automatic("6x50"), SITE)
    assert len(res.resonance_orders_by_stage) == 6
    assert_allclose(res.resonance_orders_by_stage[1], math.sqrt((1000 / 0.06) / 100))
    assert "harmonic 7, 11, 13" in " ".join(res.warnings)


def test_detuned_bank_passes_resonance():
    res = screen(BankDesign.fixed(300, detuning_percent=7, capacitor_rated_voltage_v=440), SITE)
    assert res.resonance_near is None
    assert res.resonance_order < 3.78
    assert res.passed, res.warnings


def test_voltage_rise_and_capacitor_voltage_limits():
    res = screen(BankDesign.fixed(600), SITE)  # ΔU = 3.6 % > 3 %
    assert_allclose(res.voltage_rise_percent, 3.6)
    assert not res.passed and any("voltage rise" in w for w in res.warnings)
    # 14 % reactor with capacitors rated at the system voltage: 116 % > 110 % (from memory)
    res = screen(BankDesign.fixed(50, detuning_percent=14), SITE)
    assert res.capacitor_voltage_percent > 116
    assert any("higher rated voltage" in w for w in res.warnings)


def test_missing_site_data_is_a_warning_not_silence():
    res = screen(BankDesign.fixed(100), SiteElectrical(transformer_kva=800))
    assert res.resonance_order is None and not res.resonance_checked
    assert any("transformer_impedance_percent" in w for w in res.warnings)
    with pytest.raises(UsageError, match="transformer_kva"):
        SiteElectrical(transformer_kva=-5)
    with pytest.raises(UsageError, match="percentage"):
        SiteElectrical(transformer_impedance_percent=600)


def test_over_correction_counted():
    before = np.array([50.0, 10.0, -2.0, 30.0])
    out = np.full(4, 20.0)
    after = before - out
    res = screen(BankDesign.fixed(20), SITE, kvar_net_before=before, kvar_net_after=after,
                 output_kvar=out, interval_minutes=15, leading_charge_increase=12.5)
    assert res.leading_intervals == 2
    # added leading kvar: 10 (0→10) + 20 (2→22) = 30 kvar x 0.25 h
    assert_allclose(res.leading_kvarh_added, 7.5)
    assert any("12.50" in w and "automatic" in w for w in res.warnings)


def test_cautions_cover_domain_section_7():
    text = " ".join(CAUTIONS).lower()
    for word in ("charge", "qualified", "code", "resonance", "over-voltage", "harmonic", "survey",
                 "certify", "discharge"):
        assert word in text


# ---------------------------------------------------------------------------------------------
# graded rules and their settings
# ---------------------------------------------------------------------------------------------
from auditor.correction import ScreeningLimits  # noqa: E402
from auditor.correction.screening import Operation, parse_setting  # noqa: E402


def test_every_rule_reports_status_value_limit_and_message():
    res = screen(BankDesign.fixed(300), SITE)
    d = res.to_dict()
    names = [r["rule"] for r in d["rules"]]
    assert set(names) == {"over_correction", "minimum_load", "resonance", "voltage_rise", "capacitor_duty",
                          "harmonic_distortion"}
    for r in d["rules"]:
        assert set(r) >= {"rule", "status", "value", "limit", "message"}
        assert r["status"] in ("pass", "caution", "fail") and r["message"]
    assert d["passed"] is False and d["status"] == "fail"
    assert d["rules"][0]["status"] == "fail"  # failing rules first


def test_resonance_margins_are_graded():
    # h_r = √(S_sc/Q_c) (IEEE Std 1036): 175 kvar → 9.76, 11.3 % below the 11th: inside the
    # ±15 % caution band, outside the ±10 % fail band (defaults from memory); 150 kvar → 10.54
    caution = screen(BankDesign.fixed(175), SITE).rule("resonance")
    assert caution.status == "caution" and caution.limit == 15.0
    assert_allclose(caution.value, 100 * (11 - math.sqrt((1000 / 0.06) / 175)) / 11)
    fail = screen(BankDesign.fixed(150), SITE).rule("resonance")
    assert fail.status == "fail" and fail.limit == 10.0 and "harmonic 11" in fail.message
    # the margins are settings
    narrow = ScreeningLimits(resonance_fail_percent=3, resonance_caution_percent=5)
    assert screen(BankDesign.fixed(150), SITE, limits=narrow).rule("resonance").status == "caution"
    assert screen(BankDesign.fixed(175), SITE, limits=narrow).rule("resonance").status == "pass"


def test_over_correction_share_and_minimum_load_decide():
    # a fixed 50 kvar bank on a site whose light-load kvar is 20: leading in half the intervals
    before = np.array([100.0, 80.0, 20.0, 20.0])
    out = np.full(4, 50.0)
    op = Operation(kvar_net_before=before, kvar_net_after=before - out, output_kvar=out, interval_minutes=15,
                   light_load_kvar=20.0)
    res = screen(BankDesign.fixed(50), SITE, operation=op)
    over = res.rule("over_correction")
    assert over.status == "fail" and over.value == 50.0 and over.limit == 5.0
    minimum = res.rule("minimum_load")
    assert minimum.status == "fail" and minimum.value == 50.0 and minimum.limit == 20.0
    assert not res.passed
    # an automatic bank whose smallest step is above the light-load kvar only cautions
    auto = screen(BankDesign.automatic("2x25"), SITE, operation=Operation(light_load_kvar=20.0))
    assert auto.rule("minimum_load").status == "caution"
    # the leading charge against the saving: 12 of a saving of 100 is above 10 % (project default)
    op = Operation(kvar_net_before=np.full(400, 30.0), kvar_net_after=np.r_[np.full(399, 5.0), -1.0],
                   output_kvar=np.full(400, 25.0), interval_minutes=15, leading_charge_increase=12.0, saving=100.0)
    over = screen(BankDesign.fixed(25), SITE, operation=op).rule("over_correction")
    assert over.value == 0.25 and over.status == "fail" and "12 % of the saving" in over.message
    op = Operation(**{**op.__dict__, "leading_charge_increase": 5.0})
    assert screen(BankDesign.fixed(25), SITE, operation=op).rule("over_correction").status == "caution"


def test_voltage_rise_is_graded():
    # ΔU ≈ 100·Qc/Ssc (IEEE Std 1036): 400 kvar → 2.4 % cautions (above 2 %), 600 kvar → 3.6 % fails
    assert screen(BankDesign.fixed(400), SITE).rule("voltage_rise").status == "caution"
    assert screen(BankDesign.fixed(250), SITE).rule("voltage_rise").status == "pass"
    assert screen(BankDesign.fixed(600), SITE).rule("voltage_rise").status == "fail"


def test_reactor_rules():
    res = screen(BankDesign.reactor(20), SITE)
    names = {r.rule: r for r in res.rules}
    assert "voltage_drop" in names and "voltage_rise" not in names
    assert_allclose(names["voltage_drop"].value, 100 * 20 / (1000 / 0.06))
    assert names["resonance"].status == "pass" and names["capacitor_duty"].status == "pass"
    # a reactor that drives the site lagging beyond the target PF counts like over-correction
    kw = np.array([10.0, 10.0])
    before = np.array([-5.0, -5.0])
    out = np.array([-20.0, 0.0])
    op = Operation(kvar_net_before=before, kvar_net_after=before - out, output_kvar=out, kw=kw, target_pf=0.95)
    over = screen(BankDesign.reactor(20), SITE, operation=op).rule("over_correction")
    assert over.value == 50.0 and over.status == "fail"


def test_settings_are_checked_and_named():
    limits = ScreeningLimits.from_mapping({"resonance_fail_percent": 8, "harmonic_orders": [5, 7]})
    assert limits.resonance_fail_percent == 8.0 and limits.harmonic_orders == (5, 7)
    assert limits.changed() == {"resonance_fail_percent": 8.0, "harmonic_orders": [5, 7]}
    with pytest.raises(UsageError, match="did you mean 'resonance_fail_percent'"):
        ScreeningLimits.from_mapping({"resonance_fail_percnt": 8})
    with pytest.raises(UsageError, match="resonance_caution_percent must be at least"):
        ScreeningLimits.from_mapping({"resonance_fail_percent": 20})
    with pytest.raises(UsageError, match="positive number"):
        ScreeningLimits.from_mapping({"voltage_change_fail_percent": "high"})
    with pytest.raises(UsageError, match="harmonic_orders"):
        ScreeningLimits.from_mapping({"harmonic_orders": [1, 5]})
    assert parse_setting("light_load_percentile=10") == ("light_load_percentile", 10.0)
    assert parse_setting("harmonic_orders=5,7,11") == ("harmonic_orders", [5, 7, 11])
    assert parse_setting("thd_limit_percent=none") == ("thd_limit_percent", None)
    with pytest.raises(UsageError, match="KEY=VALUE"):
        parse_setting("resonance")
