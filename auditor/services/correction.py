"""Correction scenarios: compute one for a meter or a site (a design, or the optimiser's
choice), keep it by name, and the site's correction settings (screening limits, the measured
harmonic spectrum, the share of drives).

Vocabulary (one name per concept, see the contributor guide's glossary): a *scenario* is one
design applied to a meter's intervals, billed again and costed. ``ScenarioRequest`` is what was
asked, :func:`scenario_for_meter` computes a ``MeterScenario`` (the request, the meter's data,
the tariff and the pure :class:`~auditor.correction.ScenarioResult`), :func:`save_scenario`
keeps it in the ``scenario`` table. The command line computes one with ``auditor size``.
"""
from __future__ import annotations

import json
import math
import re
from dataclasses import InitVar, dataclass, field, fields
from datetime import date
from pathlib import Path

from sqlalchemy import func, select

from auditor.correction import (
    BankDesign,
    CostInputs,
    ReactorCosts,
    ScenarioResult,
    ScreeningLimits,
    SiteElectrical,
    Spectrum,
    optimise,
    run_scenario,
    spectrum_from_table,
)
from auditor.errors import InputError, NotFoundError, ProfileError, UsageError
from auditor.ingest.harmonics_csv import parse_spectrum, read_spectrum
from auditor.render import to_json
from auditor.services.audit import resolve_tariff
from auditor.services.meters import MeterData, load_meter
from auditor.store import Store
from auditor.store.models import Meter, Scenario, Site
from auditor.store.queries import get_meter, now_utc
from auditor.tariffs import Tariff


@dataclass(frozen=True)
class ScenarioRequest:
    """What the user asked for; stored with a saved scenario so it can be run again.

    Exactly one design: ``fixed_kvar``, ``steps`` (an automatic bank), ``reactor_kvar``,
    ``switch_off_kvar`` or ``optimise``. ``screening`` holds screening settings (over the
    site's); ``harmonics`` a measured spectrum as read (over the site's); ``drive_share`` the
    share of the load on six-pulse drives, for an estimate when nothing was measured.
    """

    meter: str
    tariff: str
    target_pf: float = 0.95
    fixed_kvar: float | None = None
    steps: str | None = None
    optimise: bool = False
    detuning_percent: float = 0.0
    costs: dict = field(default_factory=dict)
    start: str | None = None
    end: str | None = None
    leading_pf_limit: float | None = None
    capacitor_rated_voltage_v: float | None = None
    reactor_kvar: float | None = None
    switch_off_kvar: float | None = None
    reactor_costs: dict = field(default_factory=dict)
    screening: dict = field(default_factory=dict)
    harmonics: dict | None = None
    drive_share: float | None = None
    optimize: InitVar[bool | None] = None  # the former spelling, accepted on the way in

    def __post_init__(self, optimize: bool | None) -> None:
        if optimize:
            object.__setattr__(self, "optimise", True)

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    @classmethod
    def from_dict(cls, d: dict) -> ScenarioRequest:
        names = {f.name for f in fields(cls)}
        values = {k: v for k, v in d.items() if k in names}
        if d.get("optimize"):  # saved before the name was settled
            values["optimise"] = True
        return cls(**values)

    def replace(self, **changes) -> ScenarioRequest:
        return ScenarioRequest(**{**self.to_dict(), **changes})


@dataclass(frozen=True)
class MeterScenario:
    """A computed scenario of one meter: the request, the meter's data, the tariff, the result."""

    request: ScenarioRequest
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


# the former names, kept for callers outside this module until they use the glossary's
SizeRequest = ScenarioRequest
SizeCase = MeterScenario


def _date(text: str | None) -> date | None:
    return date.fromisoformat(text) if text else None


def design_of(req: ScenarioRequest) -> BankDesign | None:
    """The design asked for, or None for the optimiser."""
    chosen = [x for x in (req.fixed_kvar is not None, bool(req.steps), req.optimise,
                          req.reactor_kvar is not None, req.switch_off_kvar is not None) if x]
    if len(chosen) != 1:
        raise UsageError("choose exactly one of the designs: a fixed bank, an automatic bank's steps, a reactor, "
                         "existing capacitance to switch off, or the optimiser",
                         cli_hint="one of --fixed, --bank, --reactor, --switch-off, --optimise")
    if req.fixed_kvar is not None:
        return BankDesign.fixed(req.fixed_kvar, detuning_percent=req.detuning_percent,
                                capacitor_rated_voltage_v=req.capacitor_rated_voltage_v)
    if req.steps:
        return BankDesign.automatic(req.steps, detuning_percent=req.detuning_percent,
                                    capacitor_rated_voltage_v=req.capacitor_rated_voltage_v)
    if req.reactor_kvar is not None or req.switch_off_kvar is not None:
        if req.detuning_percent or req.capacitor_rated_voltage_v:
            raise UsageError("a reactor or capacitance switched off takes no detuning and no capacitor voltage")
        if req.reactor_kvar is not None:
            return BankDesign.reactor(req.reactor_kvar)
        return BankDesign.switch_off(req.switch_off_kvar)
    return None



def split_costs(costs: dict, *, reactor_kvar: float | None = None,
                switch_off_kvar: float | None = None) -> tuple[dict, dict]:
    """(bank costs, reactor costs) from one set of cost inputs: the installed-cost figures
    (``capex_fixed``, ``capex_per_kvar``) belong to the design asked — a reactor's, or for
    capacitance switched off their sum is the whole cost — and the finance figures to all."""
    costs = dict(costs)
    capex = {k: costs.pop(k) for k in ("capex_fixed", "capex_per_kvar") if k in costs}
    if switch_off_kvar is not None:
        if not capex:
            return costs, {}
        return costs, {"switch_off_cost": capex.get("capex_fixed", 0.0)
                       + capex.get("capex_per_kvar", 0.0) * switch_off_kvar}
    if reactor_kvar is not None:
        return costs, capex
    return {**costs, **capex}, {}


# --------------------------------------------------------------------------------------------
# the site's correction settings
# --------------------------------------------------------------------------------------------
#: Keys a ``[[site]]`` table of a site file may carry for the correction.
SITE_FILE_KEYS = ("screening", "harmonics", "drive_share")


def _check_drive_share(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value) \
            or not 0 < value <= 1:
        raise UsageError(f"{where}: drive_share is the fraction of the load on six-pulse drives, "
                         f"greater than 0 and at most 1 (e.g. 0.4); got {value!r}")
    return float(value)


def site_file_settings(entry: dict, defaults: dict | None, path: Path, index: int) -> dict:
    """Check and read the correction keys of one ``[[site]]`` table (``screening``,
    ``harmonics`` — a spectrum CSV, relative to the site file — and ``drive_share``), over the
    file's top-level ``[screening]`` table. Nothing is stored; errors name the key path."""
    where = f"site[{index}]"
    out: dict = {}
    table = dict(defaults or {})
    if not isinstance(entry, dict):
        raise ProfileError(where, "every [[site]] entry must be a table", str(path))
    if defaults is not None and not isinstance(defaults, dict):
        raise ProfileError("screening", "must be a table of screening settings", str(path))
    if "screening" in entry:
        if not isinstance(entry["screening"], dict):
            raise ProfileError(f"{where}.screening", "must be a table of screening settings", str(path))
        table.update(entry["screening"])
    if table:
        for key, value in table.items():
            try:
                ScreeningLimits.from_mapping({key: value}, where="screening")
            except UsageError as exc:
                scope = f"{where}.screening.{key}" if key in entry.get("screening", {}) else f"screening.{key}"
                raise ProfileError(scope, exc.message.removeprefix("screening: "), str(path)) from None
        try:
            ScreeningLimits.from_mapping(table)
        except UsageError as exc:
            raise ProfileError(f"{where}.screening", exc.message.removeprefix("screening: "), str(path)) from None
        out["screening"] = table
    if "harmonics" in entry:
        value = entry["harmonics"]
        if not isinstance(value, str) or not value.strip():
            raise ProfileError(f"{where}.harmonics", "the path of a harmonic spectrum CSV, relative to the "
                               "site file", str(path))
        out["harmonics"] = read_spectrum(path.parent / value).to_dict()
    if "drive_share" in entry:
        try:
            out["drive_share"] = _check_drive_share(entry["drive_share"], "drive_share")
        except UsageError as exc:
            raise ProfileError(f"{where}.drive_share", exc.message.removeprefix("drive_share: "),
                               str(path)) from None
    return out


def store_site_settings(store: Store, site: str, settings: dict) -> None:
    """Keep the correction settings read by :func:`site_file_settings` on the site (the keys
    given replace the stored ones; keys not given stay)."""
    if not settings:
        return
    with store.session() as s:
        row = s.scalar(select(Site).where(Site.name == site))
        if row is None:
            raise NotFoundError(f"no site {site!r}")
        if "screening" in settings:
            row.screening_settings = json.dumps(settings["screening"]) if settings["screening"] else None
        if "harmonics" in settings:
            row.harmonic_spectrum = json.dumps(settings["harmonics"]) if settings["harmonics"] else None
        if "drive_share" in settings:
            row.drive_share = settings["drive_share"]


def site_settings(store: Store, meter: str) -> dict:
    """The correction settings of a meter's site: ``screening`` (dict), ``harmonics`` (dict or
    None), ``drive_share`` (float or None), ``site`` (its name)."""
    with store.session() as s:
        site = get_meter(s, meter).site
        return {"site": site.name,
                "screening": json.loads(site.screening_settings) if site.screening_settings else {},
                "harmonics": json.loads(site.harmonic_spectrum) if site.harmonic_spectrum else None,
                "drive_share": site.drive_share}


def read_spectrum_file(path: str) -> dict:
    """Read and check a measured spectrum file (errors name file, line and column)."""
    return read_spectrum(path).to_dict()


def read_uploaded_spectrum(text: str, name: str) -> dict:
    """Check an uploaded spectrum (``name`` is the file's own name) and return it as read."""
    return parse_spectrum(text, name).to_dict()


def set_site_harmonics(store: Store, meter: str, text: str, name: str) -> dict:
    """Check an uploaded spectrum (``name`` is the file's own name) and keep it on the meter's
    site; returns it as read."""
    spectrum = parse_spectrum(text, name).to_dict()
    with store.session() as s:
        get_meter(s, meter).site.harmonic_spectrum = json.dumps(spectrum)
    return spectrum


def with_site_settings(store: Store, req: ScenarioRequest) -> ScenarioRequest:
    """The request completed from the meter's site: screening settings under the request's,
    the site's measured spectrum and drive share where the request gives none (a measured
    spectrum is used before an estimate from the drive share). The completed request is what a
    saved scenario keeps, so it runs again the same way."""
    site = site_settings(store, req.meter)
    screening = {**site["screening"], **(req.screening or {})}
    harmonics = req.harmonics if req.harmonics is not None else site["harmonics"]
    drive = req.drive_share if req.drive_share is not None else site["drive_share"]
    return req.replace(screening=screening, harmonics=harmonics, drive_share=drive)


def spectrum_of(harmonics: dict | None, nominal_voltage_v: float | None) -> Spectrum | None:
    """A correction-layer spectrum from a spectrum as read (file or upload)."""
    if not harmonics:
        return None
    name = harmonics.get("name") or "the harmonic measurement"
    voltage = nominal_voltage_v or harmonics.get("voltage_v")
    if voltage is None:
        raise UsageError(f"{name}: the site's nominal voltage is needed to use a harmonic measurement "
                         "(set it on the site, or give voltage_v in the file)")
    try:
        return spectrum_from_table(
            harmonics["orders"], voltage_v=voltage, current_pct=harmonics.get("current_pct"),
            current_a=harmonics.get("current_a"), background_voltage_pct=harmonics.get("voltage_pct"),
            fundamental_a=harmonics.get("fundamental_a"), kw=harmonics.get("kw"), pf=harmonics.get("pf"),
            note=f"from {name}")
    except UsageError as exc:
        raise InputError(name, exc.message + " (a '# fundamental_a = …' line, or '# kw = …' and "
                         "'# pf = …' lines, in the file)") from None
    except (KeyError, TypeError) as exc:
        raise InputError(name, f"the stored measurement is incomplete ({exc})") from None


def _scenario_inputs(data: MeterData, req: ScenarioRequest, start: date | None, end: date | None) -> dict:
    """The keyword arguments run_scenario and optimise share: site facts, costs, settings."""
    voltage = data.nominal_voltage_v
    if voltage is None and req.harmonics and req.harmonics.get("voltage_v"):
        voltage = float(req.harmonics["voltage_v"])
    site = SiteElectrical(transformer_kva=data.transformer_kva,
                          transformer_impedance_percent=data.transformer_impedance_percent,
                          nominal_voltage_v=voltage)
    drive = _check_drive_share(req.drive_share, "drive share") if req.drive_share is not None else None
    return dict(tz=data.timezone, interval_minutes=data.interval_minutes, target_pf=req.target_pf,
                costs=CostInputs(**req.costs) if req.costs else CostInputs(), site=site, start=start,
                end=end, leading_pf_limit=req.leading_pf_limit,
                limits=ScreeningLimits.from_mapping(req.screening or {}),
                spectrum=spectrum_of(req.harmonics, voltage), drive_share=drive,
                reactor_costs=ReactorCosts.from_mapping(req.reactor_costs))


def scenario_for_meter(store: Store, req: ScenarioRequest, tariff: Tariff | None = None) -> MeterScenario:
    """Compute the scenario a request asks for on one meter (its site's settings filled in)."""
    t = tariff or resolve_tariff(req.tariff)
    start, end = _date(req.start), _date(req.end)
    req = with_site_settings(store, req)
    data = load_meter(store, req.meter, start, end)
    if data.frame.empty:
        raise UsageError(f"meter {req.meter} has no readings to size a bank on")
    common = _scenario_inputs(data, req, start, end)
    bank = design_of(req)
    if bank is None:
        result = optimise(data.frame, t, **common)
    else:
        result = run_scenario(data.frame, t, bank=bank, **common)
    return MeterScenario(req, data, t, result)


size_meter = scenario_for_meter  # the former name


def _tariff_text(req: ScenarioRequest, tariff: Tariff) -> str:
    src = tariff.source or req.tariff
    try:
        return Path(src).read_text(encoding="utf-8")
    except OSError:
        return ""


def save_scenario(store: Store, name: str, case: MeterScenario) -> dict:
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
        return _summary(row, case.data.meter, verdict_of(d))


def _summary(row, meter: str, recommended: bool | None = None, timezone: str | None = None) -> dict:
    """A saved scenario in one line: name, meter, tariff, money, when (UTC, and the meter's site's
    ``timezone`` to show it in), and ``recommended`` (whether its design passes its own
    screening; None when the saved result cannot say)."""
    created = row.created_at
    if created is not None and created.tzinfo is None:  # SQLite keeps the UTC time without its offset
        from datetime import UTC

        created = created.replace(tzinfo=UTC)
    return {"name": row.name, "meter": meter, "tariff": row.tariff_name, "annual_savings": row.annual_savings,
            "npv": row.npv, "simple_payback_years": row.simple_payback_years,
            "created_at": created.isoformat() if created else None, "timezone": timezone,
            "recommended": recommended}


def verdict_of(result: dict) -> bool | None:
    """Whether a saved result's design may be recommended: ``recommended`` (false when its
    screening fails), else, for a result saved before that key, ``screening.passed``."""
    if "recommended" in result:
        return bool(result["recommended"])
    passed = (result.get("screening") or {}).get("passed")
    return None if passed is None else bool(passed)


#: The stored result is ``to_json`` of the case (two spaces a level), ``bank`` first and
#: ``recommended`` second: its verdict is read from the text's head, without parsing a document
#: that holds the frequency scan and every candidate (some hundred kB).
_HEAD = 4000
_TOP_RECOMMENDED = re.compile(r'^  "recommended": (true|false)', re.MULTILINE)


def list_scenarios(store: Store, meter: str | None = None) -> list[dict]:
    """Every saved scenario (of ``meter``), by name, with its verdict (see :func:`_summary`)."""
    with store.session() as s:
        q = (select(Scenario.id, Scenario.name, Scenario.tariff_name, Scenario.annual_savings, Scenario.npv,
                    Scenario.simple_payback_years, Scenario.created_at,
                    func.substr(Scenario.result, 1, _HEAD).label("head"), Meter.external_id, Site.timezone)
             .join(Meter, Meter.id == Scenario.meter_id).join(Site, Site.id == Meter.site_id)
             .order_by(Scenario.name))
        if meter:
            q = q.where(Meter.external_id == meter)
        rows = s.execute(q).all()
        verdicts: dict[int, bool | None] = {}
        for r in rows:
            m = _TOP_RECOMMENDED.search(r.head or "")
            if m:
                verdicts[r.id] = m.group(1) == "true"
        rest = [r.id for r in rows if r.id not in verdicts]
        if rest:  # saved before the verdict was kept near the top: read those whole
            for sid, text in s.execute(select(Scenario.id, Scenario.result).where(Scenario.id.in_(rest))):
                try:
                    verdicts[sid] = verdict_of(json.loads(text))
                except (ValueError, TypeError, AttributeError):
                    verdicts[sid] = None
        return [_summary(r, r.external_id, verdicts.get(r.id), r.timezone) for r in rows]


def get_scenario(store: Store, name: str) -> dict:
    """A saved scenario: its summary, request, tariff text and stored result."""
    with store.session() as s:
        found = s.execute(select(Scenario, Meter.external_id, Site.timezone)
                          .join(Meter, Meter.id == Scenario.meter_id).join(Site, Site.id == Meter.site_id)
                          .where(Scenario.name == name)).first()
        if found is None:
            names = s.scalars(select(Scenario.name).order_by(Scenario.name).limit(20)).all()
            raise NotFoundError(f"no saved scenario {name!r}" + (f"; saved: {', '.join(names)}" if names else ""))
        row, ext, tz = found
        result = json.loads(row.result)
        out = _summary(row, ext, verdict_of(result), tz)
        out["request"] = json.loads(row.params)
        out["tariff_source"] = row.tariff_source
        out["result"] = result
        return out


def scenario_row(s, name: str) -> Scenario:
    """The stored row of the saved scenario ``name`` in session ``s``, or NotFoundError."""
    row = s.scalar(select(Scenario).where(Scenario.name == name))
    if row is None:
        raise NotFoundError(f"no saved scenario {name!r}")
    return row


def delete_scenario(store: Store, name: str) -> None:
    with store.session() as s:
        s.delete(scenario_row(s, name))


def best_scenario(store: Store, meter: str) -> dict | None:
    """The saved scenario of a meter with the best NPV among those whose design passes its
    screening (for the portfolio); when none passes, the best of the others (its
    ``recommended`` says so). None without a saved scenario with an NPV."""
    return pick_best(list_scenarios(store, meter))


def pick_best(saved: list[dict]) -> dict | None:
    """:func:`best_scenario`'s rule over scenario summaries of one meter."""
    rows = [x for x in saved if x["npv"] is not None]
    if not rows:
        return None
    return max(rows, key=lambda x: (x.get("recommended") is not False, x["npv"]))


def scenario_for_site(store: Store, site: str, req: ScenarioRequest, mode: str = "central") -> dict:
    """Correct all meters of a site: one design on their summed intervals (``central``), or the
    same design on each meter billed on its own (``per_meter``); optimised centrally with
    ``req.optimise``. Returns the JSON document."""
    from auditor.correction import run_site, sum_meters
    from auditor.services.meters import meters_of_site

    t = resolve_tariff(req.tariff)
    start, end = _date(req.start), _date(req.end)
    names = meters_of_site(store, site)
    if not names:
        raise UsageError(f"site {site!r} has no meters")
    req = with_site_settings(store, req.replace(meter=names[0]))
    datas = {n: load_meter(store, n, start, end) for n in names}
    minutes = {d.interval_minutes for d in datas.values()}
    if len(minutes) != 1:
        raise UsageError(f"the meters of site {site!r} have different interval lengths: {sorted(minutes)}")
    common = _scenario_inputs(next(iter(datas.values())), req, start, end)
    frames = {n: d.frame for n, d in datas.items()}
    bank = design_of(req)
    if bank is None:
        if mode != "central":
            raise UsageError("the optimiser works on the meters' sum of a site: central correction, not per meter",
                             cli_hint="--optimise with --mode central")
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


size_site = scenario_for_site  # the former name
