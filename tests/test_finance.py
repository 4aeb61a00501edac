"""Finance layer: checked against numpy-financial and against explicit hand sums."""
from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pytest
from numpy.testing import assert_allclose

from auditor import finance
from auditor.errors import UsageError


def test_npv_matches_numpy_financial_and_hand_sum():
    flows = np.array([-1000.0, 300.0, 400.0, 500.0])
    # Source: numpy-financial npv (reference implementation), year 0 undiscounted.
    assert_allclose(finance.npv(0.1, flows), npf.npv(0.1, flows))
    # Hand sum: -1000 + 300/1.1 + 400/1.21 + 500/1.331
    hand = -1000 + 300 / 1.1 + 400 / 1.1**2 + 500 / 1.1**3
    assert_allclose(finance.npv(0.1, flows), hand)
    assert_allclose(hand, -21.036814425244188, rtol=1e-12)


def test_irr_matches_numpy_financial_and_zeroes_the_npv():
    flows = np.array([-100.0, 39.0, 59.0, 55.0, 20.0])
    rate = finance.irr(flows)
    # Source: numpy-financial irr; its documented example gives 0.2809 for these flows.
    assert_allclose(rate, npf.irr(flows))
    assert_allclose(rate, 0.28095, atol=5e-5)
    # Definition: the NPV at the IRR is zero (hand sum).
    assert_allclose(sum(cf / (1 + rate) ** t for t, cf in enumerate(flows)), 0.0, atol=1e-9)


def test_irr_is_none_without_sign_change():
    assert finance.irr(np.array([-100.0, -5.0, -5.0])) is None
    assert finance.irr(np.array([100.0, 5.0])) is None
    assert finance.irr(np.array([0.0, 0.0])) is None


def test_cash_flows_escalate_savings_and_losses_not_om():
    flows = finance.cash_flows(1000.0, 500.0, 20.0, 30.0, 3, 0.1)
    # hand: year t = (500 - 30) * 1.1**(t-1) - 20
    assert_allclose(flows, [-1000.0, 450.0, 470 * 1.1 - 20, 470 * 1.21 - 20])


def test_evaluate_figures_follow_from_the_flows():
    res = finance.evaluate(1000.0, 400.0, annual_om_value=20.0, annual_loss_cost=10.0,
                           life_years=5, discount_rate=0.08, escalation=0.0)
    flows = np.array([-1000.0] + [370.0] * 5)
    assert_allclose(res.flows, flows)
    # Source: numpy-financial npv / irr.
    assert_allclose(res.npv, npf.npv(0.08, flows))
    assert_allclose(res.irr, npf.irr(flows))
    assert_allclose(res.simple_payback_years, 1000.0 / 370.0)
    # discounted payback by hand: cumulative discounted flows turn positive in year 4
    disc = 370.0 / 1.08 ** np.arange(1, 6)
    cum_before = -1000.0 + disc[0] + disc[1] + disc[2]
    assert cum_before < 0 < cum_before + disc[3]
    assert_allclose(res.discounted_payback_years, 3 + (-cum_before) / disc[3])
    assert [row["year"] for row in res.cash_flow] == list(range(6))
    assert_allclose([row["cumulative"] for row in res.cash_flow], np.cumsum(flows))


def test_no_payback_when_benefit_not_positive():
    res = finance.evaluate(1000.0, 10.0, annual_om_value=20.0, annual_loss_cost=0.0,
                           life_years=10, discount_rate=0.05, escalation=0.0)
    assert res.simple_payback_years is None
    assert res.discounted_payback_years is None
    assert res.irr is None
    assert res.npv < -1000.0


def test_capex_and_om_rules():
    costs = finance.CostInputs(capex_fixed=100.0, capex_per_kvar=10.0, automatic_premium=50.0,
                               detuning_premium_per_kvar=4.0, om_percent_of_capex=5.0)
    assert_allclose(finance.capex(costs, 20.0, automatic=False, detuned=False), 300.0)
    assert_allclose(finance.capex(costs, 20.0, automatic=True, detuned=True), 100 + 200 + 50 + 80)
    assert_allclose(finance.annual_om(costs, 400.0), 20.0)
    assert_allclose(finance.annual_om(costs.with_(om_per_year=7.0), 400.0), 7.0)
    # 0.5 W/kvar x 100 kvar x 8766 h = 438.3 kWh
    assert_allclose(finance.annual_loss_kwh(100.0, 0.5), 438.3)


@pytest.mark.parametrize("field,value", [
    ("capex_per_kvar", -1.0), ("life_years", 0), ("discount_rate", 8.0),
    ("escalation", float("nan")), ("om_per_year", -3.0),
])
def test_bad_cost_inputs_raise_usage_error(field, value):
    with pytest.raises(UsageError, match=field):
        finance.CostInputs(**{field: value})
