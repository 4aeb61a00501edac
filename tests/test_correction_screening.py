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
