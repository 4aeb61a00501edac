"""Screening of a proposed design: rules that pass, caution or fail, with their figures.

Every rule returns a :class:`RuleResult` — ``pass``, ``caution`` or ``fail`` with its value, its
limit and a message — and a design *passes* screening when no rule fails. The limits are
settings (:class:`ScreeningLimits`, from the command line or the ``[screening]`` table of a
site file) with the defaults below. Screening estimates from nameplate data and interval
averages; it replaces neither a site survey nor a harmonic measurement, and every output that
recommends equipment carries :data:`CAUTIONS`.

The rules
---------
``over_correction``
    Capacitor banks: share of intervals the bank drives leading, the leading kvarh it adds and
    the leading-energy charge that adds, against the saving. Reactors (and capacitance
    switched out): share of intervals driven lagging beyond the target PF.
``minimum_load``
    A fixed bank, or an automatic bank's smallest step, against the lagging kvar the site draws
    at light load (the ``light_load_percentile`` of the interval kvar): larger fails for a fixed
    bank (it drives the site leading), cautions for an automatic one (it stays off at light
    load). Reactors: the smallest step against the leading kvar at the site's most leading
    intervals.
``resonance``
    Parallel resonance of every stage, h_r = √(S_sc/Q_c) plain or 1/√(Q_c/S_sc + p) detuned
    (IEEE Std 1036), against the orders screened: within ``resonance_fail_percent`` fails,
    within ``resonance_caution_percent`` cautions. With a measured spectrum the screened orders
    it shows absent only caution. Its value is the distance of the worst stage from the nearest
    screened order, in percent of that order; its limit the band it falls in.
``voltage_rise`` (``voltage_drop`` for reactors)
    ≈ 100·Q/S_sc percent at light load (IEEE Std 1036, common practice).
``capacitor_duty``
    rms and peak voltage, rms current and kvar of the capacitors against IEEE Std 18 limits,
    with the reactor's voltage rise, the light-load rise and, with a spectrum, the harmonics.
``harmonic_distortion``
    With a spectrum: voltage THD and the largest individual harmonic voltage at the bus with
    the design, against IEEE Std 519-2014 Table 1; fails when the design makes a breach
    (worse), cautions when the site breaches it without the design or the design amplifies a
    present order more than ``amplification_caution`` times.

Defaults and their sources
--------------------------
=============================  =========  ===================================================
setting                        default    source
=============================  =========  ===================================================
resonance_fail_percent         10         common practice, from memory
resonance_caution_percent      15         from memory (a graded margin round the fail band)
harmonic_orders                5,7,11,13  six-pulse characteristic orders (IEEE Std 519)
voltage_change_fail_percent    3          common practice, from memory
voltage_change_caution_percent 2          from memory
leading_share_fail_percent     5          project default (an engineering judgement)
leading_share_caution_percent  1          project default
leading_charge_fail_percent    10         project default: leading charges > 10 % of the saving
light_load_percentile          5          the issue's "light load": 5th percentile of kvar
capacitor_v_rms_percent        110        IEEE Std 18
capacitor_v_peak_percent       120        IEEE Std 18
capacitor_i_rms_percent        135        IEEE Std 18
capacitor_kvar_percent         135        IEEE Std 18
duty_caution_margin_percent    5          project default: caution within 5 points of a limit
thd_limit_percent              (by V)     IEEE Std 519-2014 Table 1
individual_limit_percent       (by V)     IEEE Std 519-2014 Table 1
harmonic_presence_percent      2          project default: an order counts from 2 % of I_1
amplification_caution          2          project default
frequency_hz                   50         the supply frequency (60 in North America)
=============================  =========  ===================================================

References
----------
.. [1] IEEE Std 1036-2010, *Guide for the Application of Shunt Power Capacitors*.
.. [2] IEEE Std 519-2014, harmonic limits (Table 1: voltage distortion).
.. [3] IEEE Std 18, shunt power capacitors: continuous limits.
"""
from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields

import numpy as np

from auditor.correction.banks import BankDesign, tuning_order
from auditor.correction.harmonics import HarmonicStudy, Spectrum, study
from auditor.correction.sizing import tan_phi
from auditor.errors import UsageError

#: Shown with every result that recommends equipment (the trade's standing cautions).
CAUTIONS: tuple[str, ...] = (
    "A capacitor keeps a dangerous charge after it is switched off: treat every terminal as live "
    "until it has been discharged and proven dead.",
    "Only qualified persons may specify, install and maintain a bank, following the local "
    "electrical code, which also sets the discharge time and the protection required.",
    "Harmonic resonance and over-voltage can damage the bank and other equipment on the site.",
    "Interval meter data average away fast load swings: survey the site and measure its "
    "harmonics before buying anything.",
    "These figures are estimates for a decision; they do not certify a design.",
)

#: Harmonic orders screened for resonance (six-pulse characteristic harmonics, IEEE Std 519).
HARMONIC_ORDERS = (5, 7, 11, 13)
#: Resonance within ±10 % of a harmonic order fails — common practice (kept for callers).
RESONANCE_BAND = 0.10
#: Voltage rise above this at light load fails — common practice, from memory.
VOLTAGE_RISE_LIMIT_PERCENT = 3.0
#: Continuous capacitor voltage limit, percent of rated — IEEE Std 18.
CAPACITOR_VOLTAGE_LIMIT_PERCENT = 110.0

STATUSES = ("pass", "caution", "fail")
RULES = ("over_correction", "minimum_load", "resonance", "voltage_rise", "voltage_drop",
         "capacitor_duty", "harmonic_distortion")


@dataclass(frozen=True)
class ScreeningLimits:
    """The limits and margins of the screening rules (module docstring: defaults, sources)."""

    resonance_fail_percent: float = 10.0
    resonance_caution_percent: float = 15.0
    harmonic_orders: tuple[int, ...] = HARMONIC_ORDERS
    voltage_change_fail_percent: float = VOLTAGE_RISE_LIMIT_PERCENT
    voltage_change_caution_percent: float = 2.0
    leading_share_fail_percent: float = 5.0
    leading_share_caution_percent: float = 1.0
    leading_charge_fail_percent: float = 10.0
    light_load_percentile: float = 5.0
    capacitor_v_rms_percent: float = CAPACITOR_VOLTAGE_LIMIT_PERCENT
    capacitor_v_peak_percent: float = 120.0
    capacitor_i_rms_percent: float = 135.0
    capacitor_kvar_percent: float = 135.0
    duty_caution_margin_percent: float = 5.0
    thd_limit_percent: float | None = None
    individual_limit_percent: float | None = None
    harmonic_presence_percent: float = 2.0
    amplification_caution: float = 2.0
    frequency_hz: float = 50.0

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name == "harmonic_orders":
                orders = value if isinstance(value, tuple | list) else None
                if not orders or any(isinstance(h, bool) or not isinstance(h, int) or not 2 <= h <= 50
                                     for h in orders):
                    raise UsageError(f"screening setting harmonic_orders must be a list of whole "
                                     f"orders from 2 to 50, got {value!r}")
                object.__setattr__(self, f.name, tuple(sorted(set(int(h) for h in orders))))
                continue
            if value is None and f.name in ("thd_limit_percent", "individual_limit_percent"):
                continue
            if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value) \
                    or value <= 0:
                raise UsageError(f"screening setting {f.name} must be a positive number, got {value!r}")
            object.__setattr__(self, f.name, float(value))
        if self.resonance_caution_percent < self.resonance_fail_percent:
            raise UsageError("screening setting resonance_caution_percent must be at least "
                             f"resonance_fail_percent ({self.resonance_fail_percent:g})")
        if self.voltage_change_caution_percent > self.voltage_change_fail_percent:
            raise UsageError("screening setting voltage_change_caution_percent must not exceed "
                             f"voltage_change_fail_percent ({self.voltage_change_fail_percent:g})")
        if self.leading_share_caution_percent > self.leading_share_fail_percent:
            raise UsageError("screening setting leading_share_caution_percent must not exceed "
                             f"leading_share_fail_percent ({self.leading_share_fail_percent:g})")
        if not self.light_load_percentile < 50:
            raise UsageError("screening setting light_load_percentile is a low percentile "
                             f"(e.g. 5), got {self.light_load_percentile:g}")
        if self.resonance_caution_percent >= 50:
            raise UsageError("screening setting resonance_caution_percent must be below 50 %")

    @classmethod
    def keys(cls) -> tuple[str, ...]:
        return tuple(f.name for f in fields(cls))

    @classmethod
    def from_mapping(cls, values: Mapping, where: str = "screening",
                     base: ScreeningLimits | None = None) -> ScreeningLimits:
        """Settings from a table (site file, CLI ``KEY=VALUE`` pairs), over ``base``.

        Raises UsageError naming ``where`` and the key; an unknown key names the closest known
        one.
        """
        if not isinstance(values, Mapping):
            raise UsageError(f"{where}: expected a table of screening settings")
        known = cls.keys()
        for key in values:
            if key not in known:
                close = difflib.get_close_matches(str(key), known, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else f"; known: {', '.join(known)}"
                raise UsageError(f"{where}: unknown screening setting {key!r}{hint}")
        current = (base or cls()).to_dict()
        current.update({k: (tuple(v) if k == "harmonic_orders" and isinstance(v, list) else v)
                        for k, v in values.items()})
        try:
            return cls(**current)
        except UsageError as exc:
            raise UsageError(f"{where}: {exc.message}") from None

    def to_dict(self) -> dict:
        return {f.name: (list(getattr(self, f.name)) if f.name == "harmonic_orders" else getattr(self, f.name))
                for f in fields(self)}

    def changed(self) -> dict:
        """The settings that differ from the defaults."""
        default = ScreeningLimits().to_dict()
        return {k: v for k, v in self.to_dict().items() if v != default[k]}


def parse_setting(text: str) -> tuple[str, object]:
    """``KEY=VALUE`` as given on the command line: a number, ``none``, or comma-separated orders."""
    if "=" not in text:
        raise UsageError(f"screening setting {text!r}: write KEY=VALUE, e.g. resonance_fail_percent=8")
    key, _, raw = text.partition("=")
    key, raw = key.strip(), raw.strip()
    if key == "harmonic_orders":
        try:
            return key, [int(x) for x in raw.split(",") if x.strip()]
        except ValueError:
            raise UsageError(f"screening setting {text!r}: harmonic_orders is a list such as 5,7,11,13") from None
    if raw.lower() in ("none", ""):
        return key, None
    try:
        return key, float(raw)
    except ValueError:
        raise UsageError(f"screening setting {text!r}: {raw!r} is not a number") from None


@dataclass(frozen=True)
class SiteElectrical:
    """Electrical data of the site supplied by the caller.

    Parameters
    ----------
    transformer_kva : float or None
        Rating of the supply transformer.
    transformer_impedance_percent : float or None
        Its short-circuit impedance, percent (z).
    nominal_voltage_v : float or None
        System voltage at the bank (line-to-line).
    short_circuit_kva : float or None
        Short-circuit power at the bank when known; overrides the transformer estimate.
    """

    transformer_kva: float | None = None
    transformer_impedance_percent: float | None = None
    nominal_voltage_v: float | None = None
    short_circuit_kva: float | None = None

    def __post_init__(self) -> None:
        for name in ("transformer_kva", "transformer_impedance_percent", "nominal_voltage_v",
                     "short_circuit_kva"):
            value = getattr(self, name)
            if value is not None and (not isinstance(value, int | float | np.number)
                                      or not math.isfinite(value) or value <= 0):
                raise UsageError(f"site {name} must be a positive number, got {value!r}")
        if self.transformer_impedance_percent is not None and self.transformer_impedance_percent >= 100:
            raise UsageError(
                f"site transformer_impedance_percent is a percentage (e.g. 6), got "
                f"{self.transformer_impedance_percent!r}"
            )

    def short_circuit(self) -> tuple[float | None, str | None]:
        """S_sc in kVA and, when it cannot be had, the reason.

        S_sc ≈ S_transformer / z (z per unit), ignoring the upstream network, which makes it
        an upper bound on S_sc (IEEE Std 1036, common practice).
        """
        if self.short_circuit_kva is not None:
            return float(self.short_circuit_kva), None
        missing = [n for n in ("transformer_kva", "transformer_impedance_percent")
                   if getattr(self, n) is None]
        if missing:
            return None, ("could not compute the parallel resonance or the voltage rise: the "
                          f"site's {' and '.join(missing)} {'is' if len(missing) == 1 else 'are'} "
                          "not known (give them, or the short-circuit kVA at the bank)")
        return float(self.transformer_kva) / (float(self.transformer_impedance_percent) / 100.0), None


def parallel_resonance_order(short_circuit_kva: float, capacitor_kvar: float | np.ndarray,
                             detuning_percent: float = 0.0) -> float | np.ndarray:
    """Order of the parallel resonance between the supply and the bank.

    Plain bank: h_r = √(S_sc / Q_c). Detuned bank (reactor p, series with the capacitor, in
    parallel with the supply inductance): h_r = 1 / √(Q_c / S_sc + p), always below the tuning
    order 1/√p. Q_c is the capacitor's own kvar at the system voltage, before the reactor.

    References
    ----------
    .. [1] IEEE Std 1036-2010, h_r = √(S_sc / Q_c) (common practice).
    .. [2] Circuit theory: X_s·h + (X_L·h − X_C/h) = 0 with X_C/X_s = S_sc/Q_c, X_L = p·X_C.
    """
    q = np.asarray(capacitor_kvar, dtype=float)
    p = float(detuning_percent) / 100.0
    with np.errstate(divide="ignore"):
        h = 1.0 / np.sqrt(q / float(short_circuit_kva) + p)
    return float(h) if h.ndim == 0 else h


def voltage_rise_percent(short_circuit_kva: float, capacitor_kvar: float) -> float:
    """Steady voltage rise at light load, ≈ 100 · Q_c / S_sc percent (IEEE Std 1036, common practice)."""
    return float(100.0 * capacitor_kvar / short_circuit_kva)


def near_harmonic(order: float, orders=HARMONIC_ORDERS, band: float = RESONANCE_BAND) -> int | None:
    """The harmonic order within ±band of ``order``, or None."""
    for n in orders:
        if abs(order - n) <= band * n:
            return n
    return None


# --------------------------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RuleResult:
    """One rule's verdict: ``pass``, ``caution`` or ``fail``, with its figure and limit."""

    rule: str
    status: str
    value: float | None
    limit: float | None
    message: str
    unit: str = ""
    checked: bool = True

    def to_dict(self) -> dict:
        return {"rule": self.rule, "status": self.status, "value": self.value, "limit": self.limit,
                "unit": self.unit, "message": self.message, "checked": self.checked}


@dataclass(frozen=True)
class ScreeningResult:
    """Findings for one design on one site."""

    short_circuit_kva: float | None
    resonance_order: float | None
    resonance_orders_by_stage: tuple[float, ...]
    resonance_near: int | None
    voltage_rise_percent: float | None
    capacitor_voltage_percent: float | None
    leading_intervals: int
    leading_kvarh_added: float
    leading_charge_increase: float | None
    passed: bool
    resonance_checked: bool
    warnings: tuple[str, ...] = field(default=())
    rules: tuple[RuleResult, ...] = field(default=())
    light_load_kvar: float | None = None
    harmonics: HarmonicStudy | None = field(default=None, repr=False, compare=False)

    @property
    def status(self) -> str:
        """The worst status of any rule."""
        return max((r.status for r in self.rules), key=STATUSES.index, default="pass")

    @property
    def failed_rules(self) -> tuple[RuleResult, ...]:
        return tuple(r for r in self.rules if r.status == "fail")

    def rule(self, name: str) -> RuleResult | None:
        return next((r for r in self.rules if r.rule == name), None)

    def to_dict(self) -> dict:
        return {
            "resonance_order": self.resonance_order,
            "voltage_rise_percent": self.voltage_rise_percent,
            "leading_intervals": self.leading_intervals,
            "short_circuit_kva": self.short_circuit_kva,
            "resonance_orders_by_stage": list(self.resonance_orders_by_stage),
            "resonance_near_harmonic": self.resonance_near,
            "capacitor_voltage_percent": self.capacitor_voltage_percent,
            "leading_kvarh_added": self.leading_kvarh_added,
            "leading_charge_increase": self.leading_charge_increase,
            "resonance_checked": self.resonance_checked,
            "passed": self.passed,
            "status": self.status,
            "light_load_kvar": self.light_load_kvar,
            "rules": [r.to_dict() for r in _failing_first(self.rules)],
        }


def _failing_first(rules) -> list[RuleResult]:
    return sorted(rules, key=lambda r: -STATUSES.index(r.status))


def _grade(value: float, caution: float, fail: float) -> str:
    if value > fail + 1e-9:
        return "fail"
    if value > caution + 1e-9:
        return "caution"
    return "pass"


# --------------------------------------------------------------------------------------------
# operating facts from the interval data
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Operation:
    """What the interval data say about a design in service (all optional).

    Attributes
    ----------
    kvar_net_before, kvar_net_after, output_kvar : numpy.ndarray
        Per interval: net kvar before and after, and the design's signed output.
    kw : numpy.ndarray
        Per interval active power (for the lagging check of absorbing designs).
    interval_minutes : int
    target_pf : float
    leading_charge_increase : float or None
        Increase of leading-energy charges over the audited period.
    saving : float or None
        The saving of the design over the same period before that increase is taken off
        (the charge is compared with it).
    light_load_kvar : float or None
        The site's net kvar at its light loads (``light_load_percentile`` of the interval
        kvar); computed from ``kvar_net_before`` when not given.
    """

    kvar_net_before: np.ndarray | None = None
    kvar_net_after: np.ndarray | None = None
    output_kvar: np.ndarray | None = None
    kw: np.ndarray | None = None
    interval_minutes: int | None = None
    target_pf: float | None = None
    leading_charge_increase: float | None = None
    saving: float | None = None
    light_load_kvar: float | None = None


# --------------------------------------------------------------------------------------------
# the rules
# --------------------------------------------------------------------------------------------
def rule_over_correction(bank: BankDesign, op: Operation, limits: ScreeningLimits
                         ) -> tuple[RuleResult, int, float]:
    """Capacitors: intervals driven leading, leading kvarh added, leading charge vs the saving.
    Absorbing designs: intervals driven lagging beyond the target PF. Returns the rule and the
    count of leading intervals and the leading kvarh the design adds."""
    if op.kvar_net_after is None:
        return (RuleResult("over_correction", "caution", None, limits.leading_share_fail_percent,
                           "not checked: no interval data", "%", checked=False), 0, 0.0)
    after = np.asarray(op.kvar_net_after, dtype=float)
    out = np.asarray(op.output_kvar, dtype=float) if op.output_kvar is not None else None
    n = max(after.size, 1)
    if not bank.is_capacitor:
        beyond = np.zeros(after.size, dtype=bool)
        if op.kw is not None and op.target_pf is not None:
            beyond = after > np.maximum(np.asarray(op.kw, dtype=float), 0.0) * tan_phi(op.target_pf) + 1e-9
            if op.kvar_net_before is not None:
                beyond &= after > np.asarray(op.kvar_net_before, dtype=float) + 1e-9
            if out is not None:
                beyond &= out < 0
        count = int(np.count_nonzero(beyond))
        share = 100.0 * count / n
        status = _grade(share, limits.leading_share_caution_percent, limits.leading_share_fail_percent)
        what = "the reactor" if bank.kind == "reactor" else "switching the capacitance off"
        msg = (f"{what} drives the site lagging beyond the target PF in {count} intervals "
               f"({share:.1f} %; fail above {limits.leading_share_fail_percent:g} %)")
        return RuleResult("over_correction", status, share, limits.leading_share_fail_percent, msg, "%"), 0, 0.0
    caused = after < 0
    if out is not None:
        caused &= out > 0
    if op.kvar_net_before is not None:
        added = np.maximum(-after, 0.0) - np.maximum(-np.asarray(op.kvar_net_before, dtype=float), 0.0)
    else:
        added = np.maximum(-after, 0.0)
    count = int(np.count_nonzero(caused))
    kvarh = float(np.sum(np.maximum(added, 0.0)) * op.interval_minutes / 60.0) if op.interval_minutes else 0.0
    share = 100.0 * count / n
    status = _grade(share, limits.leading_share_caution_percent, limits.leading_share_fail_percent)
    text = (f"the bank drives the site leading (over-correction) in {count} intervals ({share:.1f} %; "
            f"fail above {limits.leading_share_fail_percent:g} %), adding {kvarh:,.0f} leading kvarh")
    charge = op.leading_charge_increase
    if charge:
        text += f" and {charge:,.2f} of leading-energy charges"
        if op.saving is not None and op.saving > 0:
            charge_pct = 100.0 * charge / op.saving
            text += f" ({charge_pct:.0f} % of the saving; fail above {limits.leading_charge_fail_percent:g} %)"
            if charge_pct > limits.leading_charge_fail_percent:
                status = "fail"
        elif op.saving is not None and charge > 0:
            text += " (the design saves nothing to set them against)"
            status = "fail"
        if status == "pass":
            status = "caution"
    if count and bank.kind == "fixed":
        text += "; consider an automatic bank or a smaller fixed one"
    return RuleResult("over_correction", status, share, limits.leading_share_fail_percent, text, "%"), count, kvarh


def light_load_kvar(kvar_net: np.ndarray, limits: ScreeningLimits) -> float | None:
    """The site's net kvar at its light loads: the ``light_load_percentile`` of the intervals."""
    q = np.asarray(kvar_net, dtype=float)
    q = q[np.isfinite(q)]
    return float(np.percentile(q, limits.light_load_percentile)) if q.size else None


def rule_minimum_load(bank: BankDesign, op: Operation, limits: ScreeningLimits,
                      system_voltage_v: float | None) -> RuleResult:
    """The smallest switched quantity against the site's kvar at light load."""
    pct = f"{limits.light_load_percentile:g}th percentile"
    if bank.kind == "switch_off":
        return RuleResult("minimum_load", "pass", None, None,
                          "not applicable (no equipment is added)", "kvar")
    light = op.light_load_kvar
    if light is None and op.kvar_net_before is not None:
        light = light_load_kvar(op.kvar_net_before, limits)
    if light is None:
        return RuleResult("minimum_load", "caution", None, None,
                          "not checked: no interval data", "kvar", checked=False)
    smallest = min(bank.steps_kvar) * bank.output_factor(system_voltage_v)
    if bank.kind == "reactor":
        leading = max(-light, 0.0)
        status = "caution" if smallest > leading + 1e-9 else "pass"
        msg = (f"the smallest reactor step {smallest:,.1f} kvar "
               f"{'exceeds' if status != 'pass' else 'is within'} the leading kvar at the site's most "
               f"leading intervals ({leading:,.1f} kvar, {pct})")
        if status != "pass":
            msg += "; the controller will seldom switch it in — a smaller step follows the site better"
        return RuleResult("minimum_load", status, smallest, leading, msg, "kvar")
    limit = max(light, 0.0)
    what = "the fixed bank" if bank.kind == "fixed" else "the smallest step"
    if smallest <= limit + 1e-9:
        return RuleResult("minimum_load", "pass", smallest, limit,
                          f"{what} ({smallest:,.1f} kvar) is within the lagging kvar the "
                          f"site draws at light load ({limit:,.1f} kvar, {pct})", "kvar")
    if bank.kind == "fixed":
        return RuleResult("minimum_load", "fail", smallest, limit,
                          f"the fixed bank ({smallest:,.1f} kvar) is larger than the "
                          f"lagging kvar the site draws at light load ({limit:,.1f} kvar, {pct}): it "
                          "drives the site leading whenever the load is light; use an automatic bank "
                          "or a fixed one no larger than that", "kvar")
    return RuleResult("minimum_load", "caution", smallest, limit,
                      f"the smallest step ({smallest:,.1f} kvar) is larger than the lagging "
                      f"kvar at light load ({limit:,.1f} kvar, {pct}): at light load the bank stays off "
                      "and the PF is not corrected; smaller steps follow the load more closely", "kvar")


def _stage_capacitor_kvar(bank: BankDesign, system_voltage_v: float | None) -> np.ndarray:
    """The capacitor's own kvar at the system voltage of every stage total (zero excluded),
    before the reactor — the Q_c of the resonance formula."""
    factor = bank.output_factor(system_voltage_v)
    return bank.stage_totals_kvar()[1:] * (factor * (1.0 - bank.detuning_percent / 100.0))


def screened_orders(limits: ScreeningLimits, spectrum: Spectrum | None) -> tuple[dict[int, str], str]:
    """Orders the resonance rule looks at and the worst status a hit near each can give."""
    orders: dict[int, str] = {}
    if spectrum is not None and not spectrum.estimated:
        present = set(spectrum.present_orders(limits.harmonic_presence_percent))
        for h in limits.harmonic_orders:
            orders[h] = "fail" if h in present else "caution"
        for h in present:
            orders[h] = "fail"
        return orders, "orders present in the measured spectrum fail; screened orders it shows absent caution"
    for h in limits.harmonic_orders:
        orders[h] = "fail"
    if spectrum is not None:
        for h in spectrum.present_orders(limits.harmonic_presence_percent):
            orders[h] = "fail"
    return orders, ""


def resonance_hits(by_stage: np.ndarray, orders: dict[int, str], limits: ScreeningLimits
                   ) -> list[tuple[str, float, int, float]]:
    """(status, stage order, harmonic, relative distance) for every stage near a screened order."""
    hits = []
    for h_r in np.atleast_1d(by_stage):
        best = None
        for n, worst in orders.items():
            d = abs(h_r - n) / n
            if d <= limits.resonance_fail_percent / 100.0 + 1e-12:
                status = worst
            elif d <= limits.resonance_caution_percent / 100.0 + 1e-12:
                status = "caution"
            else:
                continue
            cand = (status, float(h_r), n, d)
            if best is None or (STATUSES.index(status), -d) > (STATUSES.index(best[0]), -best[3]):
                best = cand
        if best is not None:
            hits.append(best)
    return hits


def rule_resonance(bank: BankDesign, s_sc: float | None, reason: str | None, limits: ScreeningLimits,
                   spectrum: Spectrum | None, system_voltage_v: float | None
                   ) -> tuple[RuleResult, tuple[float, ...], float | None, int | None]:
    """Parallel resonance of every stage against the screened orders, graded."""
    if not bank.is_capacitor:
        msg = ("a shunt reactor adds no parallel resonance with the supply" if bank.kind == "reactor"
               else "taking capacitance out moves the site's parallel resonance up, away "
                    "from the low orders")
        return RuleResult("resonance", "pass", None, None, msg, "% from harmonic"), (), None, None
    if s_sc is None:
        return (RuleResult("resonance", "caution", None, None, reason, "% from harmonic", checked=False),
                (), None, None)
    by_stage = np.atleast_1d(parallel_resonance_order(s_sc, _stage_capacitor_kvar(bank, system_voltage_v),
                                                      bank.detuning_percent))
    largest = float(by_stage[-1])
    orders, note = screened_orders(limits, spectrum)
    hits = resonance_hits(by_stage, orders, limits)
    if not hits:
        nearest = min(((abs(h - n) / n, h, n) for h in by_stage for n in orders), default=None)
        msg = (f"every stage resonates at least ±{limits.resonance_caution_percent:g} % away from "
               f"the orders screened ({', '.join(str(n) for n in sorted(orders))})")
        if bank.detuned:
            msg += (f"; detuned {bank.detuning_percent:g} %, tuned to {tuning_order(bank.detuning_percent):.2f},"
                    f" the bank resonates at {by_stage.max():.2f} at most")
        value = 100.0 * nearest[0] if nearest else None
        return (RuleResult("resonance", "pass", value, limits.resonance_caution_percent, msg,
                           "% from harmonic"), tuple(float(h) for h in by_stage), largest, None)
    status = max((h[0] for h in hits), key=STATUSES.index)
    worst = [h for h in hits if h[0] == status]
    worst.sort(key=lambda t: t[3])
    near_orders = sorted({h[2] for h in worst})
    stage_orders = ", ".join(f"{h[1]:.2f}" for h in sorted(worst, key=lambda t: t[1]))
    band = limits.resonance_fail_percent if status == "fail" else limits.resonance_caution_percent
    msg = (f"parallel resonance order {stage_orders} is within ±{band:g} % of harmonic "
           f"{', '.join(str(n) for n in near_orders)}")
    if status == "fail":
        msg += (": with drives or rectifiers on site this can amplify harmonics; use a detuned bank "
                f"(series reactor, e.g. 7 %, tuned to {tuning_order(7.0):.2f}) and measure harmonics "
                "first (IEEE Std 1036)")
    else:
        msg += ": close to a harmonic order — measure the site's harmonics before choosing a plain bank"
    if note:
        msg += f" ({note})"
    return (RuleResult("resonance", status, 100.0 * worst[0][3], band, msg, "% from harmonic"),
            tuple(float(h) for h in by_stage), largest, near_orders[0])


def rule_voltage_change(bank: BankDesign, s_sc: float | None, reason: str | None,
                        limits: ScreeningLimits, system_voltage_v: float | None
                        ) -> tuple[RuleResult, float | None]:
    """Voltage rise of a capacitor bank, drop of a reactor (≈ 100·Q/S_sc %)."""
    name = "voltage_rise" if bank.is_capacitor else "voltage_drop"
    if s_sc is None:
        return RuleResult(name, "caution", None, limits.voltage_change_fail_percent, reason, "%",
                          checked=False), None
    q = bank.total_kvar * bank.output_factor(system_voltage_v)
    change = voltage_rise_percent(s_sc, q)
    status = _grade(change, limits.voltage_change_caution_percent, limits.voltage_change_fail_percent)
    if bank.is_capacitor:
        msg = f"voltage rise at light load ≈ {change:.1f} % (100·Qc/Ssc)"
        if status == "fail":
            msg += (f" exceeds {limits.voltage_change_fail_percent:g} %: switch the bank with the load "
                    "or reduce its size")
    else:
        what = "the reactor" if bank.kind == "reactor" else "taking the capacitance out"
        msg = f"voltage drop with {what} in ≈ {change:.1f} % (100·Q/Ssc)"
        if status == "fail":
            msg += f" exceeds {limits.voltage_change_fail_percent:g} %: use smaller steps"
    if status != "fail":
        msg += f" (caution above {limits.voltage_change_caution_percent:g} %, fail above " \
               f"{limits.voltage_change_fail_percent:g} %)"
    return RuleResult(name, status, change, limits.voltage_change_fail_percent, msg, "%"), change


def fundamental_duty(bank: BankDesign, system_voltage_v: float | None, rise_percent: float = 0.0) -> float:
    """Capacitor rms voltage at the fundamental in percent of rating: system voltage raised by
    the light-load rise and the reactor, 1/(1 − p) (IEEE Std 18 / common practice)."""
    base = (system_voltage_v / bank.capacitor_rated_voltage_v
            if bank.capacitor_rated_voltage_v is not None and system_voltage_v is not None else 1.0)
    return 100.0 * base * (1.0 + rise_percent / 100.0) / (1.0 - bank.detuning_percent / 100.0)


def rule_capacitor_duty(bank: BankDesign, limits: ScreeningLimits, system_voltage_v: float | None,
                        harmonics: HarmonicStudy | None, rise_percent: float | None
                        ) -> tuple[RuleResult, float | None]:
    """rms and peak voltage, rms current and kvar against IEEE Std 18 limits (worst stage)."""
    if not bank.is_capacitor:
        return RuleResult("capacitor_duty", "pass", None, None,
                          "not applicable (no capacitor in this design)", "%"), None
    if bank.capacitor_rated_voltage_v is not None and system_voltage_v is None:
        return RuleResult("capacitor_duty", "caution", None, limits.capacitor_v_rms_percent,
                          "could not check the capacitor voltage: the site's nominal_voltage_v is not known",
                          "%", checked=False), None
    if harmonics is not None:
        duty = {"rms voltage": (float(np.max(harmonics.v_rms_pct)), limits.capacitor_v_rms_percent),
                "peak voltage": (float(np.max(harmonics.v_peak_pct)), limits.capacitor_v_peak_percent),
                "rms current": (float(np.max(harmonics.i_rms_pct)), limits.capacitor_i_rms_percent),
                "kvar": (float(np.max(harmonics.kvar_pct)), limits.capacitor_kvar_percent)}
        scope = ("harmonics included" if harmonics.source else "fundamental only; harmonics not measured")
    else:
        v = fundamental_duty(bank, system_voltage_v, rise_percent or 0.0)
        duty = {"rms voltage": (v, limits.capacitor_v_rms_percent),
                "peak voltage": (v, limits.capacitor_v_peak_percent),
                "rms current": (v, limits.capacitor_i_rms_percent),
                "kvar": (v * v / 100.0, limits.capacitor_kvar_percent)}
        scope = "fundamental only; harmonics not measured"
    status = "pass"
    for value, limit in duty.values():
        s = _grade(value, limit - limits.duty_caution_margin_percent, limit)
        status = max(status, s, key=STATUSES.index)
    worst_name = max(duty, key=lambda k: duty[k][0] / duty[k][1])
    value, limit = duty[worst_name]
    parts = ", ".join(f"{k} {v:.0f} % (limit {lim:g})" for k, (v, lim) in duty.items())
    msg = f"capacitor duty in % of rating, reactor and voltage rise included, {scope}: {parts} (IEEE Std 18)"
    if status == "fail":
        msg = (f"capacitor {worst_name} ≈ {value:.0f} % of its rating in service exceeds {limit:g} %: "
               "specify capacitors of a higher rated voltage" +
               (" or a detuned bank" if not bank.detuned else "") + f" — {msg}")
    return (RuleResult("capacitor_duty", status, value, limit, msg, "%"),
            duty["rms voltage"][0])


def rule_harmonic_distortion(bank: BankDesign, harmonics: HarmonicStudy | None, limits: ScreeningLimits,
                             spectrum: Spectrum | None, s_sc: float | None) -> RuleResult:
    """THD and individual harmonic voltage at the bus with the design, IEEE Std 519-2014."""
    if spectrum is None:
        return RuleResult("harmonic_distortion", "caution", None, None,
                          "harmonic distortion not assessed: no measured spectrum and no estimate of the "
                          "share of drives", "%", checked=False)
    if not bank.is_capacitor:
        return RuleResult("harmonic_distortion", "pass", None, None,
                          "not made worse by this design (no capacitance added)", "%")
    if harmonics is None or s_sc is None:
        return RuleResult("harmonic_distortion", "caution", None, None,
                          "harmonic distortion not assessed: the short-circuit power or the bus voltage "
                          "is not known", "%", checked=False)
    thd_limit = limits.thd_limit_percent or harmonics.thd_limit_pct
    ind_limit = limits.individual_limit_percent or harmonics.individual_limit_pct
    k = int(np.argmax(harmonics.thd_with_pct)) if harmonics.thd_with_pct.size else 0
    thd_with = float(harmonics.thd_with_pct[k])
    thd_without = harmonics.thd_without_pct
    ind_with = float(np.max(harmonics.v_with_pct)) if harmonics.v_with_pct.size else 0.0
    ind_without = float(np.max(harmonics.v_without_pct)) if harmonics.v_without_pct.size else 0.0
    label = "estimated" if spectrum.estimated else "measured"
    base = (f"voltage THD at the bus {thd_without:.1f} % without, {thd_with:.1f} % with the bank "
            f"(limit {thd_limit:g} %); largest individual harmonic {ind_without:.1f} % → {ind_with:.1f} % "
            f"(limit {ind_limit:g} %), IEEE Std 519-2014, {label} spectrum")
    breach = thd_with > thd_limit + 1e-9 or ind_with > ind_limit + 1e-9
    worse = thd_with > thd_without + 0.05 or ind_with > ind_without + 0.05
    if breach and worse:
        return RuleResult("harmonic_distortion", "fail", thd_with if thd_with > thd_limit else ind_with,
                          thd_limit if thd_with > thd_limit else ind_limit,
                          f"the bank pushes the bus past its limit — {base}; use a "
                          "detuned bank", "%")
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(harmonics.v_without_pct[None, :] > 1e-9,
                         harmonics.v_with_pct / np.maximum(harmonics.v_without_pct[None, :], 1e-12), 1.0)
    amp = float(np.max(ratio)) if ratio.size else 1.0
    if breach:
        return RuleResult("harmonic_distortion", "caution", thd_with, thd_limit,
                          f"the site exceeds the limit without the bank and the bank "
                          f"does not make it worse — {base}", "%")
    if amp > limits.amplification_caution:
        return RuleResult("harmonic_distortion", "caution", thd_with, thd_limit,
                          f"within limits, but the bank amplifies one order {amp:.1f} "
                          f"times — {base}", "%")
    return RuleResult("harmonic_distortion", "pass", thd_with, thd_limit, f"{base}", "%")


# --------------------------------------------------------------------------------------------
# screening: the rules in order
# --------------------------------------------------------------------------------------------
def harmonic_study_of(bank: BankDesign, site: SiteElectrical, s_sc: float | None,
                      spectrum: Spectrum | None, load_kw: float | None) -> HarmonicStudy | None:
    """The harmonic study of a capacitor bank's stages (None without S_sc or bus voltage)."""
    if not bank.is_capacitor or s_sc is None or site.nominal_voltage_v is None:
        return None
    v = float(site.nominal_voltage_v)
    rated_v = bank.capacitor_rated_voltage_v or v
    stages = bank.stage_totals_kvar()[1:]
    eff = stages * bank.output_factor(v)
    return study(voltage_v=v, short_circuit_kva=s_sc, stage_rated_kvar=stages, rated_voltage_v=rated_v,
                 detuning_percent=bank.detuning_percent, spectrum=spectrum, load_kw=load_kw,
                 rise_percent=100.0 * eff / s_sc)


def screen(bank: BankDesign, site: SiteElectrical, *, kvar_net_before: np.ndarray | None = None,
           kvar_net_after: np.ndarray | None = None, output_kvar: np.ndarray | None = None,
           interval_minutes: int | None = None, leading_charge_increase: float | None = None,
           voltage_rise_limit_percent: float | None = None, limits: ScreeningLimits | None = None,
           operation: Operation | None = None, spectrum: Spectrum | None = None,
           load_kw: float | None = None) -> ScreeningResult:
    """Screen a design: every rule of the module docstring, graded.

    Parameters
    ----------
    bank, site
        The design and the site's electrical data.
    kvar_net_before, kvar_net_after, output_kvar, interval_minutes, leading_charge_increase
        Shorthand for the matching fields of ``operation``.
    voltage_rise_limit_percent : float, optional
        Shorthand for ``limits.voltage_change_fail_percent``.
    limits : ScreeningLimits
        The settings (defaults in the module docstring).
    operation : Operation
        The interval facts of the design in service.
    spectrum : Spectrum, optional
        Measured or estimated harmonic currents; enables the harmonic voltages, THD and the
        harmonic part of the capacitor duty.
    load_kw : float, optional
        Load that damps the frequency scan when the spectrum carries none.

    Returns
    -------
    ScreeningResult
        ``passed`` is False when any rule fails. Missing site data cautions and says, as a
        warning, what could not be checked.

    References
    ----------
    .. [1] IEEE Std 1036-2010 (resonance, voltage rise); IEEE Std 519-2014 (distortion limits);
       IEEE Std 18 (capacitor duty).
    """
    limits = limits or ScreeningLimits()
    if voltage_rise_limit_percent is not None:
        limits = ScreeningLimits.from_mapping(
            {"voltage_change_fail_percent": voltage_rise_limit_percent,
             "voltage_change_caution_percent": min(limits.voltage_change_caution_percent,
                                                   voltage_rise_limit_percent)}, base=limits)
    op = operation or Operation()
    if kvar_net_after is not None or kvar_net_before is not None:
        op = Operation(kvar_net_before=kvar_net_before, kvar_net_after=kvar_net_after,
                       output_kvar=output_kvar, kw=op.kw, interval_minutes=interval_minutes,
                       target_pf=op.target_pf, leading_charge_increase=leading_charge_increase,
                       saving=op.saving, light_load_kvar=op.light_load_kvar)
    elif leading_charge_increase is not None:
        op = Operation(**{**op.__dict__, "leading_charge_increase": leading_charge_increase})
    v = site.nominal_voltage_v
    s_sc, reason = site.short_circuit()
    over, leading_intervals, leading_kvarh = rule_over_correction(bank, op, limits)
    minimum = rule_minimum_load(bank, op, limits, v)
    resonance, by_stage, largest, near = rule_resonance(bank, s_sc, reason, limits, spectrum, v)
    voltage, change = rule_voltage_change(bank, s_sc, reason, limits, v)
    harmonics = harmonic_study_of(bank, site, s_sc, spectrum, load_kw)
    duty, cap_v = rule_capacitor_duty(bank, limits, v, harmonics, change if bank.is_capacitor else None)
    distortion = rule_harmonic_distortion(bank, harmonics, limits, spectrum, s_sc)
    rules = (over, minimum, resonance, voltage, duty, distortion)
    warnings: list[str] = []
    for r in _failing_first(rules):
        if r.status != "pass" and r.message not in warnings:
            warnings.append(r.message)
    light = op.light_load_kvar
    if light is None and op.kvar_net_before is not None:
        light = light_load_kvar(op.kvar_net_before, limits)
    return ScreeningResult(
        short_circuit_kva=s_sc,
        resonance_order=largest,
        resonance_orders_by_stage=by_stage,
        resonance_near=near if resonance.status == "fail" else None,
        voltage_rise_percent=change,
        capacitor_voltage_percent=cap_v,
        leading_intervals=leading_intervals,
        leading_kvarh_added=leading_kvarh,
        leading_charge_increase=op.leading_charge_increase,
        passed=not any(r.status == "fail" for r in rules),
        resonance_checked=s_sc is not None,
        warnings=tuple(warnings),
        rules=rules,
        light_load_kvar=light,
        harmonics=harmonics,
    )
