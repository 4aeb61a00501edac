"""Correction scenarios an engineer would sign: never a recommendation that fails its own
screening; leading sites get a reactor or capacitance switched off; a measured spectrum decides
detuning; the specification comes with every design."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.correction import (
    BankDesign,
    SiteElectrical,
    bank_output_kvar,
    optimise,
    run_scenario,
    spectrum_from_table,
    standard_capacitor_voltage,
)
from auditor.tariffs import tariff_from_dict

TZ = "Europe/Berlin"
SITE = SiteElectrical(transformer_kva=1000, transformer_impedance_percent=6, nominal_voltage_v=400)
TARIFF = tariff_from_dict({
    "name": "Two-shift supply (invented)", "currency": "EUR", "energy": {"price_per_kwh": 0.12},
    "demand": {"basis": "kw", "price_per_kw": 9.0},
    "reactive": [
        {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.03},
        {"kind": "leading_kvarh", "price_per_kvarh": 0.02, "hours": [22, 6]},
    ],
})
SPEC_KEYS = {"kind", "bus_voltage_v", "total_kvar_at_bus", "steps_kvar_at_bus", "steps",
             "capacitor_rated_voltage_v", "capacitor_rated_kvar", "reactor_percent", "tuning_order",
             "tuning_frequency_hz", "controller", "minimum_load", "pf_after_range", "budget", "cautions", "rows"}


def light_nights(days=56, seed=11) -> pd.DataFrame:
    """An invented joinery works: weekdays 06–22 at 400 kW and PF 0.80, nights and weekends
    at 40 kW and PF 0.95 (13 kvar) — the light nights a fixed bank over-corrects."""
    idx = pd.date_range(pd.Timestamp("2024-09-02", tz=TZ), periods=days * 96, freq="15min")
    rng = np.random.default_rng(seed)
    busy = (idx.hour >= 6) & (idx.hour < 22) & (idx.day_of_week < 5)
    kw = np.where(busy, 400.0, 40.0) * rng.uniform(0.85, 1.15, idx.size)
    kvar = kw * np.where(busy, 0.75, 0.3287) * rng.uniform(0.9, 1.1, idx.size)
    return pd.DataFrame({"kwh": kw / 4, "kvarh_lag": kvar / 4, "kvarh_lead": 0.0, "kwh_received": 0.0,
                         "estimated": False}, index=pd.DatetimeIndex(idx.tz_convert("UTC"), name="start"))


def leading_office(days=56, seed=12) -> pd.DataFrame:
    """An invented office: weekdays 07–19 at 100 kW and PF 0.88 with a 20 kvar capacitor always
    in; nights at 14 kW, where that capacitor makes the building lead by about 15 kvar."""
    idx = pd.date_range(pd.Timestamp("2024-09-02", tz=TZ), periods=days * 96, freq="15min")
    rng = np.random.default_rng(seed)
    occupied = (idx.hour >= 7) & (idx.hour < 19) & (idx.day_of_week < 5)
    kw = np.where(occupied, 100.0, 14.0) * rng.uniform(0.9, 1.1, idx.size)
    q = kw * np.where(occupied, math.tan(math.acos(0.88)), math.tan(math.acos(0.93))) - 20.0
    q = q + rng.normal(0, 0.5, idx.size)
    return pd.DataFrame({"kwh": kw / 4, "kvarh_lag": np.maximum(q, 0) / 4, "kvarh_lead": np.maximum(-q, 0) / 4,
                         "kwh_received": 0.0, "estimated": False},
                        index=pd.DatetimeIndex(idx.tz_convert("UTC"), name="start"))


def test_a_fixed_bank_on_light_nights_fails_first_and_says_why():
    res = run_scenario(light_nights(), TARIFF, tz=TZ, interval_minutes=15, bank=BankDesign.fixed(300), site=SITE,
                       sensitivity=False)
    assert not res.screening.passed and not res.recommended and not res.specification["recommended"]
    over = res.screening.rule("over_correction")
    assert over.status == "fail" and over.value > 50  # most intervals run leading
    assert res.screening.rule("minimum_load").status == "fail"
    # the failing rules come first, before anything else, and the PF after is said to be leading
    failing = [r.message for r in res.screening.failed_rules]
    assert list(res.warnings[:len(failing)]) == failing
    assert res.pf_after_sense == "leading"
    assert not any("a larger bank would be needed" in w for w in res.warnings)
    d = res.to_dict()
    assert d["screening"]["passed"] is False and d["screening"]["rules"][0]["status"] == "fail"
    assert d["specification"]["rows"][0]["label"].startswith("FAILS")
    # the nearest design that passes is offered, and it does pass
    alt = res.alternative
    assert alt is not None
    again = run_scenario(light_nights(), TARIFF, tz=TZ, interval_minutes=15, site=SITE, sensitivity=False,
                         bank=BankDesign(alt["kind"], tuple(alt["steps_kvar"]), alt["detuning_percent"],
                                         alt["capacitor_rated_voltage_v"]))
    assert again.screening.passed and again.recommended
    assert_allclose(again.npv, alt["npv"])


def test_the_optimiser_never_recommends_what_its_screening_fails():
    res = optimise(light_nights(), TARIFF, tz=TZ, interval_minutes=15, site=SITE, sensitivity=False)
    assert res.recommended and res.screening.passed
    assert res.optimiser["status"] == "recommended"
    table = res.candidates
    assert any(not c["passed_screening"] for c in table)  # fixed banks over-correct at night
    for c in table:
        if c["recommended"] or c["chosen"]:
            assert c["passed_screening"] and not c["failed_rules"]
    # passing designs first, best NPV first among them
    flags = [c["passed_screening"] for c in table]
    assert flags == sorted(flags, reverse=True)
    passing = [c["npv"] for c in table if c["passed_screening"]]
    assert passing == sorted(passing, reverse=True) and res.npv == passing[0]
    fixed = next(f for f in res.optimiser["families"] if f["family"] == "fixed, plain")
    assert any(s["rule"] == "over_correction" for s in fixed["stopped_by"])


def test_reactor_controller_is_the_mirror_rule():
    """A 10 kvar reactor, target PF 0.95 (tan φ = 0.3287), by hand::

        interval    kW    Q_net   needed = −Q   allowed = P·0.3287 − Q   switched
        1           10    −12     12            15.29                    10 (largest ≤ allowed)
        2           10     −3      3             6.29                     0 (10 > allowed)
        3          100     40    −40            −7.13                     0
    """
    out = bank_output_kvar(BankDesign.reactor(10), np.array([10.0, 10.0, 100.0]), np.array([-12.0, -3.0, 40.0]), 0.95)
    assert_allclose(out, [-10.0, 0.0, 0.0])


def test_a_leading_office_is_offered_a_reactor_or_switch_off():
    frame = leading_office()
    res = optimise(frame, TARIFF, tz=TZ, interval_minutes=15, site=SITE, sensitivity=False)
    assert res.bank.kind in ("reactor", "switch_off"), res.bank.label
    assert res.recommended and res.screening.passed and res.npv > 0
    assert res.savings_by_charge["leading_kvarh"] > 0
    kinds = {c["kind"] for c in res.candidates}
    assert {"reactor", "switch_off"} <= kinds and "automatic" in kinds  # chosen among both by NPV
    best_capacitor = max(c["npv"] for c in res.candidates if c["kind"] in ("fixed", "automatic"))
    assert res.npv > best_capacitor
    assert res.specification["kind"] == res.bank.kind
    # a reactor asked for explicitly
    r = run_scenario(frame, TARIFF, tz=TZ, interval_minutes=15, site=SITE, bank=BankDesign.reactor(15),
                     sensitivity=False)
    d = r.to_dict()
    assert d["bank"]["kind"] == "reactor" and d["specification"]["kind"] == "reactor"
    assert d["specification"]["capacitor_rated_voltage_v"] is None
    assert np.all(r.output_kvar <= 0)  # it absorbs
    assert {x["rule"] for x in d["screening"]["rules"]} >= {"voltage_drop", "over_correction"}
    # reactor capex from its own assumptions: 1200 + 40 × 15 + 600 (invented demonstration figures)
    assert_allclose(r.capex, 1200 + 40 * 15 + 600)


def test_measured_fifth_and_seventh_decide_detuning():
    spectrum = spectrum_from_table([5, 7, 11, 13], voltage_v=400, current_pct=[25.0, 12.0, 6.0, 4.0],
                                   kw=300, pf=0.8, note="from an invented measurement")
    frame = light_nights()
    # an automatic 6x50 bank resonates at 7.45 (300 kvar) and 10.5 (150 kvar): near the 7th and 11th
    plain = run_scenario(frame, TARIFF, tz=TZ, interval_minutes=15, site=SITE, bank=BankDesign.automatic("6x50"),
                         spectrum=spectrum, sensitivity=False)
    failed = {r.rule for r in plain.screening.failed_rules}
    assert {"resonance", "harmonic_distortion"} <= failed
    h = plain.to_dict()["harmonics"]
    assert h["source"] == "measured" and [o["order"] for o in h["orders"]] == [5, 7, 11, 13]
    assert set(h) >= {"thd_v_pct_without", "thd_v_pct_with", "limits", "capacitor_duty"}
    assert h["limits"] == {"individual_pct": 5.0, "thd_pct": 8.0}
    assert set(h["orders"][0]) == {"order", "current_a", "bus_voltage_pct_without", "bus_voltage_pct_with"}
    assert plain.alternative["label"] == "automatic 6x50 kvar, 7 % detuned"
    assert plain.alternative["why"].startswith("detuned version")
    # the optimiser, given the spectrum, recommends a detuned design
    best = optimise(frame, TARIFF, tz=TZ, interval_minutes=15, site=SITE, spectrum=spectrum, sensitivity=False)
    assert best.bank.detuned and best.screening.passed
    for c in best.candidates:
        if c["kind"] in ("fixed", "automatic") and not c["detuning_percent"] and c["passed_screening"]:
            # only small plain banks pass: their lowest resonance lies beyond the 13th's ±10 % band
            assert c["resonance_order"] > 13 * 1.10
    assert best.specification["reactor_percent"] in (5.67, 7.0, 14.0)


def test_estimated_spectrum_is_labelled_everywhere():
    res = run_scenario(light_nights(), TARIFF, tz=TZ, interval_minutes=15, site=SITE,
                       bank=BankDesign.automatic("6x50", 7, 440), drive_share=0.4, sensitivity=False)
    d = res.to_dict()
    assert d["harmonics"]["source"] == "estimated" and "estimate" in d["harmonics"]["note"]
    assert any(w.startswith("harmonics ESTIMATED") for w in d["warnings"])
    assert "estimated spectrum" in res.screening.rule("harmonic_distortion").message


def test_specification_contract():
    res = run_scenario(light_nights(), TARIFF, tz=TZ, interval_minutes=15, site=SITE,
                       bank=BankDesign.automatic("4x50", 7, 440), sensitivity=False)
    spec = res.to_dict()["specification"]
    assert SPEC_KEYS <= set(spec)
    assert spec["kind"] == "capacitor" and spec["bus_voltage_v"] == 400 and spec["steps"] == 4
    # 440 V capacitors, 7 % reactor on 400 V: Q_bus = 50 × (400/440)² / 0.93 per step (common practice)
    assert_allclose(spec["steps_kvar_at_bus"], [50 * (400 / 440) ** 2 / 0.93] * 4)
    assert spec["capacitor_rated_voltage_v"] == 440 and spec["capacitor_rated_kvar"] == 200
    assert_allclose(spec["tuning_order"], 1 / math.sqrt(0.07))
    assert_allclose(spec["tuning_frequency_hz"], 50 / math.sqrt(0.07))
    c = spec["controller"]
    assert set(c) >= {"target_pf", "switch_in_kvar", "switch_out_kvar", "switch_delay_s", "reconnect_delay_s",
                      "source"} and c["source"] == "from memory"
    step = spec["steps_kvar_at_bus"][0]
    assert_allclose(c["switch_in_kvar"], [step * (k + 2 / 3) for k in range(4)])
    assert_allclose(c["switch_out_kvar"], [step * (k + 1 / 3) for k in range(4)])
    assert set(spec["minimum_load"]) >= {"status", "smallest_step_kvar", "light_load_kvar", "percentile", "message"}
    assert set(spec["pf_after_range"]) >= {"p5", "median", "p95", "min"}
    assert spec["pf_after_range"]["p5"] <= spec["pf_after_range"]["median"] <= spec["pf_after_range"]["p95"]
    assert_allclose([spec["budget"]["low"], spec["budget"]["high"]], [0.8 * res.capex, 1.2 * res.capex])
    assert spec["cautions"] and all(set(r) == {"section", "label", "value", "unit", "note"} for r in spec["rows"])
    # a plain bank without a rating: the smallest standard rating at or above the voltage in
    # service (400 V × (1 + rise)), and the rated kvar that gives the kvar at the bus
    plain = run_scenario(light_nights(), TARIFF, tz=TZ, interval_minutes=15, site=SITE,
                         bank=BankDesign.automatic("4x25"), sensitivity=False).specification
    assert plain["capacitor_rated_voltage_v"] == 415 and plain["reactor_percent"] is None
    assert_allclose(plain["capacitor_rated_kvar"], 100 * (415 / 400) ** 2)


@pytest.mark.parametrize("required, rating", [(400, 400), (401, 415), (430.1, 440), (465.1, 480),
                                              (1000.5, 1100)])
def test_standard_capacitor_voltage(required, rating):
    # standard LV ratings from memory; above 1 kV rounded up to 100 V
    assert standard_capacitor_voltage(required) == rating
