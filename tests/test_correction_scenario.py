"""Correction scenarios: bank on the intervals, tariff again, savings, screening, finance."""
from __future__ import annotations

import json
import math

import numpy as np
import numpy_financial as npf
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.audit import audit
from auditor.correction import CAUTIONS, BankDesign, SiteElectrical
from auditor.correction.scenario import run_scenario, run_site, sum_meters
from auditor.errors import UsageError
from auditor.finance import CostInputs
from auditor.render import to_json
from auditor.tariffs import tariff_from_dict

TZ = "Europe/Berlin"
SITE = SiteElectrical(transformer_kva=1000, transformer_impedance_percent=6, nominal_voltage_v=400)


def constant_month(kw=100.0, kvar=75.0, minutes=15):
    """April 2024 (30 days) of constant load."""
    idx = pd.date_range(pd.Timestamp("2024-04-01", tz=TZ), pd.Timestamp("2024-05-01", tz=TZ),
                        freq=f"{minutes}min", inclusive="left").tz_convert("UTC")
    h = minutes / 60.0
    return pd.DataFrame({"kwh": kw * h, "kvarh_lag": kvar * h, "kvarh_lead": 0.0,
                         "kwh_received": 0.0, "estimated": False},
                        index=pd.DatetimeIndex(idx, name="start"))


def site_frame(days=61, seed=3, day_kw=400.0, day_kvar=300.0, night_kw=80.0, night_kvar=60.0):
    """Invented workshop: weekday 06-22 production at PF 0.80, light night and weekend load."""
    idx = pd.date_range(pd.Timestamp("2024-03-01", tz=TZ), periods=days * 96, freq="15min")
    rng = np.random.default_rng(seed)
    busy = (idx.hour >= 6) & (idx.hour < 22) & (idx.day_of_week < 5)
    kw = np.where(busy, day_kw, night_kw) * rng.uniform(0.8, 1.2, idx.size)
    kvar = np.where(busy, day_kvar, night_kvar) * rng.uniform(0.8, 1.2, idx.size)
    return pd.DataFrame({"kwh": kw / 4, "kvarh_lag": kvar / 4, "kvarh_lead": 0.0,
                         "kwh_received": 0.0, "estimated": False},
                        index=pd.DatetimeIndex(idx.tz_convert("UTC"), name="start"))


EXCESS = tariff_from_dict({
    "name": "Hand check", "currency": "EUR", "energy": {"price_per_kwh": 0.10},
    "reactive": [{"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05}],
})
WITH_LEADING = tariff_from_dict({
    "name": "Workshop supply", "currency": "EUR", "energy": {"price_per_kwh": 0.12},
    "demand": {"basis": "kva", "price_per_kw": 9.0},
    "reactive": [
        {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.03},
        {"kind": "leading_kvarh", "price_per_kvarh": 0.02, "hours": [22, 6]},
    ],
})


def test_hand_worked_month_fixed_42_kvar():
    # The worked example of auditor/correction/scenario.py, by hand (common practice):
    # kWh 72 000; before kvarh 54 000, excess 25 200 x 0.05 = 1 260; after 23 760 < 28 800 -> 0.
    res = run_scenario(constant_month(), EXCESS, tz=TZ, interval_minutes=15,
                       bank=BankDesign.fixed(42), site=SITE, sensitivity=False)
    before, after = res.before.periods[0], res.after.periods[0]
    assert_allclose(before.charges["kvarh_excess"], 0.05 * (54_000 - 0.4 * 72_000))
    assert_allclose(after.kvarh_lag, (75 - 42) * 720)
    assert_allclose(after.charges["kvarh_excess"], 0.0)
    assert_allclose(res.annual_savings, 1260.0 * 365.25 / 30)
    assert_allclose(res.savings_by_charge["kvarh_excess"], 15_340.5)
    assert_allclose(res.savings_by_charge["energy"], 0.0)
    s_after = math.hypot(100, 33)
    assert_allclose(res.peak_kva_after, s_after)
    assert_allclose(res.released_kva, 125 - s_after)
    # line-loss indication 1 - (PF1/PF2)^2 (common practice)
    assert_allclose(res.line_loss_reduction, 1 - (0.8 / (100 / s_after)) ** 2)
    assert res.screening.leading_intervals == 0


def test_finance_of_the_case_matches_numpy_financial():
    costs = CostInputs(capex_fixed=800, capex_per_kvar=20, om_per_year=40, loss_w_per_kvar=0.4,
                       life_years=10, discount_rate=0.07, escalation=0.02)
    res = run_scenario(constant_month(), EXCESS, tz=TZ, interval_minutes=15,
                       bank=BankDesign.fixed(42), costs=costs, site=SITE, sensitivity=False)
    capex = 800 + 20 * 42
    loss_cost = 0.4 * 42 * 8766 / 1000 * 0.10  # valued at the tariff's energy price
    flows = [-capex] + [(res.annual_savings - loss_cost) * 1.02 ** (t - 1) - 40 for t in range(1, 11)]
    assert_allclose(res.capex, capex)
    # Source: numpy-financial npv / irr on flows written out by hand.
    assert_allclose(res.npv, npf.npv(0.07, flows))
    assert_allclose(res.finance.irr, npf.irr(flows))
    assert_allclose(res.finance.simple_payback_years, capex / flows[1])
    assert [r["year"] for r in res.finance.cash_flow] == list(range(11))


def test_fixed_bank_over_corrects_at_night_automatic_does_not():
    frame = site_frame()
    fixed = run_scenario(frame, WITH_LEADING, tz=TZ, interval_minutes=15,
                         bank=BankDesign.fixed(250), site=SITE, sensitivity=False)
    assert fixed.screening.leading_intervals > 0
    assert fixed.screening.leading_charge_increase > 0
    assert fixed.savings_by_charge["leading_kvarh"] < 0
    assert any("over-correction" in w for w in fixed.warnings)
    auto = run_scenario(frame, WITH_LEADING, tz=TZ, interval_minutes=15,
                        bank=BankDesign.automatic("5x50"), site=SITE, sensitivity=False)
    assert auto.screening.leading_intervals == 0
    assert_allclose(auto.savings_by_charge["leading_kvarh"], 0.0)
    # the controller reaches 0.95 wherever a stage k x 50 <= 250 lies between the need and Q_net
    kw = frame["kwh"].to_numpy() * 4
    q = frame["kvarh_lag"].to_numpy() * 4
    after = q - auto.output_kvar
    need = q - kw * math.tan(math.acos(0.95))
    smallest = np.ceil(np.maximum(need, 0) / 50) * 50
    reachable = smallest <= np.minimum(q, 250)
    assert reachable.mean() > 0.9
    pf_after = kw / np.hypot(kw, after)
    assert np.all(pf_after[reachable] >= 0.95 - 1e-9)
    assert auto.annual_savings > 0


def test_leading_allowed_down_to_a_limit():
    frame = site_frame()
    strict = run_scenario(frame, WITH_LEADING, tz=TZ, interval_minutes=15,
                          bank=BankDesign.automatic("2x100"), site=SITE, sensitivity=False)
    loose = run_scenario(frame, WITH_LEADING, tz=TZ, interval_minutes=15,
                         bank=BankDesign.automatic("2x100"), site=SITE, sensitivity=False,
                         leading_pf_limit=0.9)
    assert strict.screening.leading_intervals == 0
    kw = frame["kwh"].to_numpy() * 4
    net = frame["kvarh_lag"].to_numpy() * 4 - loose.output_kvar
    assert np.all(net >= -kw * math.tan(math.acos(0.9)) - 1e-9)
    assert loose.mean_output_kvar >= strict.mean_output_kvar


def test_detuned_output_and_voltage_scaling():
    bank = BankDesign.fixed(50, detuning_percent=7, capacitor_rated_voltage_v=440)
    res = run_scenario(constant_month(), EXCESS, tz=TZ, interval_minutes=15, bank=bank,
                       site=SITE, sensitivity=False)
    # Q_eff = Q (U/Ucap)^2 / (1 - p) — common practice, from memory
    q_eff = 50 * (400 / 440) ** 2 / 0.93
    assert_allclose(res.output_kvar, q_eff)
    assert_allclose(res.after.periods[0].kvarh_lag, (75 - q_eff) * 720)
    assert res.bank.to_dict()["detuning"]["reactor_percent"] == 7.0


def test_sensitivity_load_row_equals_an_independent_run():
    frame = site_frame(days=31)
    bank = BankDesign.automatic("4x50")
    res = run_scenario(frame, WITH_LEADING, tz=TZ, interval_minutes=15, bank=bank, site=SITE)
    rows = {(r["factor"], r["change"]): r for r in res.sensitivity}
    # the line-loss reduction is not counted by default: one row shows it counted
    assert set(rows) == {(f, c) for f in ("load", "prices", "capex") for c in (-0.2, 0.2)} | {("loss reduction", 1.0)}
    scaled = frame.copy()
    scaled[["kwh", "kvarh_lag", "kvarh_lead"]] *= 1.2
    other = run_scenario(scaled, WITH_LEADING, tz=TZ, interval_minutes=15, bank=bank, site=SITE,
                         sensitivity=False)
    assert_allclose(rows[("load", 0.2)]["annual_savings"], other.annual_savings)
    assert_allclose(rows[("load", 0.2)]["npv"], other.npv)
    assert_allclose(rows[("prices", -0.2)]["annual_savings"], 0.8 * res.annual_savings)
    assert rows[("capex", 0.2)]["npv"] < res.npv < rows[("capex", -0.2)]["npv"]


def test_to_dict_contract_and_json():
    res = run_scenario(site_frame(days=31), WITH_LEADING, tz=TZ, interval_minutes=15,
                       bank=BankDesign.automatic("25,50,50,100"), site=SiteElectrical(transformer_kva=630))
    d = res.to_dict()
    for key in ("bank", "before", "after", "annual_savings", "savings_by_charge", "capex",
                "simple_payback_years", "npv", "irr", "cash_flow", "screening", "warnings", "cautions"):
        assert key in d
    assert set(d["bank"]) >= {"kind", "steps_kvar", "total_kvar", "detuning"}
    assert set(d["screening"]) >= {"resonance_order", "voltage_rise_percent", "leading_intervals"}
    assert d["before"] == res.before.to_dict()["periods"]
    assert d["cautions"] == list(CAUTIONS)
    assert "candidates" not in d
    assert any("transformer_impedance_percent" in w for w in d["warnings"])
    json.loads(to_json(d))


def test_central_and_per_meter_correction():
    a, b = site_frame(days=31, seed=1), site_frame(days=31, seed=2, day_kvar=150.0)
    b = b.iloc[10:]  # the second meter starts later: the site sum keeps common intervals only
    total, warnings = sum_meters({"A": a, "B": b})
    assert len(total) == len(b) and warnings and "meter A" in warnings[0]
    assert_allclose(total["kvarh_lag"].to_numpy(), a["kvarh_lag"].iloc[10:].to_numpy() + b["kvarh_lag"].to_numpy())
    central = run_site({"A": a, "B": b}, WITH_LEADING, tz=TZ, interval_minutes=15,
                       bank=BankDesign.automatic("6x50"), mode="central", site=SITE, sensitivity=False)
    direct = audit(total, WITH_LEADING, tz=TZ, interval_minutes=15)
    assert_allclose(central.scenarios["site"].before.total, direct.total)
    per = run_site({"A": a, "B": b}, WITH_LEADING, tz=TZ, interval_minutes=15,
                   bank={"A": BankDesign.automatic("6x50"), "B": BankDesign.automatic("4x25")},
                   mode="per_meter", site=SITE, sensitivity=False)
    assert_allclose(per.annual_savings, sum(s.annual_savings for s in per.scenarios.values()))
    assert per.to_dict()["mode"] == "per_meter"
    with pytest.raises(UsageError, match="mode"):
        run_site({"A": a}, WITH_LEADING, tz=TZ, interval_minutes=15, bank=BankDesign.fixed(5), mode="both")


def test_bad_arguments():
    with pytest.raises(UsageError, match="BankDesign"):
        run_scenario(constant_month(), EXCESS, tz=TZ, interval_minutes=15, bank="6x50")
    with pytest.raises(UsageError, match="target_pf"):
        run_scenario(constant_month(), EXCESS, tz=TZ, interval_minutes=15,
                     bank=BankDesign.fixed(10), target_pf=0)
