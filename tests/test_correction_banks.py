"""Bank models, step parsing and the controller rule."""
from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from auditor.correction import (
    BankDesign,
    bank_output_kvar,
    corrected_kvarh,
    output_factor,
    parse_steps,
    stage_totals,
    tuning_order,
)
from auditor.correction.banks import controller_limits, switch_equal_steps, switch_stages
from auditor.errors import UsageError


@pytest.mark.parametrize("text,steps", [
    ("6x50", (50.0,) * 6),
    ("25,50,50,100", (25.0, 50.0, 50.0, 100.0)),
    (" 2 x 25 , 50 ", (25.0, 25.0, 50.0)),
    ("12.5", (12.5,)),
])
def test_parse_steps(text, steps):
    assert parse_steps(text) == steps


@pytest.mark.parametrize("text,fragment", [
    ("", "got nothing"), ("6x", "item 1"), ("50,,50", "item 2 is empty"), ("0x50", "count of 0"),
    ("50,-25", "must be > 0"), ("abc", "not a kvar number"), ("30x50", "more than 24"),
])
def test_parse_steps_errors_are_clear(text, fragment):
    with pytest.raises(UsageError, match=fragment):
        parse_steps(text)


def test_bank_design_validation():
    with pytest.raises(UsageError, match="detuning"):
        BankDesign.fixed(50, detuning_percent=6)
    with pytest.raises(UsageError, match="exactly one step"):
        BankDesign("fixed", (25.0, 25.0))
    with pytest.raises(UsageError, match="kind"):
        BankDesign("switched", (25.0,))
    b = BankDesign.automatic("25,50,50,100", detuning_percent=7)
    assert b.total_kvar == 225
    d = b.to_dict()
    assert d["kind"] == "automatic" and d["steps_kvar"] == [25, 50, 50, 100]
    assert d["detuning"]["reactor_percent"] == 7.0


def test_stage_totals_are_distinct_subset_sums():
    assert_allclose(stage_totals((25.0, 50.0, 50.0, 100.0)), np.arange(0, 226, 25))
    assert_allclose(stage_totals((50.0,) * 6), np.arange(0, 301, 50))
    assert_allclose(stage_totals((10.0, 30.0)), [0, 10, 30, 40])


def test_tuning_orders_common_practice():
    # domain section 5, common practice, from memory: 5.67 % → 4.2, 7 % → 3.78, 14 % → 2.67
    assert_allclose([tuning_order(p) for p in (5.67, 7.0, 14.0)], [4.2, 3.78, 2.67], atol=0.005)


def test_output_factor_detuned_and_voltage():
    # Q_eff = Q (U/Ucap)^2 / (1 - p) — common practice, from memory
    assert_allclose(output_factor(7.0), 1 / 0.93)
    assert_allclose(output_factor(7.0, 400.0, 440.0), (400 / 440) ** 2 / 0.93)
    assert_allclose(output_factor(0.0, 380.0, 400.0), 0.95**2)


def _brute_force(needed, allowed, steps):
    """Reference controller: try every combination of steps (slow, tests only)."""
    totals = sorted({sum(c) for r in range(len(steps) + 1) for c in itertools.combinations(steps, r)})
    out = []
    for n_, a_ in zip(needed, allowed, strict=True):
        ok = [t for t in totals if t >= n_ and t <= a_]
        if ok:
            out.append(min(ok))
        else:
            fit = [t for t in totals if t <= a_]
            out.append(max(fit) if fit else 0.0)
    return np.array(out)


@settings(max_examples=60, deadline=None)
@given(
    steps=st.lists(st.sampled_from([10.0, 25.0, 50.0, 100.0]), min_size=1, max_size=5),
    kw=st.lists(st.floats(0, 400), min_size=1, max_size=30),
    kvar=st.lists(st.floats(-50, 300), min_size=30, max_size=30),
    lead=st.sampled_from([None, 0.98, 0.9]),
)
def test_controller_matches_brute_force(steps, kw, kvar, lead):
    kw = np.array(kw)
    kvar = np.array(kvar[: kw.size])
    needed, allowed = controller_limits(kw, kvar, 0.95, lead)
    got = switch_stages(needed, allowed, stage_totals(tuple(steps)))
    assert_allclose(got, _brute_force(needed, allowed, steps), atol=1e-9)
    # never more leading than allowed unless nothing fits (then off)
    after = kvar - got
    floor = -(kw * math.tan(math.acos(lead)) if lead else 0 * kw)
    assert np.all((after >= floor - 1e-9) | (got == 0))


@settings(max_examples=40, deadline=None)
@given(
    n=st.integers(1, 8), s=st.sampled_from([12.5, 25.0, 50.0]),
    kvar=st.lists(st.floats(-20, 500), min_size=20, max_size=20),
)
def test_equal_step_closed_form_matches_general_rule(n, s, kvar):
    kvar = np.array(kvar)
    kw = np.full(kvar.size, 200.0)
    needed, allowed = controller_limits(kw, kvar, 0.95)
    batched = switch_equal_steps(needed, allowed, np.array([s, s / 2]), np.array([n, 2 * n]))
    assert_allclose(batched[0], switch_stages(needed, allowed, stage_totals((s,) * n)))
    assert_allclose(batched[1], switch_stages(needed, allowed, stage_totals((s / 2,) * (2 * n))))


def test_controller_example_by_hand():
    # 100 kW, 75 kvar, target 0.95: need 42.13 kvar; steps 6x10 -> 50 (smallest reaching)
    # 100 kW, 20 kvar: already at target -> 0; 100 kW, 35 kvar: need 2.13 -> 10
    # 10 kW, 5 kvar: need 1.71, allowed 5 -> nothing in 0..5 reaches -> 0 (largest not leading)
    bank = BankDesign.automatic("6x10")
    got = bank_output_kvar(bank, np.array([100, 100, 100, 10.0]), np.array([75, 20, 35, 5.0]), 0.95)
    assert_allclose(got, [50, 0, 10, 0])
    # with leading allowed down to PF 0.9 (10 kW x 0.484 = 4.84 kvar), 10 kvar still over-corrects
    got = bank_output_kvar(bank, np.array([10.0]), np.array([6.0]), 0.95, leading_pf_limit=0.9)
    assert_allclose(got, [10.0])  # 6 - 10 = -4 ≥ -4.84: allowed


def test_fixed_bank_always_on_and_corrected_kvarh():
    bank = BankDesign.fixed(40)
    out = bank_output_kvar(bank, np.array([100.0, 0.0]), np.array([75.0, 10.0]), 0.95)
    assert_allclose(out, [40, 40])
    lag, lead = corrected_kvarh(np.array([18.75, 2.5]), np.array([0.0, 0.0]), out, 15)
    # 18.75 - 10 = 8.75 kvarh lag; 2.5 - 10 = -7.5 -> 7.5 kvarh lead
    assert_allclose(lag, [8.75, 0.0])
    assert_allclose(lead, [0.0, 7.5])
