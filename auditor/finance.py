"""Cash flows of a correction investment: capex, O&M, losses, NPV, IRR, paybacks, sensitivity.

Pure: numbers in, numbers out. The savings come from the tariff engine (run before and after
correction); this module only turns a first-year saving and a cost estimate into a case.

Conventions
-----------
* Year 0 carries the capital expenditure (negative); years 1..N carry the net benefit
  ``savings - O&M - loss cost``, with savings and the loss cost (both valued at tariff prices)
  escalated by ``(1 + escalation) ** (t - 1)``. O&M is held flat in nominal terms.
* NPV and IRR are computed with numpy-financial (the reference implementation); IRR is ``None``
  when the cash flows have no sign change or numpy-financial finds no root.

References
----------
.. [1] Brealey, R., Myers, S., Allen, F., *Principles of Corporate Finance*: net present value
   NPV = sum CF_t / (1 + r)^t, internal rate of return (NPV = 0), payback period.
.. [2] numpy-financial, ``npv`` and ``irr`` (reference implementation used here).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import numpy_financial as npf

from auditor.errors import UsageError

HOURS_PER_YEAR = 8766.0  # 365.25 days: the year the audited period is scaled to


@dataclass(frozen=True)
class CostInputs:
    """Cost and finance assumptions for a capacitor bank case.

    Every default is an invented demonstration assumption, not a market price: replace them
    with quotations for a real site. Losses per kvar are from memory (LV capacitors about
    0.2–0.5 W/kvar; several W/kvar once series reactors are added) and must be checked against
    the manufacturer's data sheet.

    Parameters
    ----------
    capex_fixed : float
        Fixed installed cost of any bank (enclosure, protection, cabling, labour), currency.
        Demo assumption: 1500.
    capex_per_kvar : float
        Installed cost per kvar of capacitor rating, currency/kvar. Demo assumption: 25.
    automatic_premium : float
        Extra fixed cost of an automatic (stepped) bank: controller, contactors, current
        transformer. Demo assumption: 1000.
    detuning_premium_per_kvar : float
        Extra cost per kvar for series reactors of a detuned bank. Demo assumption: 20.
    om_percent_of_capex : float
        Annual operation and maintenance as a percentage of capex (used when ``om_per_year`` is
        None). Demo assumption: 2 %.
    om_per_year : float or None
        Annual O&M in currency; overrides ``om_percent_of_capex`` when given.
    loss_w_per_kvar : float
        Losses of a plain LV bank, W per energised kvar. From memory: 0.5 (upper end of
        0.2–0.5).
    loss_w_per_kvar_detuned : float
        Losses of a detuned bank (capacitors + reactors), W per energised kvar. From memory: 6.
    energy_price_per_kwh : float or None
        Price used to value the losses; None means the caller takes it from the tariff.
    life_years : int
        Economic life; LV banks 10–20 years (common practice). Default 15.
    discount_rate : float
        Annual discount rate as a fraction. Demo assumption: 0.08.
    escalation : float
        Annual escalation of tariff prices (savings and loss cost), fraction. Demo assumption:
        0.03.
    """

    capex_fixed: float = 1500.0
    capex_per_kvar: float = 25.0
    automatic_premium: float = 1000.0
    detuning_premium_per_kvar: float = 20.0
    om_percent_of_capex: float = 2.0
    om_per_year: float | None = None
    loss_w_per_kvar: float = 0.5
    loss_w_per_kvar_detuned: float = 6.0
    energy_price_per_kwh: float | None = None
    life_years: int = 15
    discount_rate: float = 0.08
    escalation: float = 0.03

    def __post_init__(self) -> None:
        for name in ("capex_fixed", "capex_per_kvar", "automatic_premium",
                     "detuning_premium_per_kvar", "om_percent_of_capex", "loss_w_per_kvar",
                     "loss_w_per_kvar_detuned"):
            value = getattr(self, name)
            if not math.isfinite(value) or value < 0:
                raise UsageError(f"cost input {name} must be a finite number >= 0, got {value!r}")
        if self.om_per_year is not None and (not math.isfinite(self.om_per_year) or self.om_per_year < 0):
            raise UsageError(f"cost input om_per_year must be >= 0, got {self.om_per_year!r}")
        if self.energy_price_per_kwh is not None and (
            not math.isfinite(self.energy_price_per_kwh) or self.energy_price_per_kwh < 0
        ):
            raise UsageError(
                f"cost input energy_price_per_kwh must be >= 0, got {self.energy_price_per_kwh!r}"
            )
        if not isinstance(self.life_years, int | np.integer) or not 1 <= self.life_years <= 60:
            raise UsageError(f"life_years must be a whole number of years from 1 to 60, got {self.life_years!r}")
        if not math.isfinite(self.discount_rate) or not -0.5 < self.discount_rate < 1.0:
            raise UsageError(
                f"discount_rate is a fraction per year (0.08 = 8 %), got {self.discount_rate!r}"
            )
        if not math.isfinite(self.escalation) or not -0.5 < self.escalation < 1.0:
            raise UsageError(f"escalation is a fraction per year (0.03 = 3 %), got {self.escalation!r}")

    def with_(self, **changes) -> CostInputs:
        """A copy with some fields changed (validated again)."""
        return replace(self, **changes)


def capex(costs: CostInputs, total_kvar: float, *, automatic: bool, detuned: bool) -> float:
    """Installed cost of a bank: fixed + per kvar (+ automatic premium, + detuning premium)."""
    value = costs.capex_fixed + costs.capex_per_kvar * total_kvar
    if automatic:
        value += costs.automatic_premium
    if detuned:
        value += costs.detuning_premium_per_kvar * total_kvar
    return float(value)


def annual_om(costs: CostInputs, capex_value: float) -> float:
    """Annual O&M: the absolute figure when given, else a percentage of capex."""
    if costs.om_per_year is not None:
        return float(costs.om_per_year)
    return float(capex_value * costs.om_percent_of_capex / 100.0)


def annual_loss_kwh(mean_energised_kvar: float, w_per_kvar: float,
                    hours: float = HOURS_PER_YEAR) -> float:
    """Energy lost in the bank in a year: W/kvar × mean energised kvar × hours / 1000."""
    return float(w_per_kvar * mean_energised_kvar * hours / 1000.0)


def cash_flows(capex_value: float, annual_savings: float, annual_om_value: float,
               annual_loss_cost: float, life_years: int, escalation: float) -> np.ndarray:
    """Nominal cash flows of years 0..life_years (year 0 = -capex).

    Savings and loss cost escalate with the tariff, ``(1 + escalation) ** (t - 1)`` in year t;
    O&M is flat.
    """
    years = np.arange(1, life_years + 1)
    growth = (1.0 + escalation) ** (years - 1)
    net = (annual_savings - annual_loss_cost) * growth - annual_om_value
    return np.concatenate([[-float(capex_value)], net])


def npv(rate: float, flows: np.ndarray) -> float:
    """Net present value, year 0 undiscounted (numpy-financial)."""
    return float(npf.npv(rate, flows))


def irr(flows: np.ndarray) -> float | None:
    """Internal rate of return (numpy-financial); None without a sign change or a root."""
    flows = np.asarray(flows, dtype=float)
    signs = np.sign(flows[flows != 0])
    if signs.size < 2 or np.all(signs == signs[0]):
        return None
    value = float(npf.irr(flows))
    return value if math.isfinite(value) else None


def simple_payback_years(capex_value: float, first_year_net: float) -> float | None:
    """Capex / first-year net benefit; None when the benefit is not positive."""
    if first_year_net <= 0:
        return None
    return float(capex_value / first_year_net)


def discounted_payback_years(flows: np.ndarray, rate: float) -> float | None:
    """Years until the cumulative discounted cash flow turns non-negative (linear within a year).

    None when it does not happen within the life.
    """
    flows = np.asarray(flows, dtype=float)
    disc = flows / (1.0 + rate) ** np.arange(flows.size)
    cumulative = np.cumsum(disc)
    if cumulative[0] >= 0:
        return 0.0
    hit = np.nonzero(cumulative >= 0)[0]
    if hit.size == 0:
        return None
    t = int(hit[0])
    before = cumulative[t - 1]
    # linear interpolation inside year t: the fraction of that year's inflow still needed
    return float(t - 1 + (-before) / disc[t]) if disc[t] > 0 else float(t)


@dataclass(frozen=True)
class FinanceResult:
    """A costed case: cash flows by year and the usual figures of merit."""

    capex: float
    annual_savings: float
    annual_om: float
    annual_loss_cost: float
    life_years: int
    discount_rate: float
    escalation: float
    flows: tuple[float, ...]
    npv: float
    irr: float | None
    simple_payback_years: float | None
    discounted_payback_years: float | None
    cash_flow: tuple[dict, ...] = field(default=())

    def to_dict(self) -> dict:
        return {
            "capex": self.capex,
            "annual_savings": self.annual_savings,
            "annual_om": self.annual_om,
            "annual_loss_cost": self.annual_loss_cost,
            "npv": self.npv,
            "irr": self.irr,
            "simple_payback_years": self.simple_payback_years,
            "discounted_payback_years": self.discounted_payback_years,
            "cash_flow": [dict(row) for row in self.cash_flow],
        }


def evaluate(capex_value: float, annual_savings: float, *, annual_om_value: float,
             annual_loss_cost: float, life_years: int, discount_rate: float,
             escalation: float) -> FinanceResult:
    """Cash flows, NPV, IRR, simple and discounted payback of one investment.

    Parameters
    ----------
    capex_value : float
        Installed cost at year 0.
    annual_savings : float
        First-year reduction of the bill (tariff prices of the audited period).
    annual_om_value, annual_loss_cost : float
        First-year O&M and cost of the energy lost in the bank.
    life_years : int
    discount_rate, escalation : float
        Fractions per year.

    Returns
    -------
    FinanceResult

    References
    ----------
    .. [1] Brealey, Myers, Allen, *Principles of Corporate Finance* (NPV, IRR, payback).
    .. [2] numpy-financial ``npv``/``irr``.
    """
    flows = cash_flows(capex_value, annual_savings, annual_om_value, annual_loss_cost,
                       life_years, escalation)
    disc = flows / (1.0 + discount_rate) ** np.arange(flows.size)
    cumulative = np.cumsum(flows)
    cumulative_disc = np.cumsum(disc)
    rows = tuple(
        {
            "year": int(t),
            "savings": 0.0 if t == 0 else float(annual_savings * (1 + escalation) ** (t - 1)),
            "om": 0.0 if t == 0 else float(annual_om_value),
            "losses": 0.0 if t == 0 else float(annual_loss_cost * (1 + escalation) ** (t - 1)),
            "capex": float(capex_value) if t == 0 else 0.0,
            "net": float(flows[t]),
            "cumulative": float(cumulative[t]),
            "discounted_cumulative": float(cumulative_disc[t]),
        }
        for t in range(flows.size)
    )
    return FinanceResult(
        capex=float(capex_value),
        annual_savings=float(annual_savings),
        annual_om=float(annual_om_value),
        annual_loss_cost=float(annual_loss_cost),
        life_years=int(life_years),
        discount_rate=float(discount_rate),
        escalation=float(escalation),
        flows=tuple(float(x) for x in flows),
        npv=npv(discount_rate, flows),
        irr=irr(flows),
        simple_payback_years=simple_payback_years(capex_value, float(flows[1]) if flows.size > 1 else 0.0),
        discounted_payback_years=discounted_payback_years(flows, discount_rate),
        cash_flow=rows,
    )

