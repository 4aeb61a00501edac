"""Correction equipment models and the step controller, applied to interval data.

Four kinds of design, one model (:class:`BankDesign`):

* ``fixed`` — a capacitor bank always energised;
* ``automatic`` — a capacitor bank of switched steps;
* ``reactor`` — a switched shunt reactor for a site that runs leading (it absorbs kvar);
* ``switch_off`` — existing capacitance on the site taken out of service while the site runs
  leading (a contactor on the existing capacitor, driven by a var relay or a timer).

A design's *signed* output at the bus is positive for capacitive kvar (it supplies what the
load absorbs) and negative for inductive kvar (a reactor, or capacitance switched out). Running
for an interval of m minutes it removes output · m / 60 kvarh from the net reactive energy; a
net that turns negative is leading energy: ``kvarh_lag_new = max(net, 0)``,
``kvarh_lead_new = max(-net, 0)``.

Controller rule of an automatic capacitor bank, per interval: switch in the smallest stage
total that reaches the target PF without making Q_net negative (or more leading than an
allowed leading PF); if none reaches it, the largest stage total that does not over-correct.
A reactor (and capacitance switched out) follows the mirror rule: the smallest stage that
cancels the leading kvar without making the site lag beyond the target PF; else the largest
stage that stays within it. Real controllers add switching delays and hysteresis that
15-minute averages cannot show.

References
----------
.. [1] IEEE Std 1036-2010, *Guide for the Application of Shunt Power Capacitors*: sizing,
   switched banks, detuning.
.. [2] IEC 60831-1 / IEEE Std 18: capacitor output scales with the square of the applied
   voltage, Q = Q_rated (U / U_rated)^2 (from memory).
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Literal

import numpy as np

from auditor.correction.sizing import check_pf, tan_phi
from auditor.errors import UsageError

#: Series-reactor ratings in common use (percent of capacitor reactance) — common practice.
DETUNING_PERCENTS = (5.67, 7.0, 14.0)

MAX_STEPS = 24  # beyond this a "step list" is a typing mistake rather than a bank

_COUNT_TIMES_SIZE = re.compile(r"^\s*(\d+)\s*[x×X*]\s*([0-9]*\.?[0-9]+)\s*$")


def parse_steps(text: str) -> tuple[float, ...]:
    """Parse a step specification: ``"6x50"``, ``"25,50,50,100"`` or a mix ``"2x25,2x50"``.

    Raises
    ------
    UsageError
        Naming the part that is wrong and what is expected.
    """
    if not isinstance(text, str) or not text.strip():
        raise UsageError('bank steps: expected a list such as "6x50" or "25,50,50,100", got nothing')
    steps: list[float] = []
    for position, part in enumerate(text.split(","), start=1):
        part = part.strip()
        if not part:
            raise UsageError(f"bank steps {text!r}: item {position} is empty (two commas in a row?)")
        match = _COUNT_TIMES_SIZE.match(part)
        if match:
            count, size = int(match.group(1)), float(match.group(2))
            if count < 1:
                raise UsageError(f"bank steps {text!r}: item {position} {part!r} has a step count of 0")
        else:
            try:
                size = float(part)
            except ValueError:
                raise UsageError(
                    f"bank steps {text!r}: item {position} {part!r} is not a kvar number or "
                    f'COUNTxKVAR (e.g. "6x50")'
                ) from None
            count = 1
        if not math.isfinite(size) or size <= 0:
            raise UsageError(f"bank steps {text!r}: item {position} {part!r}: step kvar must be > 0")
        steps.extend([size] * count)
        if len(steps) > MAX_STEPS:
            raise UsageError(f"bank steps {text!r}: more than {MAX_STEPS} steps")
    return tuple(steps)


def tuning_order(detuning_percent: float) -> float:
    """Harmonic order a series reactor of p % tunes the capacitor branch to: h = 1 / √p.

    References
    ----------
    .. [1] IEEE Std 1036-2010 (detuned / filter banks): series LC resonance at
       h = √(X_C / X_L) = 1 / √p — common practice.
    """
    p = float(detuning_percent) / 100.0
    if p <= 0:
        return math.inf
    return 1.0 / math.sqrt(p)


def output_factor(detuning_percent: float = 0.0, system_voltage_v: float | None = None,
                  capacitor_rated_voltage_v: float | None = None) -> float:
    """Effective output at system voltage per kvar of capacitor rating.

    Q_eff = Q_rated · (U / U_cap_rated)² / (1 − p): the voltage factor applies when both
    voltages are known; the series reactor raises the capacitor voltage by 1 / (1 − p).

    References
    ----------
    .. [1] IEC 60831-1 / IEEE Std 18, Q ∝ U² (from memory).
    .. [2] Detuned-bank output Q_rated (U/U_cap)² / (1 − p) — common practice, from memory.
    """
    p = float(detuning_percent) / 100.0
    factor = 1.0 / (1.0 - p)
    if system_voltage_v is not None and capacitor_rated_voltage_v is not None:
        factor *= (float(system_voltage_v) / float(capacitor_rated_voltage_v)) ** 2
    return factor


#: Rated voltages capacitor units are commonly made for, V (from memory; check a maker's range).
STANDARD_CAPACITOR_VOLTAGES_V = (230, 400, 415, 440, 460, 480, 525, 550, 600, 690, 720, 800, 1000)


def standard_capacitor_voltage(required_v: float) -> float:
    """The smallest standard capacitor rating at or above ``required_v``.

    Low voltage: the ratings of :data:`STANDARD_CAPACITOR_VOLTAGES_V` (from memory). Above
    1 kV, rounded up to the next 100 V (medium-voltage units are made to order; from memory).
    """
    required_v = float(required_v)
    if not math.isfinite(required_v) or required_v <= 0:
        raise UsageError(f"a capacitor voltage must be a positive number of volts, got {required_v!r}")
    for rating in STANDARD_CAPACITOR_VOLTAGES_V:
        if rating >= required_v - 1e-9:
            return float(rating)
    return float(math.ceil(required_v / 100.0 - 1e-12) * 100.0)


def stage_totals(steps_kvar: tuple[float, ...]) -> np.ndarray:
    """Every distinct total a stepped bank can switch in (all subset sums, 0 included), sorted."""
    totals = np.zeros(1)
    for step in steps_kvar:
        # round to suppress float noise that would make 25+50 and 75 look distinct
        totals = np.unique(np.round(np.concatenate([totals, totals + step]), 9))
    return totals


#: Kinds of design: capacitor banks supply kvar, the other two absorb it.
CAPACITOR_KINDS = ("fixed", "automatic")
ABSORBING_KINDS = ("reactor", "switch_off")
KINDS = CAPACITOR_KINDS + ABSORBING_KINDS


@dataclass(frozen=True)
class BankDesign:
    """A correction design: a capacitor bank (fixed or automatic), a switched shunt reactor, or
    existing capacitance switched out while the site runs leading.

    Parameters
    ----------
    kind : {"fixed", "automatic", "reactor", "switch_off"}
    steps_kvar : tuple of float
        Rated kvar of each step at the capacitor's rated voltage (one item for a fixed bank);
        for a reactor its rated kvar at the system voltage; for ``switch_off`` the existing
        capacitance taken out, kvar at the system voltage.
    detuning_percent : float
        Series reactor, 0 for a plain bank, else one of 5.67, 7, 14 (capacitor banks only).
    capacitor_rated_voltage_v : float or None
        Rated voltage of the capacitors; with the site's nominal voltage it scales the
        output by (U / U_rated)². None: rated at the system voltage.
    """

    kind: Literal["fixed", "automatic", "reactor", "switch_off"]
    steps_kvar: tuple[float, ...]
    detuning_percent: float = 0.0
    capacitor_rated_voltage_v: float | None = None

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise UsageError(f"design kind must be one of {', '.join(KINDS)}, got {self.kind!r}")
        steps = tuple(float(s) for s in self.steps_kvar)
        if not steps or any(not math.isfinite(s) or s <= 0 for s in steps):
            raise UsageError(f"bank steps must be positive kvar values, got {self.steps_kvar!r}")
        if len(steps) > MAX_STEPS:
            raise UsageError(f"a bank has at most {MAX_STEPS} steps, got {len(steps)}")
        if self.kind in ("fixed", "switch_off") and len(steps) != 1:
            raise UsageError(f"a {self.kind.replace('_', ' ')} design has exactly one step (its total kvar)")
        if self.kind in ABSORBING_KINDS and (self.detuning_percent or self.capacitor_rated_voltage_v):
            raise UsageError(f"a {self.kind.replace('_', ' ')} design takes no detuning reactor and "
                             "no capacitor voltage")
        object.__setattr__(self, "steps_kvar", steps)
        p = float(self.detuning_percent)
        if p != 0.0 and not any(abs(p - d) < 1e-9 for d in DETUNING_PERCENTS):
            raise UsageError(
                f"detuning must be 0 (none) or one of {', '.join(f'{d:g}' for d in DETUNING_PERCENTS)} %, "
                f"got {self.detuning_percent!r}"
            )
        object.__setattr__(self, "detuning_percent", p)
        if self.capacitor_rated_voltage_v is not None and not self.capacitor_rated_voltage_v > 0:
            raise UsageError(
                f"capacitor_rated_voltage_v must be > 0 V, got {self.capacitor_rated_voltage_v!r}"
            )

    # constructors -------------------------------------------------------------------------
    @classmethod
    def fixed(cls, kvar: float, detuning_percent: float = 0.0,
              capacitor_rated_voltage_v: float | None = None) -> BankDesign:
        if not isinstance(kvar, int | float | np.number) or not kvar > 0:
            raise UsageError(f"fixed bank kvar must be > 0, got {kvar!r}")
        return cls("fixed", (float(kvar),), detuning_percent, capacitor_rated_voltage_v)

    @classmethod
    def automatic(cls, steps: str | tuple[float, ...] | list[float], detuning_percent: float = 0.0,
                  capacitor_rated_voltage_v: float | None = None) -> BankDesign:
        parsed = parse_steps(steps) if isinstance(steps, str) else tuple(steps)
        return cls("automatic", parsed, detuning_percent, capacitor_rated_voltage_v)

    @classmethod
    def reactor(cls, steps: float | str | tuple[float, ...]) -> BankDesign:
        """A switched shunt reactor: one step of KVAR, or steps such as ``"2x10"``."""
        if isinstance(steps, str):
            parsed = parse_steps(steps)
        elif isinstance(steps, tuple | list):
            parsed = tuple(steps)
        else:
            if not isinstance(steps, int | float | np.number) or not steps > 0:
                raise UsageError(f"reactor kvar must be > 0, got {steps!r}")
            parsed = (float(steps),)
        return cls("reactor", parsed)

    @classmethod
    def switch_off(cls, kvar: float) -> BankDesign:
        """Existing capacitance of ``kvar`` taken out of service while the site runs leading."""
        if not isinstance(kvar, int | float | np.number) or not kvar > 0:
            raise UsageError(f"the capacitance to switch off must be > 0 kvar, got {kvar!r}")
        return cls("switch_off", (float(kvar),))

    # derived figures ----------------------------------------------------------------------
    @property
    def total_kvar(self) -> float:
        return float(sum(self.steps_kvar))

    @property
    def detuned(self) -> bool:
        return self.detuning_percent > 0

    @property
    def is_capacitor(self) -> bool:
        """A capacitor bank to buy (fixed or automatic), as opposed to a leading-site remedy."""
        return self.kind in CAPACITOR_KINDS

    @property
    def switched(self) -> bool:
        """Follows the load through a controller (everything but a fixed bank)."""
        return self.kind != "fixed"

    @property
    def sign(self) -> float:
        """+1 for capacitive output, −1 for absorbing designs (reactor, capacitance out)."""
        return 1.0 if self.is_capacitor else -1.0

    @property
    def family(self) -> str:
        """The family of designs the optimiser reports on: kind, and plain or detuned."""
        if not self.is_capacitor:
            return self.kind
        return f"{self.kind}, {'detuned' if self.detuned else 'plain'}"

    @property
    def label(self) -> str:
        if self.kind == "switch_off":
            return f"switch {self.total_kvar:g} kvar of existing capacitance off while leading"
        if self.kind == "reactor":
            if len(self.steps_kvar) == 1:
                return f"shunt reactor {self.total_kvar:g} kvar, switched"
            sizes = set(self.steps_kvar)
            steps = (f"{len(self.steps_kvar)}x{self.steps_kvar[0]:.4g}" if len(sizes) == 1
                     else ",".join(f"{s:.4g}" for s in self.steps_kvar))
            return f"shunt reactor {steps} kvar, switched"
        if self.kind == "fixed":
            body = f"fixed {self.total_kvar:g} kvar"
        else:
            sizes = set(self.steps_kvar)
            if len(sizes) == 1:
                body = f"automatic {len(self.steps_kvar)}x{self.steps_kvar[0]:.4g} kvar"
            else:
                body = "automatic " + ",".join(f"{s:.4g}" for s in self.steps_kvar) + " kvar"
        return body + (f", {self.detuning_percent:g} % detuned" if self.detuned else "")

    @property
    def short_label(self) -> str:
        """The label for a narrow table column: the same design in fewer words."""
        if self.kind == "switch_off":
            return f"switch {self.total_kvar:g} kvar off (existing)"
        return self.label.replace(" kvar, switched", " kvar").replace("shunt reactor", "reactor")

    def output_factor(self, system_voltage_v: float | None = None) -> float:
        """Effective kvar at the system voltage per kvar of rating (1 for absorbing designs,
        which are rated at the system voltage)."""
        if not self.is_capacitor:
            return 1.0
        return output_factor(self.detuning_percent, system_voltage_v, self.capacitor_rated_voltage_v)

    def stage_totals_kvar(self) -> np.ndarray:
        """Rated kvar of every stage total (0 included); a fixed bank has 0 and its rating."""
        return stage_totals(self.steps_kvar)

    def to_dict(self) -> dict:
        return {
            "kind": self.kind,
            "steps_kvar": list(self.steps_kvar),
            "total_kvar": self.total_kvar,
            "detuning": (
                {"reactor_percent": self.detuning_percent,
                 "tuning_order": tuning_order(self.detuning_percent)}
                if self.detuned else None
            ),
            "capacitor_rated_voltage_v": self.capacitor_rated_voltage_v,
            "label": self.label,
            "short_label": self.short_label,
            "family": self.family,
        }


# controller -------------------------------------------------------------------------------

def controller_limits(kw: np.ndarray, kvar_net: np.ndarray, target_pf: float,
                      leading_pf_limit: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Per interval: kvar needed to reach the target, and the most kvar allowed.

    needed = Q_net − P tan φ_target; allowed = Q_net (no leading) or Q_net + P tan φ_lead when
    leading down to ``leading_pf_limit`` is allowed.
    """
    target_pf = check_pf(target_pf)
    kw = np.maximum(np.asarray(kw, dtype=float), 0.0)
    kvar_net = np.asarray(kvar_net, dtype=float)
    needed = kvar_net - kw * tan_phi(target_pf)
    allowed = kvar_net.copy()
    if leading_pf_limit is not None:
        allowed = allowed + kw * tan_phi(check_pf(leading_pf_limit, "leading_pf_limit"))
    return needed, allowed


def switch_stages(needed_kvar: np.ndarray, allowed_kvar: np.ndarray,
                  totals_kvar: np.ndarray) -> np.ndarray:
    """The controller rule over sorted effective stage totals (first total 0).

    Smallest total ≥ needed if it is ≤ allowed; else the largest total ≤ allowed (0 if none).
    Because both candidates are indices into the same sorted array, the rule reduces to
    ``totals[max(min(i_reach, i_allowed), 0)]``.
    """
    totals_kvar = np.asarray(totals_kvar, dtype=float)
    # tiny tolerance: a stage that reaches the target exactly must count as reaching it
    tol = 1e-9 * max(1.0, float(totals_kvar[-1]))
    i_reach = np.searchsorted(totals_kvar, needed_kvar - tol, side="left")
    i_allowed = np.searchsorted(totals_kvar, allowed_kvar + tol, side="right") - 1
    return totals_kvar[np.maximum(np.minimum(i_reach, i_allowed), 0)]


def switch_equal_steps(needed_kvar: np.ndarray, allowed_kvar: np.ndarray,
                       step_kvar: np.ndarray, n_steps: np.ndarray) -> np.ndarray:
    """The same rule for many banks of equal steps at once (candidates × intervals).

    With equal steps s the stage totals are k·s, k = 0..n, so the indices have closed forms
    ceil(needed / s) and floor(allowed / s); broadcasting handles every candidate together.
    """
    s = np.asarray(step_kvar, dtype=float)[:, None]
    n = np.asarray(n_steps, dtype=float)[:, None]
    tol = 1e-9
    k_reach = np.ceil(needed_kvar[None, :] / s - tol)
    k_allowed = np.floor(allowed_kvar[None, :] / s + tol)
    k = np.clip(np.minimum(np.maximum(k_reach, 0.0), np.minimum(k_allowed, n)), 0.0, n)
    return k * s


def absorbing_limits(kw: np.ndarray, kvar_net: np.ndarray,
                     target_pf: float) -> tuple[np.ndarray, np.ndarray]:
    """Per interval, for a reactor (or capacitance switched out): the kvar to absorb to cancel
    the leading kvar, and the most it may absorb without the site lagging beyond the target.

    needed = −Q_net (≤ 0 when the site lags, so nothing is switched); allowed =
    P tan φ_target − Q_net.
    """
    target_pf = check_pf(target_pf)
    kw = np.maximum(np.asarray(kw, dtype=float), 0.0)
    kvar_net = np.asarray(kvar_net, dtype=float)
    return -kvar_net, kw * tan_phi(target_pf) - kvar_net


def bank_output_kvar(bank: BankDesign, kw: np.ndarray, kvar_net: np.ndarray, target_pf: float,
                     *, leading_pf_limit: float | None = None,
                     system_voltage_v: float | None = None) -> np.ndarray:
    """Signed effective kvar the design delivers in each interval (capacitive > 0).

    A fixed bank is always on. An automatic bank follows :func:`switch_stages`; a reactor and
    capacitance switched out follow the mirror rule of :func:`absorbing_limits` and come out
    negative.
    """
    factor = bank.output_factor(system_voltage_v)
    kvar_net = np.asarray(kvar_net, dtype=float)
    if bank.kind == "fixed":
        return np.full(kvar_net.shape, bank.total_kvar * factor)
    if not bank.is_capacitor:
        needed, allowed = absorbing_limits(kw, kvar_net, target_pf)
        return -switch_stages(needed, allowed, bank.stage_totals_kvar())
    needed, allowed = controller_limits(kw, kvar_net, target_pf, leading_pf_limit)
    return switch_stages(needed, allowed, bank.stage_totals_kvar() * factor)


def corrected_kvarh(kvarh_lag: np.ndarray, kvarh_lead: np.ndarray, output_kvar: np.ndarray,
                    interval_minutes: int) -> tuple[np.ndarray, np.ndarray]:
    """Lagging and leading kvarh per interval after the design (signed output, capacitive > 0).

    net = lag − lead − Qc · m / 60; lag_new = max(net, 0); lead_new = max(−net, 0).
    """
    net = (np.asarray(kvarh_lag, dtype=float) - np.asarray(kvarh_lead, dtype=float)
           - np.asarray(output_kvar, dtype=float) * interval_minutes / 60.0)
    return np.maximum(net, 0.0), np.maximum(-net, 0.0)
