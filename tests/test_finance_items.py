"""The finance items a client's case carries: incentive, replacement, tax with straight-line
depreciation, the money value of the line-loss reduction. Checked against numpy-financial and
hand sums written out beside each check."""
from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pytest
from numpy.testing import assert_allclose

from auditor import finance
from auditor.errors import UsageError

BASE = dict(annual_om_value=20.0, annual_loss_cost=10.0, life_years=5, discount_rate=0.08, escalation=0.0)


def test_incentive_at_purchase_lowers_year_zero_and_the_payback():
    costs = finance.CostInputs(incentive=200.0, life_years=5)
    res = finance.evaluate(1000.0, 400.0, costs=costs, **BASE)
    # hand: year 0 = -1000 + 200; years 1..5 = 400 - 20 - 10 = 370
    flows = np.array([-800.0] + [370.0] * 5)
    assert_allclose(res.flows, flows)
    assert_allclose(res.npv, npf.npv(0.08, flows))  # source: numpy-financial npv
    assert_allclose(res.irr, npf.irr(flows))  # source: numpy-financial irr
    assert_allclose(res.simple_payback_years, 800.0 / 370.0)
    assert res.cash_flow[0]["incentive"] == 200.0 and res.cash_flow[0]["capex"] == 1000.0
    assert res.to_dict()["net_investment"] == 800.0


def test_incentive_received_later_is_discounted_in_its_year():
    costs = finance.CostInputs(incentive=300.0, incentive_year=2, life_years=5)
    res = finance.evaluate(1000.0, 400.0, costs=costs, **BASE)
    flows = np.array([-1000.0, 370.0, 670.0, 370.0, 370.0, 370.0])
    assert_allclose(res.flows, flows)
    # hand sum of the NPV: the incentive is worth 300 / 1.08² today
    without = finance.evaluate(1000.0, 400.0, **BASE)
    assert_allclose(res.npv - without.npv, 300.0 / 1.08 ** 2)
    assert_allclose(res.npv, npf.npv(0.08, flows))


def test_replacement_in_its_year_and_in_the_discounted_payback():
    costs = finance.CostInputs(replacement_year=3, replacement_cost=500.0, life_years=5)
    res = finance.evaluate(1000.0, 400.0, costs=costs, **BASE)
    flows = np.array([-1000.0, 370.0, 370.0, -130.0, 370.0, 370.0])
    assert_allclose(res.flows, flows)
    assert_allclose(res.npv, npf.npv(0.08, flows))
    assert_allclose(res.irr, npf.irr(flows))
    # the simple payback is on the first year and ignores a later replacement
    assert_allclose(res.simple_payback_years, 1000.0 / 370.0)
    assert res.cash_flow[3]["replacement"] == 500.0
    # discounted payback by hand: cumulative discounted flows turn positive in year 5
    disc = flows / 1.08 ** np.arange(6)
    cum = np.cumsum(disc)
    assert cum[4] < 0 < cum[5]
    assert_allclose(res.discounted_payback_years, 4 + (-cum[4]) / disc[5])


def test_tax_with_straight_line_depreciation_by_hand():
    costs = finance.CostInputs(incentive=200.0, tax_rate=0.25, depreciation_years=4, life_years=5)
    res = finance.evaluate(1000.0, 400.0, costs=costs, **BASE)
    # hand: depreciable base 1000 - 200 = 800, 200 a year in years 1..4
    # years 1..4: taxable 370 - 200 = 170, tax 42.5, net 327.5; year 5: tax 92.5, net 277.5
    flows = np.array([-800.0, 327.5, 327.5, 327.5, 327.5, 277.5])
    assert_allclose(res.flows, flows)
    assert_allclose([r["tax"] for r in res.cash_flow], [0, 42.5, 42.5, 42.5, 42.5, 92.5])
    assert_allclose([r["depreciation"] for r in res.cash_flow], [0, 200, 200, 200, 200, 0])
    assert_allclose(res.npv, npf.npv(0.08, flows))
    assert_allclose(res.irr, npf.irr(flows))
    assert_allclose(res.simple_payback_years, 800.0 / 327.5)


def test_tax_npv_splits_into_after_tax_flows_and_the_depreciation_tax_shield():
    """Brealey, Myers, Allen, Principles of Corporate Finance: NPV = −I + Σ (1−T)·CF_t/(1+r)^t
    + Σ T·D_t/(1+r)^t (the tax shield of depreciation), an identity independent of how the
    module builds its rows."""
    T, r, life, dep_years = 0.3, 0.07, 10, 6
    costs = finance.CostInputs(tax_rate=T, depreciation_years=dep_years, life_years=life, discount_rate=r,
                               escalation=0.02)
    res = finance.evaluate(5000.0, 1200.0, annual_om_value=100.0, annual_loss_cost=40.0, life_years=life,
                           discount_rate=r, escalation=0.02, costs=costs)
    t = np.arange(1, life + 1)
    cf = (1200.0 - 40.0) * 1.02 ** (t - 1) - 100.0
    dep = np.where(t <= dep_years, 5000.0 / dep_years, 0.0)
    expected = -5000.0 + np.sum((1 - T) * cf / (1 + r) ** t) + np.sum(T * dep / (1 + r) ** t)
    assert_allclose(res.npv, expected, rtol=1e-12)


def test_loss_reduction_is_shown_apart_and_counted_only_when_asked():
    # hand: 1,000,000 kWh a year, 1.5 % lost in the network, PF 0.80 → 0.95:
    # reduction 1 − (0.80/0.95)² = 0.290859 (I²R at the same kW scales with 1/PF², common practice)
    red = 1 - (0.80 / 0.95) ** 2
    kwh = finance.loss_reduction_kwh(1_000_000.0, red, 1.5)
    assert_allclose(kwh, 15_000.0 * red)
    assert_allclose(kwh, 4362.88, atol=0.01)
    value = kwh * 0.12
    off = finance.evaluate(1000.0, 400.0, costs=finance.CostInputs(life_years=5), loss_reduction_value=value,
                           loss_reduction_kwh_value=kwh, **BASE)
    plain = finance.evaluate(1000.0, 400.0, **BASE)
    assert_allclose(off.flows, plain.flows)  # not counted: the case is the tariff saving alone
    assert off.annual_loss_reduction_value == value and not off.loss_reduction_counted
    on = finance.evaluate(1000.0, 400.0, costs=finance.CostInputs(life_years=5, count_loss_reduction=True,
                                                                 escalation=0.03),
                          loss_reduction_value=value, **{**BASE, "escalation": 0.03})
    t = np.arange(1, 6)
    flows = np.concatenate([[-1000.0], (400.0 + value - 10.0) * 1.03 ** (t - 1) - 20.0])
    assert_allclose(on.flows, flows)
    assert_allclose(on.npv, npf.npv(0.08, flows))
    assert_allclose([r["loss_reduction"] for r in on.cash_flow[1:]], value * 1.03 ** (t - 1))
    assert finance.loss_reduction_kwh(1e6, None, 1.5) == 0.0
    assert finance.loss_reduction_kwh(1e6, -0.1, 1.5) == 0.0


def test_item_sensitivity_rows_match_a_fresh_evaluation():
    costs = finance.CostInputs(incentive=200.0, replacement_year=4, replacement_cost=300.0, tax_rate=0.2,
                               life_years=5)
    base = finance.evaluate(1000.0, 400.0, costs=costs, loss_reduction_value=25.0, **BASE)
    rows = {(r["factor"], r["change"]): r for r in finance.item_sensitivity(base, costs)}
    assert set(rows) == {(f, c) for f in ("incentive", "replacement cost", "tax rate") for c in (-0.2, 0.2)} \
        | {("loss reduction", 1.0)}
    more = finance.evaluate(1000.0, 400.0, costs=costs.with_(incentive=240.0), loss_reduction_value=25.0, **BASE)
    assert_allclose(rows[("incentive", 0.2)]["npv"], more.npv)
    counted = finance.evaluate(1000.0, 400.0, costs=costs.with_(count_loss_reduction=True),
                               loss_reduction_value=25.0, **BASE)
    assert_allclose(rows[("loss reduction", 1.0)]["npv"], counted.npv)
    assert rows[("loss reduction", 1.0)]["setting"] == "counted"
    assert rows[("tax rate", 0.2)]["npv"] < base.npv < rows[("tax rate", -0.2)]["npv"]
    assert rows[("replacement cost", 0.2)]["npv"] < base.npv
    # nothing set: no rows
    plain = finance.evaluate(1000.0, 400.0, **BASE)
    assert finance.item_sensitivity(plain, finance.CostInputs(life_years=5)) == ()


@pytest.mark.parametrize("text,bare,expected", [
    ("8%", "fraction", 0.08), ("8 %", "fraction", 0.08), ("0.08", "fraction", 0.08), ("-2%", "fraction", -0.02),
    ("8", "percent", 0.08), ("8%", "percent", 0.08), ("0.5", "percent", 0.005), (0.03, "fraction", 0.03),
    (3, "percent", 0.03),
])
def test_parse_rate_reads_fractions_and_percents(text, bare, expected):
    assert_allclose(finance.parse_rate(text, bare=bare), expected)


@pytest.mark.parametrize("text,match", [("8", "write 8%"), ("abc", "not a number"), ("nan", "finite"),
                                        ("%", "not a number")])
def test_parse_rate_refuses_what_it_cannot_read(text, match):
    with pytest.raises(UsageError, match=match):
        finance.parse_rate(text, name="discount rate")


@pytest.mark.parametrize("changes,field", [
    ({"incentive": -1.0}, "incentive"), ({"incentive_year": 16}, "incentive_year"),
    ({"replacement_year": 0}, "replacement_year"), ({"replacement_cost": 10.0}, "replacement_year"),
    ({"tax_rate": 1.0}, "tax_rate"), ({"tax_rate": 25.0}, "tax_rate"),
    ({"depreciation_years": 16}, "depreciation_years"), ({"network_loss_percent": 50.0}, "network_loss_percent"),
    ({"count_loss_reduction": "yes"}, "count_loss_reduction"), ({"replacement_cost": float("inf"),
                                                                 "replacement_year": 3}, "replacement_cost"),
])
def test_bad_item_inputs_raise_usage_error(changes, field):
    with pytest.raises(UsageError, match=field):
        finance.CostInputs(**changes)
