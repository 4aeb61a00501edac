"""Optimiser: best NPV among candidates passing screening, with the table of all."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.audit import prepare_audit
from auditor.correction import BankDesign, SiteElectrical, bank_output_kvar
from auditor.correction.optimiser import (
    STANDARD_STEP_KVAR,
    _outputs,
    candidate_designs,
    default_sizes,
    optimise,
)
from auditor.correction.scenario import run_scenario
from auditor.errors import UsageError
from auditor.render import to_json
from auditor.tariffs import tariff_from_dict

TZ = "Europe/Berlin"
SITE = SiteElectrical(transformer_kva=1000, transformer_impedance_percent=6, nominal_voltage_v=400)
TARIFF = tariff_from_dict({
    "name": "Workshop supply", "currency": "EUR", "energy": {"price_per_kwh": 0.12},
    "demand": {"basis": "kva", "price_per_kw": 9.0},
    "reactive": [
        {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.03},
        {"kind": "leading_kvarh", "price_per_kvarh": 0.02, "hours": [22, 6]},
    ],
})


def site_frame(days=45, seed=5):
    """Invented workshop: weekday 06-22 production at PF 0.80, light night and weekend load."""
    idx = pd.date_range(pd.Timestamp("2024-05-01", tz=TZ), periods=days * 96, freq="15min")
    rng = np.random.default_rng(seed)
    busy = (idx.hour >= 6) & (idx.hour < 22) & (idx.day_of_week < 5)
    kw = np.where(busy, 400.0, 80.0) * rng.uniform(0.8, 1.2, idx.size)
    kvar = np.where(busy, 300.0, 60.0) * rng.uniform(0.8, 1.2, idx.size)
    return pd.DataFrame({"kwh": kw / 4, "kvarh_lag": kvar / 4, "kvarh_lead": 0.0,
                         "kwh_received": 0.0, "estimated": False},
                        index=pd.DatetimeIndex(idx.tz_convert("UTC"), name="start"))


def test_candidates_built_from_sizes():
    designs = candidate_designs((30, 100), step_patterns=((1, 1, 1, 1), (1, 1, 2, 2)),
                                detuning=(0.0, 7.0), nominal_voltage_v=400)
    labels = {d.label for d in designs}
    assert "fixed 30 kvar" in labels and "automatic 4x25 kvar, 7 % detuned" in labels
    # 1:1:2:2 of 30 kvar: 5, 5, 10, 10 (5 kvar units are sold); of 100 kvar the 16.7 kvar unit
    # is not a step size anyone sells, so that pattern is left out
    mixed = [d for d in designs if d.kind == "automatic" and len(set(d.steps_kvar)) == 2]
    assert {d.steps_kvar for d in mixed} == {(5.0, 5.0, 10.0, 10.0)}
    # equal steps of standard sizes fill in: 30 = 6x5 = 3x10; 100 = 8x12.5 = 5x20
    assert {"automatic 6x5 kvar", "automatic 3x10 kvar", "automatic 8x12.5 kvar", "automatic 5x20 kvar"} <= labels
    assert all(any(abs(s - u) < 1e-9 for u in STANDARD_STEP_KVAR) for d in designs if d.kind == "automatic"
               for s in d.steps_kvar)
    # per detuning: 30 kvar fixed + 4 automatic, 100 kvar fixed + 3 automatic
    assert len(designs) == 2 * (5 + 4)
    assert all(d.capacitor_rated_voltage_v == 440 for d in designs if d.detuned)
    with pytest.raises(UsageError, match="pattern"):
        candidate_designs((100,), step_patterns=((1, 0),))


def test_vectorised_outputs_equal_per_design_controller():
    frame = site_frame(days=10)
    prepared = prepare_audit(frame, TARIFF, tz=TZ, interval_minutes=15)
    designs = candidate_designs((60, 150, 300), nominal_voltage_v=400) + [BankDesign.automatic("25,50,50,100")]
    out = _outputs(designs, prepared, 0.95, None, 400)
    net = prepared.kvar_lag - prepared.kvar_lead
    for i, d in enumerate(designs):
        assert_allclose(out[i], bank_output_kvar(d, prepared.kw, net, 0.95, system_voltage_v=400),
                        err_msg=d.label)


def test_optimiser_picks_best_passing_npv_and_matches_a_direct_run():
    frame = site_frame()
    res = optimise(frame, TARIFF, tz=TZ, interval_minutes=15, site=SITE,
                   sizes=(100, 150, 200, 250, 300), sensitivity=False)
    table = res.candidates
    assert len(table) == len(candidate_designs((100, 150, 200, 250, 300), nominal_voltage_v=SITE.nominal_voltage_v))
    assert len(table) > 5 * 2 * 4
    passed = [c for c in table if c["passed_screening"]]
    assert passed and any(not c["passed_screening"] for c in table)
    chosen = [c for c in table if c["chosen"]]
    assert len(chosen) == 1 and chosen[0]["label"] == res.bank.label
    assert_allclose(res.npv, max(c["npv"] for c in passed))
    assert table[0]["chosen"] and [c["rank"] for c in table] == list(range(1, len(table) + 1))
    # the chosen design through the ordinary scenario path gives the same case
    direct = run_scenario(frame, TARIFF, tz=TZ, interval_minutes=15, bank=res.bank, site=SITE,
                          sensitivity=False)
    assert_allclose(direct.npv, res.npv)
    assert_allclose(direct.annual_savings, res.annual_savings)
    d = res.to_dict()
    assert "candidates" in d and len(d["candidates"]) == len(table)
    assert d["cautions"]
    json.loads(to_json(d))


def test_no_candidate_passing_is_said_not_hidden():
    # Behaviour changed on purpose: the optimiser no longer shows a failing design as its choice.
    # Every candidate first compared fails (voltage rise > 3 % on a weak supply); it names the
    # rule that stopped each family and recommends the nearest remedy that passes.
    tiny = SiteElectrical(short_circuit_kva=2000, nominal_voltage_v=400)  # every bank rises > 3 %
    res = optimise(site_frame(days=20), TARIFF, tz=TZ, interval_minutes=15, site=tiny,
                   sizes=(100, 200, 300), detuning=(0.0,), sensitivity=False)
    first = [c for c in res.candidates if c["origin"] == "candidate"]
    assert first and not any(c["passed_screening"] for c in first)
    assert all("voltage_rise" in c["failed_rules"] for c in first)
    o = res.optimiser
    assert o["status"] == "nearest_passing" and res.recommended and res.screening.passed
    assert res.bank.total_kvar < 100 and o["nearest_passing_from"]
    stopped = {f["family"]: f for f in o["families"] if not f["passed"]}
    assert stopped["fixed, plain"]["stopped_by"][0]["designs"] == 3
    assert any(r["rule"] == "voltage_rise" for r in stopped["automatic, plain"]["stopped_by"])
    assert any("none of the 14 designs first compared passes" in w for w in res.warnings)
    # without remedies nothing passes: the closest design is shown, marked not recommended
    bare = optimise(site_frame(days=20), TARIFF, tz=TZ, interval_minutes=15, site=tiny,
                    sizes=(100, 200, 300), detuning=(0.0,), sensitivity=False, remedies=False)
    assert bare.optimiser["status"] == "none_passes" and not bare.recommended
    assert not bare.screening.passed and not bare.specification["recommended"]
    assert any("no design passes screening" in w for w in bare.warnings)
    assert bare.warnings[0].startswith("no design passes screening")


def test_default_sizes_follow_the_need():
    frame = site_frame(days=10)
    prepared = prepare_audit(frame, TARIFF, tz=TZ, interval_minutes=15)
    sizes = default_sizes(prepared, 0.95)
    need = prepared.kvar_lag - prepared.kw * np.tan(np.arccos(0.95))
    assert max(sizes) <= 1.25 * need.max() and max(sizes) >= need.max()


def test_bad_sizes():
    with pytest.raises(UsageError, match="sizes"):
        optimise(site_frame(days=5), TARIFF, tz=TZ, interval_minutes=15, sizes=(100, -5))
