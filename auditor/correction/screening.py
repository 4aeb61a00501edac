"""Screening of a proposed bank: resonance, voltage rise, capacitor voltage, over-correction.

These are cautions, never silent: each finding becomes a warning text beside the result, and
every output that recommends equipment carries :data:`CAUTIONS`. Screening estimates from
nameplate data; it replaces neither a site survey nor a harmonic measurement.

References
----------
.. [1] IEEE Std 1036-2010, *Guide for the Application of Shunt Power Capacitors*: parallel
   resonance h_r = √(S_sc / Q_c), voltage rise ΔU % ≈ 100 · Q_c / S_sc (common practice).
.. [2] IEEE Std 519-2014: the characteristic harmonics 5, 7, 11, 13 of six-pulse converters.
.. [3] IEEE Std 18 / IEC 60831-1: continuous operation up to about 110 % of rated voltage
   (from memory).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from auditor.correction.banks import BankDesign, tuning_order
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
#: Resonance within ±10 % of a harmonic order is flagged — common practice.
RESONANCE_BAND = 0.10
#: Voltage rise above this at light load is flagged — common practice, from memory.
VOLTAGE_RISE_LIMIT_PERCENT = 3.0
#: Continuous capacitor voltage limit, percent of rated — IEEE Std 18 / IEC 60831-1, from memory.
CAPACITOR_VOLTAGE_LIMIT_PERCENT = 110.0


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
    order 1/√p.

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


@dataclass(frozen=True)
class ScreeningResult:
    """Findings for one bank on one site."""

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
        }


def screen(bank: BankDesign, site: SiteElectrical, *, kvar_net_before: np.ndarray | None = None,
           kvar_net_after: np.ndarray | None = None, output_kvar: np.ndarray | None = None,
           interval_minutes: int | None = None, leading_charge_increase: float | None = None,
           voltage_rise_limit_percent: float = VOLTAGE_RISE_LIMIT_PERCENT) -> ScreeningResult:
    """Screen a bank: resonance at every stage total, voltage rise, capacitor voltage, leading.

    Parameters
    ----------
    bank, site
        The design and the site's electrical data.
    kvar_net_before, kvar_net_after, output_kvar : numpy.ndarray, optional
        Per-interval net kvar before/after and the bank's effective output, to count the
        intervals the bank drives leading.
    interval_minutes : int, optional
        To turn leading kvar into kvarh.
    leading_charge_increase : float, optional
        Increase of leading-energy charges over the audited period (from the tariff runs).

    Returns
    -------
    ScreeningResult
        ``passed`` is False on a resonance near 5, 7, 11 or 13, a voltage rise above the limit,
        or a capacitor voltage above 110 % of rating. Missing site data does not fail the
        screen but says, as a warning, what could not be checked.

    References
    ----------
    .. [1] IEEE Std 1036-2010 (resonance, voltage rise); IEEE Std 519-2014 (harmonic orders);
       IEEE Std 18 / IEC 60831-1 (110 % voltage, from memory).
    """
    warnings: list[str] = []
    passed = True
    s_sc, reason = site.short_circuit()
    factor = bank.output_factor(site.nominal_voltage_v)
    total_eff = bank.total_kvar * factor
    # Rated kvar in the resonance formula is the capacitor's own reactance (before the
    # reactor); the stages an automatic bank can be at all matter, not only the full bank.
    stage_rated = bank.stage_totals_kvar()[1:] * (factor * (1.0 - bank.detuning_percent / 100.0))
    resonance = None
    by_stage: tuple[float, ...] = ()
    near = None
    rise = None
    if s_sc is None:
        warnings.append(reason)
    else:
        by_stage_arr = np.atleast_1d(parallel_resonance_order(s_sc, stage_rated, bank.detuning_percent))
        by_stage = tuple(float(h) for h in by_stage_arr)
        resonance = float(parallel_resonance_order(s_sc, stage_rated[-1], bank.detuning_percent))
        hits = sorted({(n, h) for h in by_stage if (n := near_harmonic(h)) is not None}, key=lambda t: t[1])
        if hits:
            passed = False
            near = hits[0][0]
            orders = ", ".join(f"{h:.2f}" for _, h in hits)
            warnings.append(
                f"parallel resonance order {orders} is within ±{RESONANCE_BAND:.0%} of harmonic "
                f"{', '.join(str(n) for n in sorted({n for n, _ in hits}))}: with drives or rectifiers "
                "on site this can amplify harmonics; use a detuned bank (series reactor, e.g. 7 %, "
                f"tuned to {tuning_order(7.0):.2f}) and measure harmonics first (IEEE Std 1036)"
            )
        rise = voltage_rise_percent(s_sc, total_eff)
        if rise > voltage_rise_limit_percent:
            passed = False
            warnings.append(
                f"voltage rise at light load ≈ {rise:.1f} % (100·Qc/Ssc) exceeds "
                f"{voltage_rise_limit_percent:g} %: switch the bank with the load or reduce its size"
            )
    # capacitor voltage: system voltage × (1 + rise) raised by the reactor, relative to rating
    cap_v = None
    if bank.capacitor_rated_voltage_v is not None and site.nominal_voltage_v is None:
        warnings.append(
            "could not check the capacitor voltage: the site's nominal_voltage_v is not known"
        )
    else:
        # no rated voltage given: the capacitors are taken as rated at the system voltage
        base = (site.nominal_voltage_v / bank.capacitor_rated_voltage_v
                if bank.capacitor_rated_voltage_v is not None else 1.0)
        cap_v = 100.0 * base * (1.0 + (rise or 0.0) / 100.0) / (1.0 - bank.detuning_percent / 100.0)
        if cap_v > CAPACITOR_VOLTAGE_LIMIT_PERCENT + 1e-9:
            passed = False
            warnings.append(
                f"capacitor voltage ≈ {cap_v:.0f} % of its rating in service (reactor and voltage "
                f"rise included) exceeds {CAPACITOR_VOLTAGE_LIMIT_PERCENT:g} %: specify capacitors "
                "of a higher rated voltage (IEEE Std 18 / IEC 60831-1, from memory)"
            )
    leading_intervals = 0
    leading_kvarh = 0.0
    if kvar_net_after is not None:
        after = np.asarray(kvar_net_after, dtype=float)
        caused = after < 0
        if output_kvar is not None:
            caused &= np.asarray(output_kvar, dtype=float) > 0
        if kvar_net_before is not None:
            before = np.asarray(kvar_net_before, dtype=float)
            added = np.maximum(-after, 0.0) - np.maximum(-before, 0.0)
        else:
            added = np.maximum(-after, 0.0)
        leading_intervals = int(np.count_nonzero(caused))
        if interval_minutes:
            leading_kvarh = float(np.sum(np.maximum(added, 0.0)) * interval_minutes / 60.0)
        if leading_intervals:
            share = leading_intervals / after.size
            text = (f"over-correction: the bank drives the site leading in {leading_intervals} "
                    f"intervals ({share:.1%})")
            if leading_charge_increase:
                text += f", adding {leading_charge_increase:,.2f} of leading-energy charges"
            if bank.kind == "fixed":
                text += "; consider an automatic bank or a smaller fixed one"
            warnings.append(text)
    return ScreeningResult(
        short_circuit_kva=s_sc,
        resonance_order=resonance,
        resonance_orders_by_stage=by_stage,
        resonance_near=near,
        voltage_rise_percent=rise,
        capacitor_voltage_percent=cap_v,
        leading_intervals=leading_intervals,
        leading_kvarh_added=leading_kvarh,
        leading_charge_increase=leading_charge_increase,
        passed=passed,
        resonance_checked=s_sc is not None,
        warnings=tuple(warnings),
    )
