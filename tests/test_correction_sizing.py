"""Sizing: Qc = P (tan φ1 − tan φ2) per interval and its distribution."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.correction import kw_multiplier, required_kvar, size_required, tan_phi
from auditor.errors import InputError, UsageError


def _frame(kw, kvar, minutes=15):
    n = len(kw)
    idx = pd.date_range("2024-03-01", periods=n, freq=f"{minutes}min", tz="UTC", name="start")
    f = minutes / 60.0
    kvar = np.asarray(kvar, dtype=float)
    return pd.DataFrame({
        "kwh": np.asarray(kw, dtype=float) * f,
        "kvarh_lag": np.maximum(kvar, 0) * f,
        "kvarh_lead": np.maximum(-kvar, 0) * f,
        "kwh_received": 0.0,
        "estimated": False,
    }, index=idx)


@pytest.mark.parametrize("pf1,pf2,table", [(0.80, 0.95, 0.421), (0.70, 0.90, 0.536)])
def test_kw_multiplier_matches_handbook_tables(pf1, pf2, table):
    # Source: handbook kW-multiplier tables (values from memory); they follow from the formula
    # tan(arccos pf1) - tan(arccos pf2), shown here with math.acos / math.tan independently.
    formula = math.tan(math.acos(pf1)) - math.tan(math.acos(pf2))
    assert_allclose(kw_multiplier(pf1, pf2), formula, rtol=1e-12)
    assert_allclose(kw_multiplier(pf1, pf2), table, atol=5e-4)


def test_tan_phi_relations_common_practice():
    # domain relations, common practice: tan φ 0.329 ↔ 0.95, 0.484 ↔ 0.90
    assert_allclose(tan_phi(np.array([0.95, 0.90])), [0.329, 0.484], atol=5e-4)


def test_required_kvar_per_interval_and_clipped():
    kw = np.array([100.0, 100.0, 50.0, 0.0])
    kvar = np.array([75.0, 20.0, -10.0, 5.0])
    got = required_kvar(kw, kvar, 0.95)
    t2 = math.tan(math.acos(0.95))
    assert_allclose(got, [75 - 100 * t2, 0.0, 0.0, 5.0])


def test_size_required_distribution_and_quantile():
    # 100 intervals of 100 kW; kvar rises 0..99: the requirement is max(kvar - 32.87, 0)
    kvar = np.arange(100.0)
    res = size_required(_frame(np.full(100, 100.0), kvar), 15, 0.95, quantile=0.95)
    need = np.maximum(kvar - 100 * math.tan(math.acos(0.95)), 0.0)
    assert_allclose(res.required_kvar, need)
    assert_allclose(res.kvar_at_quantile, np.quantile(need, 0.95))
    assert_allclose(res.kvar_max, need.max())
    assert_allclose(res.duration_kvar, np.sort(need)[::-1])
    assert res.share_at_target == pytest.approx(np.mean(need == 0))
    # the single figure from totals is smaller than the 95 % figure for a varying load
    assert res.kvar_from_totals < res.kvar_at_quantile
    curve = res.duration_curve(11)
    assert curve[0]["kvar"] == pytest.approx(need.max())
    assert curve[-1]["kvar"] == pytest.approx(need.min())


def test_size_required_constant_load_equals_hand_value():
    # 100 kW at PF 0.80 (75 kvar) to 0.95: 100 x 0.421 = 42.1 kvar (common practice)
    res = size_required(_frame(np.full(96, 100.0), np.full(96, 75.0)), 15, 0.95)
    assert_allclose(res.kvar_at_quantile, 100 * kw_multiplier(0.80, 0.95))
    assert_allclose(res.kvar_from_totals, res.kvar_at_quantile)
    assert_allclose(res.pf_before, 0.80)


def test_size_required_bad_inputs():
    f = _frame([1.0], [1.0])
    with pytest.raises(InputError, match="kvarh_lag"):
        size_required(f.drop(columns="kvarh_lag"), 15, 0.95)
    with pytest.raises(UsageError, match="interval_minutes"):
        size_required(f, 7, 0.95)
    with pytest.raises(UsageError, match="target_pf"):
        size_required(f, 15, 1.2)
    with pytest.raises(UsageError, match="quantile"):
        size_required(f, 15, 0.95, quantile=95)
