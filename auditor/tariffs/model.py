"""The tariff model: frozen dataclasses, one per clause, each answering the questions other
layers ask about it.

Every reactive clause answers, without the caller knowing its kind:

* ``threshold_pf`` -- the power factor at or above which the clause charges nothing (None when
  no PF keeps it at zero, e.g. a charge on leading energy);
* ``pf_measure`` -- which PF that threshold is compared with: ``"period"`` (the energy PF of the
  billing period), ``"peak"`` (the PF at the kW peak) or ``"interval"`` (every metered
  interval's PF: a clause on peak kvar charges nothing when each interval is at or above it);
* ``charges_lagging`` / ``charges_leading`` -- which reactive energy adds to its charge;
* ``windows`` -- the time-of-use windows it counts energy in (empty: the whole period).

``kvar_demand`` and the threshold PF: the clause charges ``max(0, peak kvar - r x peak kW)``.
The period's energy PF does not decide it (one interval of low PF can set the kvar peak), so it
has no *energy-PF* threshold; an interval PF of ``1 / sqrt(1 + r^2)`` at every interval keeps
the peak kvar within the allowance, so its threshold is that value, measured per interval
(``pf_measure = "interval"``). Questions about the period PF (a bill's PF, see
:func:`auditor.tariffs.facts.pf_threshold`) therefore leave it out; questions about interval PF
(the dashboard's P-Q scatter) include it.

The PF of a tan phi limit is ``1 / sqrt(1 + tan^2 phi)`` (IEEE Std 1459-2010, section 3.1.1:
tan phi = Q / P, PF = P / S).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

__all__ = [
    "BASE_CHARGES",
    "Band",
    "Calendar",
    "DAY_GROUPS",
    "DAY_NAMES",
    "DemandCharge",
    "EnergyCharge",
    "HOLIDAY_RULES",
    "KVARH_BASES",
    "KvarDemand",
    "KvarhBanded",
    "KvarhExcess",
    "LeadingKvarh",
    "MECHANISMS",
    "Mechanism",
    "PfDemandAdjust",
    "PfPercent",
    "Tariff",
    "Window",
    "pf_of_tan_phi",
]

DAY_NAMES = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
DAY_GROUPS = {"all": tuple(range(7)), "weekdays": tuple(range(5)), "weekend": (5, 6)}
KVARH_BASES = ("lag", "net", "lag_plus_lead")
HOLIDAY_RULES = ("as_sunday", "as_weekday")
BASE_CHARGES = ("energy", "demand", "fixed")
MECHANISMS = ("kvarh_excess", "kvarh_banded", "pf_demand_adjust", "pf_percent", "kvar_demand", "leading_kvarh")


def pf_of_tan_phi(tan_phi: float) -> float:
    """``PF = 1 / sqrt(1 + tan^2 phi)`` (IEEE Std 1459-2010, section 3.1.1)."""
    return 1.0 / math.hypot(1.0, tan_phi)


def _basis_senses(basis: str) -> tuple[bool, bool]:
    """(counts lagging, counts leading) of a kvarh basis. ``net`` subtracts leading energy, so
    leading energy lowers rather than raises the charge."""
    return True, basis == "lag_plus_lead"


# --------------------------------------------------------------------------------------------
# Calendar and windows
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Window:
    """A time-of-use window in local time.

    ``start_hour`` inclusive, ``end_hour`` exclusive (0-24); ``start_hour > end_hour`` wraps past
    midnight (22 to 6 is a night window; each hour belongs to the calendar day it starts on).
    ``holidays = "as_sunday"`` bills a public holiday like a Sunday; ``"as_weekday"`` ignores
    holidays.
    """

    start_hour: int
    end_hour: int
    days: tuple[int, ...] = DAY_GROUPS["all"]
    months: tuple[int, ...] = tuple(range(1, 13))
    holidays: str = "as_sunday"
    name: str | None = None
    price_per_kwh: float | None = None

    def describe(self) -> str:
        if self.days == DAY_GROUPS["all"]:
            d = "every day"
        elif self.days == DAY_GROUPS["weekdays"]:
            d = "Monday to Friday"
        elif self.days == DAY_GROUPS["weekend"]:
            d = "Saturday and Sunday"
        else:
            d = ", ".join(DAY_NAMES[i].capitalize() for i in self.days)
        text = f"{d} {self.start_hour:02d}:00-{self.end_hour:02d}:00 local time"
        if self.months != tuple(range(1, 13)):
            text += " in months " + ", ".join(str(m) for m in self.months)
        if self.holidays == "as_sunday":
            text += " (public holidays count as Sundays)"
        return text


@dataclass(frozen=True)
class Calendar:
    country: str
    subdivision: str | None = None


# --------------------------------------------------------------------------------------------
# Base charges
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class EnergyCharge:
    price_per_kwh: float
    windows: tuple[Window, ...] = ()


@dataclass(frozen=True)
class DemandCharge:
    basis: str  # "kw" or "kva"
    price_per_kw: float  # per unit of billing demand (kW, or kVA when basis == "kva")
    ratchet_percent: float | None = None
    ratchet_periods: int = 11


# --------------------------------------------------------------------------------------------
# Reactive clauses
# --------------------------------------------------------------------------------------------
class _Clause:
    """Answers shared by every reactive clause (see the module docstring)."""

    label: str | None
    kind: str

    @property
    def key(self) -> str:
        """Charge key: the label when given, else the kind."""
        return self.label or self.kind

    # Each clause also has ``threshold_pf`` and ``windows`` (a field or a property of its own;
    # they are not defined here because some clauses hold them as dataclass fields).

    @property
    def pf_measure(self) -> str | None:
        return "period" if self.threshold_pf is not None else None  # type: ignore[attr-defined]

    @property
    def charges_lagging(self) -> bool:
        return _basis_senses(getattr(self, "kvarh", "lag"))[0]

    @property
    def charges_leading(self) -> bool:
        return _basis_senses(getattr(self, "kvarh", "lag"))[1]



_NO_WINDOWS: tuple[Window, ...] = ()


@dataclass(frozen=True)
class KvarhExcess(_Clause):
    """price x max(0, kvarh - tan_phi_limit x kWh) per period, inside ``windows`` if given."""

    tan_phi_limit: float
    price_per_kvarh: float
    kvarh: str = "lag"
    windows: tuple[Window, ...] = ()
    label: str | None = None
    kind: str = field(default="kvarh_excess", init=False)

    @property
    def threshold_pf(self) -> float:
        return pf_of_tan_phi(self.tan_phi_limit)


@dataclass(frozen=True)
class Band:
    min_pf: float
    price_per_kvarh: float


@dataclass(frozen=True)
class KvarhBanded(_Clause):
    """Excess kvarh (above tan_phi_limit x kWh) priced by the band the period's PF falls in."""

    tan_phi_limit: float
    bands: tuple[Band, ...]  # sorted by min_pf, highest first; the last has min_pf == 0
    kvarh: str = "lag"
    label: str | None = None
    kind: str = field(default="kvarh_banded", init=False)

    @property
    def threshold_pf(self) -> float:
        return pf_of_tan_phi(self.tan_phi_limit)

    @property
    def windows(self) -> tuple[Window, ...]:
        return _NO_WINDOWS


@dataclass(frozen=True)
class PfDemandAdjust(_Clause):
    """Billing demand = peak kW x base_pf / PF when PF < base_pf (and above it with credit)."""

    base_pf: float
    credit: bool = False
    max_credit_percent: float | None = None
    pf: str = "energy"  # "energy" (period energy PF) or "at_peak" (PF at the kW peak)
    kvarh: str = "lag"
    label: str | None = None
    kind: str = field(default="pf_demand_adjust", init=False)

    @property
    def threshold_pf(self) -> float:
        return self.base_pf

    @property
    def windows(self) -> tuple[Window, ...]:
        return _NO_WINDOWS

    @property
    def pf_measure(self) -> str:
        return "peak" if self.pf == "at_peak" else "period"

    @property
    def charges_leading(self) -> bool:
        # The PF at the peak comes from net kvar: leading energy raises it.
        return False if self.pf == "at_peak" else super().charges_leading


@dataclass(frozen=True)
class PfPercent(_Clause):
    """N % of the named charges per 0.01 PF below threshold_pf; optional rebate above another."""

    threshold_pf: float
    percent_per_hundredth: float
    applies_to: tuple[str, ...]
    rebate_above_pf: float | None = None
    rebate_percent_per_hundredth: float = 0.0
    max_surcharge_percent: float | None = None
    max_rebate_percent: float | None = None
    kvarh: str = "lag"
    label: str | None = None
    kind: str = field(default="pf_percent", init=False)

    @property
    def windows(self) -> tuple[Window, ...]:
        return _NO_WINDOWS


@dataclass(frozen=True)
class KvarDemand(_Clause):
    """price x max(0, peak kvar - allowance_ratio x peak kW); peak kvar is lagging."""

    allowance_ratio: float
    price_per_kvar: float
    label: str | None = None
    kind: str = field(default="kvar_demand", init=False)

    @property
    def threshold_pf(self) -> float:
        return pf_of_tan_phi(self.allowance_ratio)

    @property
    def pf_measure(self) -> str:
        return "interval"

    @property
    def windows(self) -> tuple[Window, ...]:
        return _NO_WINDOWS

    @property
    def charges_leading(self) -> bool:
        return False


@dataclass(frozen=True)
class LeadingKvarh(_Clause):
    """price x max(0, leading kvarh - tan_phi_limit x kWh) inside the window's hours."""

    price_per_kvarh: float
    window: Window
    tan_phi_limit: float = 0.0
    label: str | None = None
    kind: str = field(default="leading_kvarh", init=False)

    @property
    def threshold_pf(self) -> None:
        return None

    @property
    def charges_lagging(self) -> bool:
        return False

    @property
    def charges_leading(self) -> bool:
        return True

    @property
    def windows(self) -> tuple[Window, ...]:
        return (self.window,)


Mechanism = KvarhExcess | KvarhBanded | PfDemandAdjust | PfPercent | KvarDemand | LeadingKvarh


# --------------------------------------------------------------------------------------------
# The tariff
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Tariff:
    name: str
    currency: str
    energy: EnergyCharge
    demand: DemandCharge | None = None
    fixed_per_period: float = 0.0
    reactive: tuple[Mechanism, ...] = ()
    pf_rounding: int | None = 2
    kvarh_basis: str = "lag"
    calendar: Calendar | None = None
    description: str | None = None
    source: str | None = None

    @staticmethod
    def key_of(mechanism: Mechanism) -> str:
        """Charge key of a reactive mechanism: its label when given, else its kind."""
        return mechanism.key

    @property
    def reactive_keys(self) -> tuple[str, ...]:
        return tuple(m.key for m in self.reactive)

    @property
    def charge_keys(self) -> tuple[str, ...]:
        """Every charge key the engine returns, in bill order."""
        return BASE_CHARGES + self.reactive_keys
