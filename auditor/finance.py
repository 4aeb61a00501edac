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
* Optional items a client's case carries (each off or zero by default; see :class:`CostInputs`):
  a one-off incentive or rebate in a chosen year; the money value of the line-loss reduction
  (escalated like the savings, shown apart and counted only when asked); a replacement of
  capacitor cells or contactors in a chosen year (nominal, as quoted); a profit tax on the net
  benefit with straight-line tax depreciation of the investment net of the incentive. A negative
  tax is relief against the company's other profits (assumed large enough to absorb it).
* Rates (discount, escalation, tax) are fractions here: 0.08 is 8 %. Front ends accept either
  a fraction or a number with a ``%`` sign (:func:`parse_rate`).

References
----------
.. [1] Brealey, R., Myers, S., Allen, F., *Principles of Corporate Finance*: net present value
   NPV = sum CF_t / (1 + r)^t, internal rate of return (NPV = 0), payback period.
.. [2] numpy-financial, ``npv`` and ``irr`` (reference implementation used here).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, fields, replace

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
    incentive : float
        One-off incentive, grant or utility rebate, currency (0: none). It lowers the net
        investment of the simple payback and the depreciable base.
    incentive_year : int
        Year the incentive is received: 0 with the purchase (default), up to the life.
    replacement_year : int or None
        Year in which capacitor cells or contactors are replaced (1 .. life), or None.
    replacement_cost : float
        Cost of that replacement, currency of that year (not escalated).
    tax_rate : float
        Profit tax on the net benefit, fraction (0: no tax, the default).
    depreciation_years : int or None
        Straight-line tax depreciation of (capex − incentive) over this many years, 1 .. life
        (default: the life). Used only with a tax rate.
    network_loss_percent : float
        I²R losses in the site's own network between the meter and the bank (transformer
        copper, main cables), percent of the energy metered. The line-loss reduction
        1 − (PF₁/PF₂)² applies to them. Demo assumption: 1.5 (from memory: a few percent).
    count_loss_reduction : bool
        Count the money value of the loss reduction in the cash flow, payback, NPV and IRR.
        Off by default: it is an indication, shown apart from the tariff saving.
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
    incentive: float = 0.0
    incentive_year: int = 0
    replacement_year: int | None = None
    replacement_cost: float = 0.0
    tax_rate: float = 0.0
    depreciation_years: int | None = None
    network_loss_percent: float = 1.5
    count_loss_reduction: bool = False

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
        for name in ("incentive", "replacement_cost"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value) \
                    or value < 0:
                raise UsageError(f"cost input {name} must be a finite number >= 0, got {value!r}")
        if not _whole(self.incentive_year) or not 0 <= self.incentive_year <= self.life_years:
            raise UsageError(f"incentive_year is the year the incentive is received, 0 to the life "
                             f"({self.life_years}), got {self.incentive_year!r}")
        if self.replacement_year is not None and (
                not _whole(self.replacement_year) or not 1 <= self.replacement_year <= self.life_years):
            raise UsageError(f"replacement_year must be a year from 1 to the life ({self.life_years}), "
                             f"got {self.replacement_year!r}")
        if self.replacement_cost > 0 and self.replacement_year is None:
            raise UsageError("replacement_cost needs the replacement_year it falls in")
        if isinstance(self.tax_rate, bool) or not math.isfinite(self.tax_rate) or not 0 <= self.tax_rate < 1:
            raise UsageError(f"tax_rate is a fraction from 0 up to 1 (0.25 = 25 %), got {self.tax_rate!r}")
        if self.depreciation_years is not None and (
                not _whole(self.depreciation_years) or not 1 <= self.depreciation_years <= self.life_years):
            raise UsageError(f"depreciation_years must be a whole number of years from 1 to the life "
                             f"({self.life_years}), got {self.depreciation_years!r}")
        if not math.isfinite(self.network_loss_percent) or not 0 <= self.network_loss_percent <= 20:
            raise UsageError(f"network_loss_percent is the share of the energy lost in the site's network, "
                             f"0 to 20 (percent), got {self.network_loss_percent!r}")
        if not isinstance(self.count_loss_reduction, bool):
            raise UsageError(f"count_loss_reduction is true or false, got {self.count_loss_reduction!r}")

    def with_(self, **changes) -> CostInputs:
        """A copy with some fields changed (validated again)."""
        return replace(self, **changes)

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def _whole(value) -> bool:
    return isinstance(value, int | np.integer) and not isinstance(value, bool)


def parse_rate(text: str | float, *, bare: str = "fraction", name: str = "rate") -> float:
    """A rate a year as a fraction, from ``"8%"``/``"8 %"`` (percent) or a bare number.

    A bare number is read as ``bare`` says: a fraction on the command line (``0.08``), a
    percent in the dashboard's fields, which are labelled so (``8``). A bare fraction above 1
    is refused (it is almost always a percent without its sign).
    """
    if isinstance(text, int | float) and not isinstance(text, bool):
        raw, percent = float(text), bare == "percent"
    else:
        t = str(text).strip().replace("\u00a0", " ")
        percent = t.endswith("%") or bare == "percent"
        t = t.rstrip("%").strip()
        try:
            raw = float(t)
        except ValueError:
            raise UsageError(f"{name} {str(text)!r} is not a number: write a fraction such as 0.08 "
                             "or a percent such as 8%") from None
    if not math.isfinite(raw):
        raise UsageError(f"{name} {str(text)!r} is not a finite number")
    if not percent and abs(raw) > 1:
        raise UsageError(f"{name} {raw:g} is a fraction a year (0.08 = 8 %); for percent write {raw:g}%")
    return raw / 100.0 if percent else raw


def loss_reduction_kwh(annual_kwh: float, line_loss_reduction: float | None,
                       network_loss_percent: float) -> float:
    """kWh a year no longer lost in the site's network: the losses (a share of the energy)
    times the line-loss reduction 1 − (PF₁/PF₂)² (I²R at the same kW scales with 1/PF²; an
    indication, common practice)."""
    if not line_loss_reduction or line_loss_reduction <= 0 or annual_kwh <= 0:
        return 0.0
    return float(annual_kwh * network_loss_percent / 100.0 * line_loss_reduction)


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
    """A costed case: cash flows by year and the usual figures of merit.

    ``annual_loss_reduction_value`` is the first-year money value of the line-loss reduction,
    counted in the flows only when ``loss_reduction_counted``; the other optional items
    (incentive, replacement, tax) are zero when not given.
    """

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
    incentive: float = 0.0
    incentive_year: int = 0
    replacement_year: int | None = None
    replacement_cost: float = 0.0
    tax_rate: float = 0.0
    depreciation_years: int | None = None
    loss_reduction_kwh: float = 0.0
    annual_loss_reduction_value: float = 0.0
    loss_reduction_counted: bool = False

    @property
    def net_investment(self) -> float:
        """Capex less the incentive: what the simple payback repays."""
        return self.capex - self.incentive

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
            **self.extras(),
        }

    def extras(self) -> dict:
        """The optional items, as JSON keys of a correction case."""
        return {
            "incentive": self.incentive,
            "incentive_year": self.incentive_year,
            "replacement_year": self.replacement_year,
            "replacement_cost": self.replacement_cost,
            "tax_rate": self.tax_rate,
            "depreciation_years": self.depreciation_years,
            "loss_reduction_kwh_per_year": self.loss_reduction_kwh,
            "loss_reduction_value_per_year": self.annual_loss_reduction_value,
            "loss_reduction_counted": self.loss_reduction_counted,
            "net_investment": self.net_investment,
        }


def evaluate(capex_value: float, annual_savings: float, *, annual_om_value: float,
             annual_loss_cost: float, life_years: int, discount_rate: float,
             escalation: float, costs: CostInputs | None = None,
             loss_reduction_value: float = 0.0, loss_reduction_kwh_value: float = 0.0) -> FinanceResult:
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
    costs : CostInputs, optional
        The optional items (incentive, replacement, tax and depreciation, whether the loss
        reduction counts); without it none of them applies.
    loss_reduction_value : float
        First-year money value of the line-loss reduction (kWh a year × energy price).
    loss_reduction_kwh_value : float
        The same in kWh a year (reported only).

    Returns
    -------
    FinanceResult

    Notes
    -----
    Year t ≥ 1, with g = (1 + escalation)^(t−1)::

        operating  = savings·g + [loss reduction·g] − O&M − bank losses·g
        taxable    = operating − replacement_t − depreciation_t
        net_t      = operating − replacement_t + incentive_t − tax_rate·taxable

    and year 0 = −capex + incentive_0. Depreciation is (capex − incentive) / D in years 1..D.
    Simple payback = (capex − incentive) / first-year (operating − tax).

    References
    ----------
    .. [1] Brealey, Myers, Allen, *Principles of Corporate Finance* (NPV, IRR, payback;
       depreciation tax shield).
    .. [2] numpy-financial ``npv``/``irr``.
    """
    c = costs
    n = int(life_years)
    t = np.arange(n + 1)
    growth = np.where(t >= 1, (1.0 + escalation) ** np.maximum(t - 1, 0), 0.0)
    counted = bool(c and c.count_loss_reduction)
    savings = annual_savings * growth
    loss_red = (loss_reduction_value if counted else 0.0) * growth
    om = np.where(t >= 1, float(annual_om_value), 0.0)
    losses = annual_loss_cost * growth
    capex_row = np.where(t == 0, float(capex_value), 0.0)
    incentive = np.zeros(n + 1)
    replacement = np.zeros(n + 1)
    depreciation = np.zeros(n + 1)
    tax = np.zeros(n + 1)
    operating = savings + loss_red - om - losses
    if c is not None:
        if c.incentive:
            incentive[c.incentive_year] = c.incentive
        if c.replacement_year is not None and c.replacement_cost:
            replacement[c.replacement_year] = c.replacement_cost
        if c.tax_rate:
            years_dep = c.depreciation_years or n
            base = max(0.0, float(capex_value) - c.incentive)
            depreciation[1:years_dep + 1] = base / years_dep
            taxable = operating - replacement - depreciation
            tax = np.where(t >= 1, c.tax_rate * taxable, 0.0)
    flows = operating - replacement + incentive - tax - capex_row
    disc = flows / (1.0 + discount_rate) ** t
    cumulative = np.cumsum(flows)
    cumulative_disc = np.cumsum(disc)
    rows = tuple(
        {
            "year": int(k),
            "savings": float(savings[k]),
            "loss_reduction": float(loss_red[k]),
            "om": float(om[k]),
            "losses": float(losses[k]),
            "replacement": float(replacement[k]),
            "incentive": float(incentive[k]),
            "capex": float(capex_row[k]),
            "depreciation": float(depreciation[k]),
            "tax": float(tax[k]),
            "net": float(flows[k]),
            "cumulative": float(cumulative[k]),
            "discounted_cumulative": float(cumulative_disc[k]),
        }
        for k in range(n + 1)
    )
    inc = float(c.incentive) if c is not None else 0.0
    first_year = float(operating[1] - tax[1]) if n >= 1 else 0.0
    return FinanceResult(
        capex=float(capex_value),
        annual_savings=float(annual_savings),
        annual_om=float(annual_om_value),
        annual_loss_cost=float(annual_loss_cost),
        life_years=n,
        discount_rate=float(discount_rate),
        escalation=float(escalation),
        flows=tuple(float(x) for x in flows),
        npv=npv(discount_rate, flows),
        irr=irr(flows),
        simple_payback_years=simple_payback_years(float(capex_value) - inc, first_year),
        discounted_payback_years=discounted_payback_years(flows, discount_rate),
        cash_flow=rows,
        incentive=inc,
        incentive_year=int(c.incentive_year) if c is not None else 0,
        replacement_year=c.replacement_year if c is not None else None,
        replacement_cost=float(c.replacement_cost) if c is not None else 0.0,
        tax_rate=float(c.tax_rate) if c is not None else 0.0,
        depreciation_years=(c.depreciation_years or n) if c is not None and c.tax_rate else None,
        loss_reduction_kwh=float(loss_reduction_kwh_value),
        annual_loss_reduction_value=float(loss_reduction_value),
        loss_reduction_counted=counted,
    )


#: Sensitivity steps of the finance items, relative to their value.
ITEM_STEPS = (-0.20, 0.20)


def item_sensitivity(base: FinanceResult, costs: CostInputs) -> tuple[dict, ...]:
    """Rows of the sensitivity table for the optional items of ``costs`` that are set:
    incentive, replacement cost and tax rate ±20 %; the loss reduction ±20 % when counted, or
    counted in full (change +100 %) when it is not. Each row: factor, change, setting (words),
    annual_savings, npv, irr, simple_payback_years."""
    rows: list[dict] = []

    def again(changed: CostInputs, loss_value: float = base.annual_loss_reduction_value) -> FinanceResult:
        return evaluate(base.capex, base.annual_savings, annual_om_value=base.annual_om,
                        annual_loss_cost=base.annual_loss_cost, life_years=base.life_years,
                        discount_rate=base.discount_rate, escalation=base.escalation, costs=changed,
                        loss_reduction_value=loss_value, loss_reduction_kwh_value=base.loss_reduction_kwh)

    def row(factor: str, change: float, setting: str, res: FinanceResult) -> dict:
        return {"factor": factor, "change": change, "setting": setting, "annual_savings": res.annual_savings,
                "npv": res.npv, "irr": res.irr, "simple_payback_years": res.simple_payback_years}

    for name, label in (("incentive", "incentive"), ("replacement_cost", "replacement cost"),
                        ("tax_rate", "tax rate")):
        value = getattr(costs, name)
        if not value:
            continue
        for change in ITEM_STEPS:
            new = value * (1.0 + change)
            if name == "tax_rate":
                new = min(new, 0.99)
            rows.append(row(label, change, f"{change:+.0%}", again(costs.with_(**{name: new}))))
    if base.annual_loss_reduction_value > 0:
        if costs.count_loss_reduction:
            for change in ITEM_STEPS:
                rows.append(row("loss reduction", change, f"{change:+.0%}",
                                again(costs, base.annual_loss_reduction_value * (1.0 + change))))
        else:
            rows.append(row("loss reduction", 1.0, "counted", again(costs.with_(count_loss_reduction=True))))
    return tuple(rows)
