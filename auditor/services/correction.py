"""Correction use cases: size a bank for a meter (fixed, stepped or optimised), save scenarios."""
from __future__ import annotations

import json
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path

from sqlalchemy import select

from auditor.correction import (
    BankDesign,
    CostInputs,
    ScenarioResult,
    SiteElectrical,
    optimise,
    run_scenario,
)
from auditor.errors import NotFoundError, UsageError
from auditor.render import to_json
from auditor.services.audit import resolve_tariff
from auditor.services.meters import MeterData, load_meter
from auditor.store import Store
from auditor.store.models import Meter, Scenario
from auditor.store.queries import get_meter, now_utc
from auditor.tariffs import Tariff


@dataclass(frozen=True)
class SizeRequest:
    """What the user asked for; stored with a saved scenario so it can be run again."""

    meter: str
    tariff: str
    target_pf: float = 0.95
    fixed_kvar: float | None = None
    steps: str | None = None
    optimize: bool = False
    detuning_percent: float = 0.0
    costs: dict = field(default_factory=dict)
    start: str | None = None
    end: str | None = None
    leading_pf_limit: float | None = None
    capacitor_rated_voltage_v: float | None = None

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}

    @classmethod
    def from_dict(cls, d: dict) -> SizeRequest:
        return cls(**{k: v for k, v in d.items() if k in cls.__dataclass_fields__})


@dataclass(frozen=True)
class SizeCase:
    request: SizeRequest
    data: MeterData
    tariff: Tariff
    result: ScenarioResult

    def to_dict(self) -> dict:
        d = self.result.to_dict()
        d["meter"] = self.data.meter
        d["site"] = self.data.site
        d["tariff"] = self.tariff.name
        d["request"] = self.request.to_dict()
        return d


def _date(text: str | None) -> date | None:
    return date.fromisoformat(text) if text else None


def bank_of(req: SizeRequest) -> BankDesign | None:
    chosen = [x for x in (req.fixed_kvar is not None, bool(req.steps), req.optimize) if x]
    if len(chosen) != 1:
        raise UsageError("choose exactly one of --fixed KVAR, --bank STEPS or --optimize")
    if req.fixed_kvar is not None:
        return BankDesign.fixed(req.fixed_kvar, detuning_percent=req.detuning_percent,
                                capacitor_rated_voltage_v=req.capacitor_rated_voltage_v)
    if req.steps:
        return BankDesign.automatic(req.steps, detuning_percent=req.detuning_percent,
                                    capacitor_rated_voltage_v=req.capacitor_rated_voltage_v)
    return None


def _scenario_inputs(data: MeterData, req: SizeRequest, start: date | None, end: date | None) -> dict:
    """The keyword arguments run_scenario and optimise share: site facts, costs, options."""
    site = SiteElectrical(transformer_kva=data.transformer_kva,
                          transformer_impedance_percent=data.transformer_impedance_percent,
                          nominal_voltage_v=data.nominal_voltage_v)
    return dict(tz=data.timezone, interval_minutes=data.interval_minutes, target_pf=req.target_pf,
                costs=CostInputs(**req.costs) if req.costs else CostInputs(), site=site, start=start,
                end=end, leading_pf_limit=req.leading_pf_limit)


def size_meter(store: Store, req: SizeRequest, tariff: Tariff | None = None) -> SizeCase:
    t = tariff or resolve_tariff(req.tariff)
    start, end = _date(req.start), _date(req.end)
    data = load_meter(store, req.meter, start, end)
    if data.frame.empty:
        raise UsageError(f"meter {req.meter} has no readings to size a bank on")
    common = _scenario_inputs(data, req, start, end)
    bank = bank_of(req)
    if bank is None:
        result = optimise(data.frame, t, **common)
    else:
        result = run_scenario(data.frame, t, bank=bank, **common)
    return SizeCase(req, data, t, result)


def _tariff_text(req: SizeRequest, tariff: Tariff) -> str:
    src = tariff.source or req.tariff
    try:
        return Path(src).read_text(encoding="utf-8")
    except OSError:
        return ""


def save_scenario(store: Store, name: str, case: SizeCase) -> dict:
    name = (name or "").strip()
    if not name or len(name) > 200:
        raise UsageError("a scenario name is 1 to 200 characters")
    d = case.to_dict()
    with store.session() as s:
        meter = get_meter(s, case.data.meter)
        row = s.scalar(select(Scenario).where(Scenario.name == name))
        if row is None:
            row = Scenario(name=name, meter_id=meter.id, created_at=now_utc(), tariff_name="", tariff_source="",
                           params="{}", result="{}")
            s.add(row)
        row.meter_id = meter.id
        row.tariff_name = case.tariff.name
        row.tariff_source = _tariff_text(case.request, case.tariff)
        row.params = json.dumps(case.request.to_dict())
        row.result = to_json(d)
        row.annual_savings = d.get("annual_savings")
        row.npv = d.get("npv")
        row.simple_payback_years = d.get("simple_payback_years")
        row.created_at = now_utc()
        s.flush()
        return _summary(row, case.data.meter)


def _summary(row: Scenario, meter: str) -> dict:
    return {"name": row.name, "meter": meter, "tariff": row.tariff_name, "annual_savings": row.annual_savings,
            "npv": row.npv, "simple_payback_years": row.simple_payback_years,
            "created_at": row.created_at.isoformat() if row.created_at else None}


def list_scenarios(store: Store, meter: str | None = None) -> list[dict]:
    with store.session() as s:
        q = select(Scenario, Meter.external_id).join(Meter, Meter.id == Scenario.meter_id).order_by(Scenario.name)
        if meter:
            q = q.where(Meter.external_id == meter)
        return [_summary(row, ext) for row, ext in s.execute(q)]


def get_scenario(store: Store, name: str) -> dict:
    """A saved scenario: its summary, request, tariff text and stored result."""
    with store.session() as s:
        found = s.execute(select(Scenario, Meter.external_id).join(Meter, Meter.id == Scenario.meter_id)
                          .where(Scenario.name == name)).first()
        if found is None:
            names = s.scalars(select(Scenario.name).order_by(Scenario.name).limit(20)).all()
            raise NotFoundError(f"no saved scenario {name!r}" + (f"; saved: {', '.join(names)}" if names else ""))
        row, ext = found
        out = _summary(row, ext)
        out["request"] = json.loads(row.params)
        out["tariff_source"] = row.tariff_source
        out["result"] = json.loads(row.result)
        return out


def delete_scenario(store: Store, name: str) -> None:
    with store.session() as s:
        row = s.scalar(select(Scenario).where(Scenario.name == name))
        if row is None:
            raise NotFoundError(f"no saved scenario {name!r}")
        s.delete(row)


def best_scenario(store: Store, meter: str) -> dict | None:
    """The saved scenario of a meter with the best NPV (for the portfolio)."""
    rows = [x for x in list_scenarios(store, meter) if x["npv"] is not None]
    return max(rows, key=lambda x: x["npv"]) if rows else None


def size_site(store: Store, site: str, req: SizeRequest, mode: str = "central") -> dict:
    """Correct all meters of a site: one bank on their summed intervals (``central``), or the
    same design on each meter billed on its own (``per_meter``); optimised centrally with
    ``req.optimize``. Returns the JSON document."""
    from auditor.correction import run_site, sum_meters
    from auditor.services.meters import meters_of_site

    t = resolve_tariff(req.tariff)
    start, end = _date(req.start), _date(req.end)
    names = meters_of_site(store, site)
    if not names:
        raise UsageError(f"site {site!r} has no meters")
    datas = {n: load_meter(store, n, start, end) for n in names}
    minutes = {d.interval_minutes for d in datas.values()}
    if len(minutes) != 1:
        raise UsageError(f"the meters of site {site!r} have different interval lengths: {sorted(minutes)}")
    common = _scenario_inputs(next(iter(datas.values())), req, start, end)
    frames = {n: d.frame for n, d in datas.items()}
    bank = bank_of(req)
    if bank is None:
        if mode != "central":
            raise UsageError("--optimize with a site works on the meters' sum (--mode central)")
        total, warnings = sum_meters(frames)
        out = optimise(total, t, **common).to_dict()
        out["warnings"] = list(warnings) + out["warnings"]
        out = {"mode": "central", "scenarios": {"site": out}, "annual_savings": out["annual_savings"],
               "capex": out["capex"], "npv": out["npv"], "irr": out["irr"], "cautions": out["cautions"],
               "warnings": out["warnings"]}
    else:
        out = run_site(frames, t, bank=bank, mode=mode, **common).to_dict()
    out.update({"site": site, "meters": names, "tariff": t.name, "request": req.to_dict()})
    return out
