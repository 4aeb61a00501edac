"""The tariff model: frozen dataclasses, one per clause, each answering the questions other
layers ask about it.

Every reactive clause answers, without the caller knowing its kind:

* ``threshold_pf`` -- the power factor at or above which the clause charges nothing (None when
  no PF keeps it at zero, e.g. a charge on leading energy);
* ``pf_measure`` -- which PF that threshold is compared with: ``"period"`` (the energy PF of the
  billing period), ``"peak"`` (the PF at the kW peak, or peak kW over peak kVA) or
  ``"interval"`` (every metered interval's PF: a clause on peak kvar, or one worked out
  interval by interval, charges nothing when each interval is at or above it);
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

import numpy as np

from auditor.quantities import round_pf

__all__ = [
    "BASE_CHARGES",
    "Band",
    "Calendar",
    "DAY_GROUPS",
    "DAY_NAMES",
    "DemandCharge",
    "DemandWindow",
    "EnergyCharge",
    "EVALUATIONS",
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
    "RATCHET_BASES",
    "ROUNDING_MODES",
    "Rounding",
    "Slope",
    "Tariff",
    "Tier",
    "Window",
    "pf_of_tan_phi",
]

DAY_NAMES = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
DAY_GROUPS = {"all": tuple(range(7)), "weekdays": tuple(range(5)), "weekend": (5, 6)}
#: Which reactive energy a clause counts: lagging, lag - lead, lag + lead, or the larger of
#: lagging and leading (in each interval when the clause is worked out interval by interval).
KVARH_BASES = ("lag", "net", "lag_plus_lead", "max_lag_lead")
HOLIDAY_RULES = ("as_sunday", "as_weekday")
BASE_CHARGES = ("energy", "demand", "fixed")
MECHANISMS = ("kvarh_excess", "kvarh_banded", "pf_demand_adjust", "pf_percent", "kvar_demand", "leading_kvarh")
ROUNDING_MODES = ("up", "down", "half_up", "half_down")
#: How a clause is worked out: over the whole billing period, separately in each named time
#: band (window group), or interval by interval (or block by block) and then summed.
EVALUATIONS = ("period", "window", "interval")
#: What a demand ratchet looks back at: measured demand, or the PF-adjusted demand.
RATCHET_BASES = ("measured", "billing")


def pf_of_tan_phi(tan_phi: float) -> float:
    """``PF = 1 / sqrt(1 + tan^2 phi)`` (IEEE Std 1459-2010, section 3.1.1)."""
    return 1.0 / math.hypot(1.0, tan_phi)


def _basis_senses(basis: str) -> tuple[bool, bool]:
    """(counts lagging, counts leading) of a kvarh basis. ``net`` subtracts leading energy, so
    leading energy lowers rather than raises the charge."""
    return True, basis in ("lag_plus_lead", "max_lag_lead")


def _num(x: float) -> str:
    return f"{x:g}"


# --------------------------------------------------------------------------------------------
# Rounding
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Rounding:
    """Round a quantity to a multiple of ``step`` as a tariff says: ``up`` (each part of a step
    counts as a whole one: "or fraction thereof"), ``down`` (parts discarded), ``half_up``
    (0.5 goes up, the schoolbook rule) or ``half_down`` (0.5 discarded).

    A relative tolerance of 1e-9 of a step absorbs binary representation error, so 0.845 (stored
    as 0.84499999...) rounds half up to 0.85 and 2.0000000001 steps do not round up to 3.
    """

    step: float
    mode: str = "half_up"

    def apply(self, x):
        x = np.asarray(x, dtype=float)
        q = x / self.step
        eps = 1e-9
        if self.mode == "up":
            r = np.ceil(q - eps)
        elif self.mode == "down":
            r = np.floor(q + eps)
        elif self.mode == "half_up":
            r = np.floor(q + 0.5 + eps)
        else:  # half_down
            r = np.ceil(q - 0.5 - eps)
        # Multiply back and drop the float noise of the step (0.1 x 3 = 0.30000000000000004).
        decimals = max(0, -math.floor(math.log10(self.step)) + 6)
        return np.round(r * self.step, decimals)

    def describe(self, unit: str = "") -> str:
        u = f" {unit}" if unit else ""
        if self.mode == "up":
            return f"rounded up to a whole {_num(self.step)}{u} (a part counts as a whole)"
        if self.mode == "down":
            return f"rounded down to a whole {_num(self.step)}{u} (parts discarded)"
        half = "halves up" if self.mode == "half_up" else "halves discarded"
        return f"rounded to the nearest {_num(self.step)}{u}, {half}"


# --------------------------------------------------------------------------------------------
# Calendar and windows
# --------------------------------------------------------------------------------------------
def _clock(minute: int) -> str:
    return f"{minute // 60:02d}:{minute % 60:02d}"


@dataclass(frozen=True)
class Window:
    """A time-of-use window in local time, at minute resolution.

    ``start_minute`` inclusive, ``end_minute`` exclusive (minutes after local midnight, 0-1440);
    a start later than the end wraps past midnight (22:00 to 06:00 is a night window; each
    interval belongs to the calendar day it starts on). An interval is inside when its local
    start is. ``holidays = "as_sunday"`` bills a public holiday like a Sunday; ``"as_weekday"``
    ignores holidays. ``kvarh`` (``"lag"`` or ``"lead"``) may be set on the windows of a
    ``kvarh_excess`` clause worked out interval by interval: inside that window the clause counts
    that reactive energy instead of its own basis (inductive by day, capacitive at night).
    """

    start_minute: int
    end_minute: int
    days: tuple[int, ...] = DAY_GROUPS["all"]
    months: tuple[int, ...] = tuple(range(1, 13))
    holidays: str = "as_sunday"
    name: str | None = None
    price_per_kwh: float | None = None
    kvarh: str | None = None

    @property
    def start_hour(self) -> float:
        return self.start_minute / 60

    @property
    def end_hour(self) -> float:
        return self.end_minute / 60

    def describe(self) -> str:
        if self.days == DAY_GROUPS["all"]:
            d = "every day"
        elif self.days == DAY_GROUPS["weekdays"]:
            d = "Monday to Friday"
        elif self.days == DAY_GROUPS["weekend"]:
            d = "Saturday and Sunday"
        else:
            d = ", ".join(DAY_NAMES[i].capitalize() for i in self.days)
        text = f"{d} {_clock(self.start_minute)}-{_clock(self.end_minute)} local time"
        if self.months != tuple(range(1, 13)):
            text += " in months " + ", ".join(str(m) for m in self.months)
        if self.holidays == "as_sunday" and self.days != DAY_GROUPS["all"]:
            text += " (public holidays count as Sundays)"
        return text


@dataclass(frozen=True)
class Calendar:
    country: str
    subdivision: str | None = None


def window_groups(windows: tuple[Window, ...]) -> tuple[tuple[str, tuple[Window, ...]], ...]:
    """Windows grouped into time bands for ``per = "window"``: windows of the same name form one
    band; an unnamed window is a band of its own. In file order of first appearance."""
    out: dict[str, list[Window]] = {}
    for i, w in enumerate(windows):
        out.setdefault(w.name if w.name else f"window {i + 1}", []).append(w)
    return tuple((k, tuple(v)) for k, v in out.items())


# --------------------------------------------------------------------------------------------
# Base charges
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class EnergyCharge:
    price_per_kwh: float
    windows: tuple[Window, ...] = ()


@dataclass(frozen=True)
class DemandWindow:
    """A demand charge on the peak inside a time window: ``price_per_kw x peak`` or, with
    ``excess_over``, ``price_per_kw x max(0, peak - the peak of the window so named)``."""

    window: Window
    price_per_kw: float
    excess_over: str | None = None

    @property
    def name(self) -> str | None:
        return self.window.name


@dataclass(frozen=True)
class DemandCharge:
    """Demand: measured peak (kW, or kVA from net kvar), rounded as ``rounding`` says, then the
    PF adjustment and the ratchet; plus charges on the peaks inside ``windows``.

    ``ratchet_on`` says what the ratchet looks back at: ``"measured"`` (the default: the measured
    demand of previous periods) or ``"billing"`` (their PF-adjusted demand, before their own
    ratchet)."""

    basis: str  # "kw" or "kva"
    price_per_kw: float  # per unit of billing demand (kW, or kVA when basis == "kva")
    ratchet_percent: float | None = None
    ratchet_periods: int = 11
    rounding: Rounding | None = None
    windows: tuple[DemandWindow, ...] = ()
    ratchet_on: str = "measured"


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
        if self.threshold_pf is None:  # type: ignore[attr-defined]
            return None
        return "interval" if getattr(self, "per", "period") == "interval" else "period"

    @property
    def charges_lagging(self) -> bool:
        return _basis_senses(getattr(self, "kvarh", "lag"))[0]

    @property
    def charges_leading(self) -> bool:
        return _basis_senses(getattr(self, "kvarh", "lag"))[1]


_NO_WINDOWS: tuple[Window, ...] = ()


@dataclass(frozen=True)
class Tier:
    """From ``above_tan_phi x kWh`` up to the next tier, excess kvarh costs ``price_per_kvarh``."""

    above_tan_phi: float
    price_per_kvarh: float


@dataclass(frozen=True)
class KvarhExcess(_Clause):
    """price x max(0, kvarh - tan_phi_limit x kWh), inside ``windows`` if given.

    ``tiers`` price the excess above higher ratios differently (marginal tiers: the kvarh
    between ``tan_phi_limit`` and the first tier's ratio at ``price_per_kvarh``, and so on).
    ``per`` works the excess out over the period, in each named window group separately
    (``"window"``), or interval by interval (``"interval"``, in blocks of ``block_minutes``
    of local time when given; 1440 is a local day) and sums it; ``excess_rounding`` rounds
    each period's chargeable kvarh.

    With ``reference_pf`` (and ``price_per_kwh``) the excess is valued as the active energy it
    stands for: ``max(0, kWh x (reference_pf / PF - 1))`` in each interval or block, priced per
    kWh (``tan_phi_limit`` is then the tan phi of ``reference_pf``, ``price_per_kvarh`` 0).
    """

    tan_phi_limit: float
    price_per_kvarh: float
    kvarh: str = "lag"
    windows: tuple[Window, ...] = ()
    label: str | None = None
    tiers: tuple[Tier, ...] = ()
    per: str = "period"
    block_minutes: int | None = None
    excess_rounding: Rounding | None = None
    reference_pf: float | None = None
    price_per_kwh: float | None = None
    kind: str = field(default="kvarh_excess", init=False)

    @property
    def threshold_pf(self) -> float:
        return self.reference_pf if self.reference_pf is not None else pf_of_tan_phi(self.tan_phi_limit)

    @property
    def limits(self) -> tuple[float, ...]:
        return (self.tan_phi_limit,) + tuple(t.above_tan_phi for t in self.tiers)

    @property
    def prices(self) -> tuple[float, ...]:
        return (self.price_per_kvarh,) + tuple(t.price_per_kvarh for t in self.tiers)

    @property
    def charges_lagging(self) -> bool:
        own = [w.kvarh for w in self.windows if w.kvarh]
        if own and len(own) == len(self.windows):
            return "lag" in own
        return super().charges_lagging or "lag" in own

    @property
    def charges_leading(self) -> bool:
        own = [w.kvarh for w in self.windows if w.kvarh]
        if own and len(own) == len(self.windows):
            return "lead" in own
        return super().charges_leading or "lead" in own


@dataclass(frozen=True)
class Band:
    min_pf: float
    price_per_kvarh: float


@dataclass(frozen=True)
class KvarhBanded(_Clause):
    """Excess kvarh (above tan_phi_limit x kWh) priced by the band the PF falls in.

    With ``windows`` only the energy inside them counts; with ``per = "window"`` each named
    window group (a time band) is worked out on its own: its own excess, priced by the band of
    its own PF. Times outside every window are exempt.
    """

    tan_phi_limit: float
    bands: tuple[Band, ...]  # sorted by min_pf, highest first; the last has min_pf == 0
    kvarh: str = "lag"
    label: str | None = None
    windows: tuple[Window, ...] = ()
    per: str = "period"
    excess_rounding: Rounding | None = None
    kind: str = field(default="kvarh_banded", init=False)

    @property
    def threshold_pf(self) -> float:
        return pf_of_tan_phi(self.tan_phi_limit)


@dataclass(frozen=True)
class PfDemandAdjust(_Clause):
    """Billing demand = peak kW x base_pf / PF when PF < base_pf (and above it with credit).

    ``apply_below_pf`` sets a trigger apart from the ratio (billed kVA = kW / PF, i.e.
    ``base_pf = 1``, only when PF < 0.96); ``max_increase_percent`` caps the increase at a
    percentage of the demand. ``pf``: ``"energy"`` (the period's energy PF), ``"at_peak"`` (the
    interval PF at the kW peak) or ``"peak_kva"`` (peak kW over peak kVA, which makes billing
    demand the larger of peak kW and base_pf x peak kVA). ``adjusted_rounding`` rounds the
    demand the adjustment changed (a demand left as measured is rounded by ``demand.rounding``).
    """

    base_pf: float
    credit: bool = False
    max_credit_percent: float | None = None
    pf: str = "energy"
    kvarh: str = "lag"
    label: str | None = None
    apply_below_pf: float | None = None
    max_increase_percent: float | None = None
    adjusted_rounding: Rounding | None = None
    kind: str = field(default="pf_demand_adjust", init=False)

    @property
    def threshold_pf(self) -> float:
        return self.apply_below_pf if self.apply_below_pf is not None else self.base_pf

    @property
    def pf_measure(self) -> str:
        return "period" if self.pf == "energy" else "peak"

    @property
    def charges_leading(self) -> bool:
        # The PF at the peak and peak kVA come from net kvar: leading energy raises the PF.
        return False if self.pf != "energy" else super().charges_leading

    @property
    def windows(self) -> tuple[Window, ...]:
        return _NO_WINDOWS


@dataclass(frozen=True)
class Slope:
    """Below ``below_pf`` each 0.01 of PF costs ``percent_per_hundredth`` % (marginal)."""

    below_pf: float
    percent_per_hundredth: float


@dataclass(frozen=True)
class PfPercent(_Clause):
    """N % of the named charges per 0.01 PF below threshold_pf; optional rebate above another.

    ``slopes`` add steeper rates further down (marginal: 0.5 % per 0.01 from 0.95 to 0.90, then
    1 % per 0.01 below 0.90); ``difference_rounding`` says how the PF difference is counted
    ("each point or fraction thereof": step 0.01, up).
    """

    threshold_pf: float
    percent_per_hundredth: float
    applies_to: tuple[str, ...]
    rebate_above_pf: float | None = None
    rebate_percent_per_hundredth: float = 0.0
    max_surcharge_percent: float | None = None
    max_rebate_percent: float | None = None
    kvarh: str = "lag"
    label: str | None = None
    slopes: tuple[Slope, ...] = ()
    difference_rounding: Rounding | None = None
    kind: str = field(default="pf_percent", init=False)

    @property
    def windows(self) -> tuple[Window, ...]:
        return _NO_WINDOWS


@dataclass(frozen=True)
class KvarDemand(_Clause):
    """price x max(0, peak kvar - allowance_ratio x peak kW); peak kvar is lagging.

    With ``allowance_lookback_periods = N`` the allowance is a share of the highest kW of this
    period and the previous N; ``excess_rounding`` rounds the chargeable kvar.
    """

    allowance_ratio: float
    price_per_kvar: float
    label: str | None = None
    excess_rounding: Rounding | None = None
    allowance_lookback_periods: int | None = None
    kind: str = field(default="kvar_demand", init=False)

    @property
    def threshold_pf(self) -> float:
        return pf_of_tan_phi(self.allowance_ratio)

    @property
    def pf_measure(self) -> str:
        return "interval"

    @property
    def charges_leading(self) -> bool:
        return False

    @property
    def windows(self) -> tuple[Window, ...]:
        return _NO_WINDOWS


@dataclass(frozen=True)
class LeadingKvarh(_Clause):
    """price x max(0, leading kvarh - tan_phi_limit x kWh) inside its windows (one or several),
    over the period or, with ``per = "interval"``, interval by interval."""

    price_per_kvarh: float
    windows: tuple[Window, ...]
    tan_phi_limit: float = 0.0
    label: str | None = None
    per: str = "period"
    block_minutes: int | None = None
    excess_rounding: Rounding | None = None
    kind: str = field(default="leading_kvarh", init=False)

    @property
    def window(self) -> Window:
        """The first window (a clause written with top-level ``hours`` has exactly one)."""
        return self.windows[0]

    @property
    def threshold_pf(self) -> None:
        return None

    @property
    def charges_lagging(self) -> bool:
        return False

    @property
    def charges_leading(self) -> bool:
        return True


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
    pf_rounding: int | Rounding | None = 2
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

    @property
    def pf_rounder(self) -> Rounding | None:
        """``pf_rounding`` as a :class:`Rounding` (decimals half up), or None for no rounding."""
        if self.pf_rounding is None or isinstance(self.pf_rounding, Rounding):
            return self.pf_rounding
        return Rounding(10.0 ** -self.pf_rounding, "half_up")

    def round_pf(self, pf):
        """Power factors rounded as the tariff says before any comparison or division."""
        if isinstance(self.pf_rounding, Rounding):
            return self.pf_rounding.apply(pf)
        return round_pf(pf, self.pf_rounding)
