"""Bill reconciliation: each utility bill against the same period computed from the interval data.

Pure layer: bill records, an interval frame and a tariff in, frozen findings out. No store, no
Flask. For every bill the expected figures come from the project's own audit
(:func:`auditor.audit.prepare_audit` with the bill's own period boundaries, never calendar
months); the bill is then compared field by field with :class:`Tolerances`, and every
difference beyond tolerance becomes a :class:`Finding` with a severity, a probable cause where
the pattern is recognisable and the money it makes disputable.

Fields and what the expected value is
-------------------------------------
``kwh`` active energy; ``kvarh`` the reactive energy the tariff counts (its ``kvarh_basis``:
lagging, net or lagging plus leading); ``peak_kw`` and ``peak_kva`` the highest interval demand
(kVA with net reactive power); ``pf`` the tariff-basis energy PF after the tariff's rounding
(what the PF clauses use); ``reactive_charge`` the sum of the tariff's reactive / PF charges;
``total`` the whole bill before tax.

Tolerances (a difference exactly at the tolerance is *not* a finding)
---------------------------------------------------------------------
energy fields ``energy_percent`` of the expected value (default 0.5 %); demand fields
``demand_percent`` (1 %); ``pf`` an absolute ``pf`` (0.01); charges the larger of
``charge_percent`` of the expected amount (1 %) and ``charge_abs`` currency units (1).

Missing and estimated data
--------------------------
Below ``min_coverage`` (95 %) of the expected intervals a bill is not compared at all: a warning
says so, and no finding is made. Between that and 100 % (with a warning), the computed value of
each energy, charge and the PF becomes a range: from the data as they are to the data with every
missing interval filled at the period's highest recorded kWh and kvarh (:func:`fill_gaps_high`);
a bill inside the range, widened by the tolerance, is not a finding. A billed peak above the
computed one is not compared then (a missing interval may have held the peak). A period whose
data are more than ``max_estimated_share`` (5 %) estimated gets its findings with the cause
``estimated_data``.

Causes (bill-level patterns, tested in this order; see the functions of the same names)
-------------------------------------------------------------------------------------
``estimated_data``
    more than ``max_estimated_share`` of the period's intervals are estimated: the difference
    probably comes from estimates (the bill's or the data's); ask for actual reads.
``multiplier``
    at least two of kWh, kvarh, peak kW, peak kVA differ by the *same* ratio (each within its own
    tolerance of the common ratio) and the PF, which a multiplier leaves alone, agrees: a wrong
    meter multiplier or CT / VT ratio (common practice). Tested by :func:`common_ratio`: the
    word "multiplier" alone stays the meter's CT × VT factor (``Meter.multiplier``).
``period_shift``
    the billed kWh (and kvarh, when billed) match the same-length period moved by 1 to
    ``max_shift_days`` days with complete data: the bill's dates do not match its reads. When
    the bill shows only energies, a matching shift wins over a common ratio (a multiplier would
    scale the peaks too; without peaks on the bill the shift is the more specific match).
``lag_plus_lead``
    the billed kvarh, PF or charges match the figures with leading kvarh counted as lagging
    (lag + lead) while the tariff counts otherwise.
``reactive_above_threshold``
    a reactive charge is billed beyond the computed one although the PF is at or above the
    tariff's threshold, where its lagging clauses charge nothing (windowed clauses may still
    charge the little the computed figure holds).
``demand_interval``
    the billed peak matches the demand recomputed over a longer interval (30 or 60 minutes,
    whole aligned blocks of the data's intervals).
A finding no pattern explains has ``cause = None`` ("unexplained"). :data:`CAUSE_LABELS` gives each
cause the one name every table, page and letter shows; a bill's ``causes`` are exactly the causes
of its findings, so the summary of a bill and its findings name the same cause.

Money at stake
--------------
A finding's ``money`` is what it makes disputable, in the tariff's currency, never negative
(an undercharge is reported with money 0):

- ``total`` and ``reactive_charge``: the billed amount above the expected amount (above the top
  of the range when data are missing);
- ``kwh``: the kWh above the expected, at the period's average energy price;
- the peak of the tariff's demand basis (``peak_kw`` or ``peak_kva``): the excess times the
  demand price (ratchet effects ignored); the other peak, ``kvarh`` and ``pf``: 0, because their
  money shows only through a billed reactive charge;
- findings with cause ``estimated_data`` or ``period_shift``: 0 (not disputable on this
  evidence: estimates are replaced by reads, and a shifted period moves energy between
  consecutive bills instead of adding it).

A bill's ``disputable`` amount counts each currency unit once: the ``total`` finding's money when
the bill shows a total (the total contains every other charge); otherwise the
``reactive_charge`` finding's money plus the ``kwh`` and demand findings' money (separate
charges). ``total_disputable`` is the sum over bills.

Severity
--------
``low`` for findings with cause ``estimated_data`` or ``period_shift``; otherwise ``high`` when
its money reaches ``high_money`` (100 currency units); ``medium`` when it has money, or when the
difference is more than three times its tolerance; ``low`` for the rest.

References
----------
.. [1] IEEE Std 1459-2010, section 3.1.1: PF = P / S and tan phi = Q / P, applied to period
   energies (the energy PF the tariffs bill on).
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, fields, replace
from datetime import date, timedelta

import numpy as np
import pandas as pd

from auditor.audit import AuditResult, PeriodResult, PreparedAudit, prepare_audit
from auditor.errors import UsageError
from auditor.quantities import (
    BillingPeriod,
    local_bounds_utc,
    segment_bounds,
    segment_max,
)
from auditor.tariffs.engine import kvarh_of
from auditor.tariffs.facts import lagging_keys, pf_threshold  # noqa: F401 (lagging_keys: public name)
from auditor.tariffs.model import Tariff

__all__ = [
    "BILL_FIELDS",
    "CAUSES",
    "CAUSE_LABELS",
    "FIELD_DIGITS",
    "cause_label",
    "Alternatives",
    "BillCheck",
    "BillRecord",
    "Finding",
    "Reconciliation",
    "Tolerances",
    "alternative_figures",
    "check",
    "expected_figures",
    "fill_gaps_high",
    "demand_interval",
    "lag_plus_lead",
    "common_ratio",
    "period_shift",
    "pf_threshold",
    "reactive_above_threshold",
    "reconcile",
]

BILL_FIELDS = ("kwh", "kvarh", "peak_kw", "peak_kva", "pf", "reactive_charge", "total")
ENERGY_FIELDS = ("kwh", "kvarh")
DEMAND_FIELDS = ("peak_kw", "peak_kva")
CHARGE_FIELDS = ("reactive_charge", "total")
QUANTITY_FIELDS = ENERGY_FIELDS + DEMAND_FIELDS
ADDITIVE_FIELDS = ENERGY_FIELDS + CHARGE_FIELDS  # sums over intervals: missing data lowers them
CAUSES = ("estimated_data", "multiplier", "period_shift", "lag_plus_lead", "reactive_above_threshold",
          "demand_interval")
NOT_DISPUTABLE = ("estimated_data", "period_shift")
#: The name of each cause as tables, pages and the billing query show it (one wording everywhere).
CAUSE_LABELS = {
    "estimated_data": "estimated data",
    "multiplier": "wrong meter multiplier",
    "period_shift": "shifted bill period",
    "lag_plus_lead": "leading kvarh counted as lagging",
    "reactive_above_threshold": "reactive charge above the PF threshold",
    "demand_interval": "demand over a longer interval",
    None: "unexplained",
}
#: Decimals each bill field is shown with (money always to the cent).
FIELD_DIGITS = {"kwh": 0, "kvarh": 0, "peak_kw": 2, "peak_kva": 2, "pf": 3, "reactive_charge": 2, "total": 2}
#: Longest account or invoice number kept (the store's column width).
NUMBER_MAX = 64
LONGER_DEMAND_MINUTES = (15, 30, 60)
# Floating-point slack on tolerance comparisons: a difference exactly at the tolerance is within
# it even when binary arithmetic lands a hair above (0.85 - 0.84 = 0.010000000000000009).
_SLACK = 1e-9


# --------------------------------------------------------------------------------------------
# Inputs
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BillRecord:
    """One utility bill as printed: the period (local dates, end exclusive) and any figures.

    Every figure is optional; ``None`` means the bill does not show it. ``kvarh`` is the reactive
    energy the tariff counts; ``pf`` the power factor the bill states.
    """

    meter: str
    period_start: date
    period_end: date
    kwh: float | None = None
    kvarh: float | None = None
    peak_kw: float | None = None
    peak_kva: float | None = None
    pf: float | None = None
    reactive_charge: float | None = None
    total: float | None = None
    account: str | None = None  # the utility's account number, as printed
    invoice: str | None = None  # the bill's invoice number, as printed
    source: str | None = None  # file name, or "manual entry"
    line: int | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.period_start, date) or not isinstance(self.period_end, date):
            raise UsageError("a bill needs a period start and end date")
        if self.period_end <= self.period_start:
            raise UsageError(f"bill for {self.meter}: period end {self.period_end} must be after its start "
                             f"{self.period_start}")

    @property
    def period(self) -> BillingPeriod:
        return BillingPeriod(self.period_start, self.period_end)

    def billed(self) -> dict[str, float | None]:
        return {f: getattr(self, f) for f in BILL_FIELDS}

    def to_dict(self) -> dict:
        return {"meter": self.meter, "period_start": self.period_start.isoformat(),
                "period_end": self.period_end.isoformat(), "account": self.account, "invoice": self.invoice,
                **self.billed(), "source": self.source, "line": self.line}


@dataclass(frozen=True)
class Tolerances:
    """How far a billed figure may be from the computed one before it is a finding.

    Percentages are of the expected value; ``pf`` is absolute. See the module docstring for the
    coverage, estimated-data and severity thresholds.
    """

    energy_percent: float = 0.5
    demand_percent: float = 1.0
    pf: float = 0.01
    charge_percent: float = 1.0
    charge_abs: float = 1.0
    min_coverage: float = 0.95
    max_estimated_share: float = 0.05
    high_money: float = 100.0
    max_shift_days: int = 7

    def __post_init__(self) -> None:
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v) or v < 0:
                raise UsageError(f"tolerance {f.name} must be a number of at least 0, got {v!r}")
        if not 0 <= self.min_coverage <= 1 or not 0 <= self.max_estimated_share <= 1:
            raise UsageError("min_coverage and max_estimated_share are shares from 0 to 1")
        if int(self.max_shift_days) != self.max_shift_days or self.max_shift_days > 31:
            raise UsageError(f"max_shift_days must be a whole number of days up to 31, got {self.max_shift_days!r}")

    def allowed(self, field_name: str, expected: float) -> float:
        """The largest difference that is not a finding for ``field_name`` at ``expected``."""
        e = abs(float(expected))
        if field_name in ENERGY_FIELDS:
            return self.energy_percent / 100.0 * e
        if field_name in DEMAND_FIELDS:
            return self.demand_percent / 100.0 * e
        if field_name == "pf":
            return self.pf
        if field_name in CHARGE_FIELDS:
            return max(self.charge_percent / 100.0 * e, self.charge_abs)
        raise UsageError(f"unknown bill field {field_name!r}; fields: {', '.join(BILL_FIELDS)}")

    def within(self, field_name: str, billed: float, expected: float) -> bool:
        return abs(billed - expected) <= self.allowed(field_name, expected) + _SLACK * max(1.0, abs(expected))

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


# --------------------------------------------------------------------------------------------
# Outputs
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Finding:
    """One billed figure outside its tolerance."""

    meter: str
    period_start: date
    period_end: date
    field: str
    billed: float
    expected: float
    difference: float  # billed - expected
    relative_difference: float | None  # difference / expected (None when expected is 0)
    tolerance: float
    severity: str  # low | medium | high
    cause: str | None
    explanation: str
    money: float
    expected_at: str | None = None  # peaks: local ISO time of the computed peak's interval start

    def to_dict(self) -> dict:
        return {"meter": self.meter, "period_start": self.period_start.isoformat(),
                "period_end": self.period_end.isoformat(), "field": self.field, "billed": self.billed,
                "expected": self.expected, "expected_at": self.expected_at, "difference": self.difference,
                "relative_difference": self.relative_difference, "tolerance": self.tolerance,
                "severity": self.severity, "cause": self.cause, "cause_label": cause_label(self.cause),
                "explanation": self.explanation, "money": self.money}


@dataclass(frozen=True)
class BillCheck:
    """One bill, its expected figures, and what the comparison found."""

    bill: BillRecord
    expected: dict[str, float | None]
    coverage: float
    estimated_share: float
    compared: bool
    findings: tuple[Finding, ...]
    causes: tuple[str, ...]
    disputable: float
    warnings: tuple[str, ...]
    details: dict = field(default_factory=dict)  # cause -> its evidence (ratio, days, minutes)
    expected_at: dict = field(default_factory=dict)  # peak_kw / peak_kva -> local ISO time of the peak

    def cause_labels(self) -> list[str]:
        """The names of its findings' causes, in the order of :data:`CAUSES`, then
        "unexplained" if a finding has no recognised cause."""
        labels = [CAUSE_LABELS[c] for c in self.causes]
        if any(f.cause is None for f in self.findings):
            labels.append(CAUSE_LABELS[None])
        return labels

    @property
    def status(self) -> str:
        if not self.compared:
            return "not_compared"
        return "findings" if self.findings else "ok"

    def to_dict(self) -> dict:
        return {**self.bill.to_dict(), "billed": self.bill.billed(), "expected": _clean(self.expected),
                "coverage": _num(self.coverage), "estimated_share": _num(self.estimated_share),
                "compared": self.compared, "status": self.status, "causes": list(self.causes),
                "cause_labels": self.cause_labels(), "cause_details": self.details,
                "expected_at": dict(self.expected_at), "findings": len(self.findings),
                "disputable": self.disputable, "warnings": list(self.warnings)}


@dataclass(frozen=True)
class Reconciliation:
    checks: tuple[BillCheck, ...]
    currency: str
    tariff_name: str
    tolerances: Tolerances
    warnings: tuple[str, ...] = ()

    @property
    def findings(self) -> tuple[Finding, ...]:
        return tuple(f for c in self.checks for f in c.findings)

    @property
    def total_disputable(self) -> float:
        return float(sum(c.disputable for c in self.checks))

    def to_dict(self) -> dict:
        return {"tariff": self.tariff_name, "currency": self.currency, "tolerances": self.tolerances.to_dict(),
                "bills": [c.to_dict() for c in self.checks], "findings": [f.to_dict() for f in self.findings],
                "total_disputable": round(self.total_disputable, 2), "warnings": list(self.warnings)}


def cause_label(cause: str | None) -> str:
    """The name a cause is shown by (:data:`CAUSE_LABELS`); an unknown key is shown as given."""
    return CAUSE_LABELS.get(cause, str(cause))


def _num(x) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _clean(d: dict) -> dict:
    return {k: _num(v) for k, v in d.items()}


# --------------------------------------------------------------------------------------------
# Alternative figures for the cause detection (computed from the intervals, vectorised)
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Alternatives:
    """Per-bill figures under the alternative readings the causes test.

    ``lpl_*``: with leading kvarh counted as lagging (lag + lead, no leading); ``shift_days``
    the offsets tried, ``shifted_kwh`` / ``shifted_kvarh`` / ``shifted_complete`` of shape
    (bills, offsets); ``demand_minutes`` the longer interval lengths and ``peak_kw_at`` /
    ``peak_kva_at`` of shape (bills, lengths) (NaN where no whole block exists).
    """

    lpl_kvarh: np.ndarray
    lpl_pf: np.ndarray
    lpl_reactive: np.ndarray
    lpl_total: np.ndarray
    shift_days: np.ndarray
    shifted_kwh: np.ndarray
    shifted_kvarh: np.ndarray
    shifted_complete: np.ndarray
    demand_minutes: tuple[int, ...]
    peak_kw_at: np.ndarray
    peak_kva_at: np.ndarray


def _local_day_numbers(index_utc: pd.DatetimeIndex, tz: str) -> np.ndarray:
    """Local calendar day of each instant as days since 1970-01-01."""
    naive = index_utc.tz_convert(tz).tz_localize(None).as_unit("s")
    return (naive.asi8 // 86400).astype(np.int64)


def _shifted_sums(frame: pd.DataFrame, tariff: Tariff, periods: Sequence[BillingPeriod], tz: str,
                  interval_minutes: int, max_days: int):
    """kWh, tariff-basis kvarh and completeness of every period moved by ±1..max_days days."""
    offsets = np.array([d for d in range(-max_days, max_days + 1) if d != 0], dtype=np.int64)
    n = len(periods)
    if not len(offsets) or not n:
        z = np.zeros((n, len(offsets)))
        return offsets, z, z, z.astype(bool)
    epoch = date(1970, 1, 1)
    first = min(p.start for p in periods) - timedelta(days=max_days)
    last = max(p.end for p in periods) + timedelta(days=max_days)
    d0, d1 = (first - epoch).days, (last - epoch).days
    ndays = d1 - d0
    if len(frame):
        day = _local_day_numbers(frame.index, tz) - d0
        keep = (day >= 0) & (day < ndays)
        day = day[keep]
        kwh = frame["kwh"].to_numpy(float)[keep]
        kvarh = kvarh_of(tariff.kvarh_basis, frame["kvarh_lag"].to_numpy(float)[keep],
                         frame["kvarh_lead"].to_numpy(float)[keep])
        day_kwh = np.bincount(day, weights=kwh, minlength=ndays)
        day_kvarh = np.bincount(day, weights=kvarh, minlength=ndays)
        day_n = np.bincount(day, minlength=ndays)
    else:
        day_kwh = day_kvarh = np.zeros(ndays)
        day_n = np.zeros(ndays, dtype=np.int64)
    dates = [first + timedelta(days=i) for i in range(ndays + 1)]
    bounds = local_bounds_utc(dates, tz)
    day_expected = np.floor(np.diff(bounds.as_unit("s").asi8) / (interval_minutes * 60) + 1e-9).astype(np.int64)
    cum = [np.concatenate([[0.0], np.cumsum(a)]) for a in (day_kwh, day_kvarh, day_n, day_expected)]
    s = np.array([(p.start - epoch).days - d0 for p in periods])[:, None] + offsets[None, :]
    e = np.array([(p.end - epoch).days - d0 for p in periods])[:, None] + offsets[None, :]
    kwh_s, kvarh_s, n_s, exp_s = (c[e] - c[s] for c in cum)
    return offsets, kwh_s, kvarh_s, (n_s == exp_s) & (exp_s > 0)


def _longer_peaks(prepared: PreparedAudit, minutes: int) -> tuple[np.ndarray, np.ndarray]:
    """Peak kW and kVA per period over whole aligned blocks of ``minutes``."""
    n = len(prepared.periods)
    if prepared.kwh.size == 0:
        return np.full(n, np.nan), np.full(n, np.nan)
    per_block = minutes // prepared.interval_minutes
    seg = np.repeat(np.arange(n), np.diff(prepared.bounds))
    # Blocks aligned on UTC multiples of the length: for whole-hour zone offsets that is the
    # local clock too.
    block = prepared.index.as_unit("s").asi8 // (minutes * 60)
    df = pd.DataFrame({"seg": seg, "block": block, "kwh": prepared.kwh,
                       "kvarh_net": prepared.kvarh_lag - prepared.kvarh_lead})
    g = df.groupby(["seg", "block"], sort=True).agg(kwh=("kwh", "sum"), kvarh_net=("kvarh_net", "sum"),
                                                    count=("kwh", "size"))
    g = g[g["count"] == per_block]
    kw = g["kwh"].to_numpy() * 60.0 / minutes
    kva = np.hypot(kw, g["kvarh_net"].to_numpy() * 60.0 / minutes)
    segs = g.index.get_level_values("seg").to_numpy()
    b = np.searchsorted(segs, np.arange(n + 1), side="left")
    return segment_max(kw, b), segment_max(kva, b)


def alternative_figures(prepared: PreparedAudit, frame: pd.DataFrame, *, max_shift_days: int = 7) -> Alternatives:
    """The figures the cause tests compare a bill with, for the periods of ``prepared``.

    Parameters
    ----------
    prepared : PreparedAudit
        The audit prepared over the bill periods (:func:`auditor.audit.prepare_audit`).
    frame : pandas.DataFrame
        The meter's interval frame, including days around the periods (for the shifted periods).
    max_shift_days : int
        Shifts tried: 1 to this many days either way.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (PF from period energies).
    """
    tariff = prepared.tariff
    lpl = prepared.run(kvarh_lag=prepared.kvarh_lag + prepared.kvarh_lead, kvarh_lead=np.zeros_like(prepared.kvarh_lead))
    lpl_kvarh = np.array([p.kvarh_lag for p in lpl.periods])  # every basis counts lag + lead then
    lpl_pf = np.array([p.billing_pf for p in lpl.periods])
    offsets, kwh_s, kvarh_s, complete = _shifted_sums(frame, tariff, prepared.periods, prepared.tz,
                                                      prepared.interval_minutes, int(max_shift_days))
    lengths = tuple(m for m in LONGER_DEMAND_MINUTES if m > prepared.interval_minutes and m % prepared.interval_minutes == 0)
    n = len(prepared.periods)
    kw_at = np.full((n, len(lengths)), np.nan)
    kva_at = np.full((n, len(lengths)), np.nan)
    for j, m in enumerate(lengths):  # two or three lengths, each vectorised over intervals
        kw_at[:, j], kva_at[:, j] = _longer_peaks(prepared, m)
    return Alternatives(
        lpl_kvarh=lpl_kvarh, lpl_pf=lpl_pf,
        lpl_reactive=np.array([p.reactive_total for p in lpl.periods]),
        lpl_total=np.array([p.total for p in lpl.periods]),
        shift_days=offsets, shifted_kwh=kwh_s, shifted_kvarh=kvarh_s, shifted_complete=complete,
        demand_minutes=lengths, peak_kw_at=kw_at, peak_kva_at=kva_at,
    )


# --------------------------------------------------------------------------------------------
# Cause tests (one bill at a time; a bill has a dozen numbers)
# --------------------------------------------------------------------------------------------
def _finite(x) -> bool:
    return x is not None and math.isfinite(float(x))


def common_ratio(billed: dict, expected: dict, tol: Tolerances) -> float | None:
    """The common ratio billed / expected when every billed quantity shares it, else None.

    At least two of kWh, kvarh, peak kW and peak kVA must be billed; each ratio must lie within
    its field's relative tolerance of the median ratio, the ratio must differ from 1 by more than
    the widest of those tolerances, and a billed PF must agree with the computed one (a
    multiplier scales P and Q alike, so PF = P / S does not change; IEEE Std 1459-2010, 3.1.1).
    """
    ratios = {}
    for f in QUANTITY_FIELDS:
        b, e = billed.get(f), expected.get(f)
        if _finite(b) and _finite(e) and e > 0:
            ratios[f] = b / e
    if len(ratios) < 2:
        return None
    r = float(np.median(list(ratios.values())))
    rel = {f: tol.allowed(f, 1.0) for f in ratios}
    if abs(r - 1.0) <= max(rel.values()) + _SLACK:
        return None
    if any(abs(ratios[f] / r - 1.0) > rel[f] + _SLACK for f in ratios):
        return None
    if _finite(billed.get("pf")) and _finite(expected.get("pf")) and not tol.within("pf", billed["pf"], expected["pf"]):
        return None
    return r


def period_shift(billed: dict, k: int, alt: Alternatives, tol: Tolerances) -> int | None:
    """Days by which the bill's period seems moved: the offset whose complete shifted period
    matches the billed kWh (and kvarh, when billed) best within tolerance, else None."""
    b_kwh = billed.get("kwh")
    if not _finite(b_kwh) or not alt.shift_days.size:
        return None
    best, best_diff = None, math.inf
    b_kvarh = billed.get("kvarh")
    for j, d in enumerate(alt.shift_days):  # at most 2 x 31 offsets
        if not alt.shifted_complete[k, j]:
            continue
        e = float(alt.shifted_kwh[k, j])
        if not tol.within("kwh", b_kwh, e):
            continue
        if _finite(b_kvarh) and not tol.within("kvarh", b_kvarh, float(alt.shifted_kvarh[k, j])):
            continue
        diff = abs(b_kwh - e) + abs(d) * 1e-9  # ties go to the smaller shift
        if diff < best_diff:
            best, best_diff = int(d), diff
    return best


def lag_plus_lead(billed: dict, expected: dict, k: int, alt: Alternatives, tol: Tolerances) -> set[str]:
    """Fields whose billed value matches the figures with leading kvarh counted as lagging
    (and not the computed ones). Empty when the period has too little leading energy to tell."""
    e_kvarh = expected.get("kvarh")
    a = {"kvarh": alt.lpl_kvarh[k], "pf": alt.lpl_pf[k], "reactive_charge": alt.lpl_reactive[k],
         "total": alt.lpl_total[k]}
    if not _finite(e_kvarh) or tol.within("kvarh", float(a["kvarh"]), e_kvarh):
        return set()
    out = set()
    for f, v in a.items():
        b, e = billed.get(f), expected.get(f)
        if _finite(b) and _finite(v) and tol.within(f, b, float(v)) and not (_finite(e) and tol.within(f, b, e)):
            out.add(f)
    return out


def reactive_above_threshold(billed: dict, expected: dict, period: PeriodResult, tariff: Tariff,
                             tol: Tolerances) -> bool:
    """A reactive charge above the computed one while the PF (the bill's, else the computed
    billing PF) is at or above the tariff's threshold (:func:`pf_threshold`).

    Clauses limited to time windows may still charge a little when the window's PF is lower
    than the period's; the computed charge includes that, and only the excess over it counts.
    """
    threshold = pf_threshold(tariff)
    b = billed.get("reactive_charge")
    if threshold is None or not _finite(b) or not _finite(expected.get("reactive_charge")):
        return False
    if b - expected["reactive_charge"] <= tol.allowed("reactive_charge", expected["reactive_charge"]) + _SLACK:
        return False
    pf = billed.get("pf") if _finite(billed.get("pf")) else expected.get("pf")
    return _finite(pf) and pf + _SLACK >= threshold


def demand_interval(billed: dict, k: int, alt: Alternatives, tol: Tolerances) -> dict[str, int]:
    """Peak fields whose billed value matches the demand over a longer interval: field -> minutes."""
    out = {}
    for f, arr in (("peak_kw", alt.peak_kw_at), ("peak_kva", alt.peak_kva_at)):
        b = billed.get(f)
        if not _finite(b):
            continue
        for j, m in enumerate(alt.demand_minutes):
            v = arr[k, j]
            if _finite(v) and tol.within(f, b, float(v)):
                out[f] = m
                break
    return out


# --------------------------------------------------------------------------------------------
# Reconciliation
# --------------------------------------------------------------------------------------------
def expected_figures(period: PeriodResult, tariff: Tariff) -> dict[str, float]:
    """The computed value of every bill field for one period (see the module docstring)."""
    return {
        "kwh": period.kwh,
        "kvarh": float(kvarh_of(tariff.kvarh_basis, period.kvarh_lag, period.kvarh_lead)),
        "peak_kw": period.peak_kw,
        "peak_kva": period.peak_kva,
        "pf": period.billing_pf,
        "reactive_charge": period.reactive_total,
        "total": period.total,
    }


_CAUSE_TEXT = {
    "estimated_data": "{share:.0%} of the period's interval data are estimated; the difference probably comes "
                      "from estimates. Ask for actual reads before disputing.",
    "multiplier": "Every billed quantity is {ratio:.4g} times the metered one: probably a wrong meter multiplier "
                  "(CT or VT ratio).",
    "period_shift": "The billed energy matches the same period moved by {days:+d} days: the bill's dates "
                    "probably do not match its meter reads.",
    "lag_plus_lead": "The billed figure matches leading kvarh counted as lagging (lag + lead); the tariff "
                     "counts {basis}.",
    "reactive_above_threshold": "A reactive charge above the computed one is billed although the power factor "
                                "{pf:.2f} is at or above the tariff's threshold {threshold:.3f}, where its "
                                "lagging clauses charge nothing.",
    "demand_interval": "The billed demand matches the peak over {minutes}-minute intervals instead of the "
                       "meter's {interval}-minute intervals.",
}
_BASIS = {"lag": "lagging kvarh only", "net": "net kvarh (lagging minus leading)",
          "lag_plus_lead": "lagging plus leading kvarh"}


def _severity(cause: str | None, money: float, diff: float, allowed: float, tol: Tolerances) -> str:
    if cause in NOT_DISPUTABLE:
        return "low"
    if money >= tol.high_money - _SLACK:
        return "high"
    if money > 0 or abs(diff) > 3 * allowed + _SLACK:
        return "medium"
    return "low"


def _check_one(bill: BillRecord, p: PeriodResult, k: int, tariff: Tariff, alt: Alternatives | None,
               tol: Tolerances, interval_minutes: int | None, upper: PeriodResult | None = None) -> BillCheck:
    """One bill against period ``k`` of the audit: coverage, fields beyond tolerance, their
    causes, the findings with their money, and what the bill makes disputable."""
    expected = expected_figures(p, tariff)
    peaks_at = {"peak_kw": p.peak_kw_at, "peak_kva": p.peak_kva_at}
    billed = bill.billed()
    label = f"bill {bill.meter} {bill.period_start}..{bill.period_end}"
    coverage, est_share, warnings, comparable = _data_coverage(p, tol, label)
    if not comparable:
        return BillCheck(bill, expected, coverage, est_share, False, (), (), 0.0, tuple(warnings),
                         expected_at=peaks_at)
    up_fig = expected_figures(upper, tariff) if (upper is not None and coverage < 1.0) else None
    raw, upper_of = _beyond_tolerance(billed, expected, up_fig, coverage, tol, label, warnings)
    causes, details = _probable_causes(raw, billed, expected, k, p, tariff, alt, tol, est_share)
    findings = _findings(bill, raw, upper_of, causes, details, p, tariff, billed, expected, tol, interval_minutes)
    disputable = _disputable(findings, billed, _demand_field(tariff))
    # the bill's causes are those its findings carry (the details may hold more evidence)
    ordered = tuple(c for c in CAUSES if any(f.cause == c for f in findings))
    return BillCheck(bill, expected, coverage, est_share, True, tuple(findings), ordered,
                     round(float(disputable), 2), tuple(warnings), details, peaks_at)


def _data_coverage(p: PeriodResult, tol: Tolerances, label: str) -> tuple[float, float, list[str], bool]:
    """Coverage and estimated share of the period's data, their warnings, and whether the bill
    can be compared at all (not below ``min_coverage``)."""
    coverage = p.coverage if math.isfinite(p.coverage) else 0.0
    est_share = p.estimated_intervals / p.intervals if p.intervals else 0.0
    warnings: list[str] = []
    if p.intervals == 0 or coverage + _SLACK < tol.min_coverage:
        warnings.append(f"{label}: the data cover {coverage:.1%} of the period ({p.intervals} of "
                        f"{p.expected_intervals} intervals), below {tol.min_coverage:.0%}; not compared")
        return coverage, est_share, warnings, False
    if coverage < 1.0:
        warnings.append(f"{label}: the data cover {coverage:.1%} of the period ({p.expected_intervals - p.intervals} "
                        f"intervals missing); billed energies and charges are compared with a range up to the "
                        f"missing intervals at the period's highest values, billed peaks above the computed ones "
                        f"are not compared")
    if est_share > 0:
        warnings.append(f"{label}: {p.estimated_intervals} estimated intervals ({est_share:.1%} of the data)")
    return coverage, est_share, warnings, True


def _beyond_tolerance(billed: dict, expected: dict, up_fig: dict | None, coverage: float, tol: Tolerances,
                      label: str, warnings: list[str]) -> tuple[dict[str, tuple[float, float, float]], dict[str, float]]:
    """The fields outside tolerance as ``{field: (billed, expected, allowed)}``, and the top of
    each compared field's range. With missing intervals the computed value is a range from the
    data as they are to the data with every gap filled at the period's highest values."""
    raw: dict[str, tuple[float, float, float]] = {}
    upper_of: dict[str, float] = {}
    for f in BILL_FIELDS:
        b, e = billed[f], expected[f]
        if not _finite(b):
            continue
        if not _finite(e):
            warnings.append(f"{label}: {f} cannot be computed from the data (no load); not compared")
            continue
        allowed = tol.allowed(f, e)
        lo, hi = e, e
        if coverage < 1.0:
            if f in DEMAND_FIELDS and b > e:
                continue  # a missing interval may have held a higher peak
            if f in ADDITIVE_FIELDS:
                hi = max(e, up_fig[f]) if up_fig and _finite(up_fig[f]) else e / coverage
            elif f == "pf" and up_fig and _finite(up_fig["pf"]):
                lo, hi = min(e, up_fig["pf"]), max(e, up_fig["pf"])
        upper_of[f] = hi
        slack = _SLACK * max(1.0, abs(e))
        if b < lo - allowed - slack or b > hi + allowed + slack:
            raw[f] = (b, e, allowed)
    return raw, upper_of


def _probable_causes(raw: dict, billed: dict, expected: dict, k: int, p: PeriodResult, tariff: Tariff,
                     alt: Alternatives | None, tol: Tolerances,
                     est_share: float) -> tuple[dict[str, str], dict[str, object]]:
    """The cause of each field beyond tolerance (first match in the order of ``CAUSES``) and
    the details of every cause found."""
    causes: dict[str, str] = {}
    details: dict[str, object] = {}
    if not raw:
        return causes, details
    if est_share > tol.max_estimated_share + _SLACK:
        details["estimated_data"] = round(est_share, 4)
        causes.update(dict.fromkeys(raw, "estimated_data"))
    ratio = common_ratio(billed, expected, tol)
    shift = period_shift(billed, k, alt, tol) if (alt is not None and "kwh" in raw) else None
    # Energies alone scaled alike may be a shifted period; a multiplier also scales the peaks,
    # which a shift of a few days rarely does, so the peaks decide between the two.
    if ratio is not None and shift is not None and not any(_finite(billed[f]) for f in DEMAND_FIELDS):
        ratio = None
    if ratio is not None:
        details["multiplier"] = round(ratio, 6)
        for f in raw:
            causes.setdefault(f, "multiplier")
    elif shift is not None:
        details["period_shift"] = shift
        for f in raw:
            causes.setdefault(f, "period_shift")
    if alt is not None:
        lpl = lag_plus_lead(billed, expected, k, alt, tol) & set(raw)
        if lpl:
            details["lag_plus_lead"] = sorted(lpl)
            for f in lpl:
                causes.setdefault(f, "lag_plus_lead")
    if "reactive_charge" in raw and reactive_above_threshold(billed, expected, p, tariff, tol):
        details["reactive_above_threshold"] = pf_threshold(tariff)
        causes.setdefault("reactive_charge", "reactive_above_threshold")
        if "total" in raw:
            causes.setdefault("total", "reactive_above_threshold")
    if alt is not None:
        di = {f: m for f, m in demand_interval(billed, k, alt, tol).items() if f in raw}
        if di:
            details["demand_interval"] = di
            for f in di:
                causes.setdefault(f, "demand_interval")
            if "total" in raw and not (set(raw) - set(di) - {"total"}):
                causes.setdefault("total", "demand_interval")
    return causes, details


def _demand_field(tariff: Tariff) -> str | None:
    """The bill field the tariff's demand charge is priced on."""
    if tariff.demand is None:
        return None
    return "peak_kva" if tariff.demand.basis == "kva" else "peak_kw"


def _money(field_name: str, over: float, cause: str | None, p: PeriodResult, tariff: Tariff) -> float:
    """What a finding makes disputable (see "Money at stake" in the module docstring)."""
    if cause in NOT_DISPUTABLE:
        return 0.0
    if field_name in CHARGE_FIELDS:
        return round(over, 2)
    if field_name == "kwh":
        energy_price = p.charges.get("energy", 0.0) / p.kwh if p.kwh > 0 else 0.0
        return round(over * energy_price, 2)
    if field_name == _demand_field(tariff):
        return round(over * tariff.demand.price_per_kw, 2)
    return 0.0


def _findings(bill: BillRecord, raw: dict, upper_of: dict, causes: dict, details: dict, p: PeriodResult,
              tariff: Tariff, billed: dict, expected: dict, tol: Tolerances,
              interval_minutes: int | None) -> list[Finding]:
    findings = []
    for f, (b, e, allowed) in raw.items():
        cause = causes.get(f)
        money = _money(f, max(0.0, b - upper_of[f]), cause, p, tariff)
        diff = b - e
        findings.append(Finding(
            meter=bill.meter, period_start=bill.period_start, period_end=bill.period_end, field=f,
            billed=float(b), expected=float(e), difference=float(diff),
            relative_difference=float(diff / e) if e else None, tolerance=float(allowed),
            severity=_severity(cause, money, diff, allowed, tol), cause=cause,
            explanation=_explain(cause, details, p, tariff, billed, expected, interval_minutes), money=money,
            expected_at={"peak_kw": p.peak_kw_at, "peak_kva": p.peak_kva_at}.get(f),
        ))
    return findings


def _disputable(findings: list[Finding], billed: dict, demand_field: str | None) -> float:
    """Each currency unit once: the total's excess when the bill shows a total, otherwise the
    reactive charge, energy and demand findings' money (separate charges)."""
    by_field = {x.field: x for x in findings}
    if "total" in by_field or _finite(billed["total"]):
        return by_field["total"].money if "total" in by_field else 0.0
    parts = ["reactive_charge", "kwh"] + ([demand_field] if demand_field else [])
    return sum(by_field[f].money for f in parts if f in by_field)


def _explain(cause, details, p, tariff, billed, expected, interval_minutes) -> str:
    if cause is None:
        return "No recognised pattern explains this difference."
    if cause == "estimated_data":
        return _CAUSE_TEXT[cause].format(share=details["estimated_data"])
    if cause == "multiplier":
        return _CAUSE_TEXT[cause].format(ratio=details["multiplier"])
    if cause == "period_shift":
        return _CAUSE_TEXT[cause].format(days=details["period_shift"])
    if cause == "lag_plus_lead":
        return _CAUSE_TEXT[cause].format(basis=_BASIS[tariff.kvarh_basis])
    if cause == "reactive_above_threshold":
        pf = billed["pf"] if _finite(billed.get("pf")) else expected["pf"]
        return _CAUSE_TEXT[cause].format(pf=pf, threshold=details[cause])
    minutes = sorted(set(details["demand_interval"].values()))
    return _CAUSE_TEXT[cause].format(minutes="/".join(str(m) for m in minutes),
                                     interval=interval_minutes or "?")


def reconcile(bills: Sequence[BillRecord], result: AuditResult, tariff: Tariff,
              alternatives: Alternatives | None = None, tolerances: Tolerances | None = None,
              interval_minutes: int | None = None, upper: AuditResult | None = None) -> tuple[BillCheck, ...]:
    """Compare each bill with the audit period of the same boundaries.

    Parameters
    ----------
    bills : sequence of BillRecord
        Bills of one meter, in the order of ``result.periods``.
    result : AuditResult
        The audit over exactly the bills' periods (``prepare_audit(..., periods=...)``).
    tariff : Tariff
        The tariff of the audit (for the kvarh basis, PF threshold and prices).
    alternatives : Alternatives, optional
        From :func:`alternative_figures`; without it only the multiplier, estimated-data and
        reactive-threshold causes are tested.
    tolerances : Tolerances, optional
    interval_minutes : int, optional
        The data's interval length, for the wording of the demand-interval cause.
    upper : AuditResult, optional
        The same audit over the data with gaps filled at each period's highest values
        (:func:`fill_gaps_high`): the top of the range a bill with missing data is compared with.
        Without it, energies and charges are scaled by 1 / coverage.

    Returns
    -------
    tuple of BillCheck

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (PF from period energies).
    """
    tol = tolerances or Tolerances()
    if len(bills) != len(result.periods):
        raise UsageError(f"{len(bills)} bills but {len(result.periods)} audited periods")
    out = []
    for k, (b, p) in enumerate(zip(bills, result.periods, strict=True)):
        if (b.period_start, b.period_end) != (p.start, p.end):
            raise UsageError(f"bill {b.period_start}..{b.period_end} does not match audited period {p.label}")
        up = upper.periods[k] if upper is not None else None
        out.append(_check_one(b, p, k, tariff, alternatives, tol, interval_minutes, up))
    return tuple(out)


def fill_gaps_high(frame: pd.DataFrame, periods: Sequence[BillingPeriod], tz: str,
                   interval_minutes: int) -> pd.DataFrame:
    """``frame`` with every interval missing inside the periods filled with the period's highest
    observed kWh, lagging and leading kvarh (each its own maximum): the most the period could
    plausibly have held if the load never exceeded what was recorded. Filled rows are not
    flagged estimated."""
    step = pd.Timedelta(minutes=interval_minutes)
    starts = local_bounds_utc([p.start for p in periods], tz)
    ends = local_bounds_utc([p.end for p in periods], tz)
    full = pd.DatetimeIndex(np.concatenate([  # one range per bill, each vectorised
        pd.date_range(a, b, freq=step, inclusive="left").as_unit("ns").asi8 for a, b in zip(starts, ends, strict=True)
    ]) if len(periods) else np.zeros(0, "int64")).tz_localize("UTC")
    index = frame.index.as_unit("ns")
    missing = full[~full.isin(index)]
    if not len(missing):
        return frame
    sel, bounds = segment_bounds(frame.index, periods, tz)
    seg = np.searchsorted(starts.as_unit("ns").asi8, missing.asi8, side="right") - 1
    fill = {}
    for c in ("kwh", "kvarh_lag", "kvarh_lead"):
        top = np.nan_to_num(segment_max(frame[c].to_numpy(float)[sel], bounds))
        fill[c] = top[seg]
    extra = pd.DataFrame(fill, index=missing.rename(frame.index.name))
    for c in frame.columns:
        if c not in extra:
            extra[c] = False if c == "estimated" else 0.0
    out = pd.concat([frame.set_axis(index), extra[frame.columns]])
    return out.sort_index()


def _layers(bills: Sequence[BillRecord]) -> list[list[int]]:
    """Bill positions split into runs of non-overlapping periods (overlapping bills, e.g. a
    reissued bill with other dates, are audited in separate passes)."""
    order = sorted(range(len(bills)), key=lambda i: (bills[i].period_start, bills[i].period_end))
    layers: list[list[int]] = []
    for i in order:
        for layer in layers:
            if bills[layer[-1]].period_end <= bills[i].period_start:
                layer.append(i)
                break
        else:
            layers.append([i])
    return layers


def check(bills: Sequence[BillRecord], frame: pd.DataFrame, tariff: Tariff, *, tz: str, interval_minutes: int,
          tolerances: Tolerances | None = None, history_peak_kw: Sequence[float] | None = None) -> Reconciliation:
    """Reconcile the bills of one meter against its interval frame under ``tariff``.

    Audits the bills' own periods (:func:`auditor.audit.prepare_audit`), computes the
    alternative figures and compares (:func:`reconcile`). Bills whose periods overlap are
    audited in separate passes, each with its own demand ratchet history, and a warning.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (P, Q, S, PF).
    """
    tol = tolerances or Tolerances()
    bills = list(bills)
    if not bills:
        raise UsageError("no bills to check")
    meters = {b.meter for b in bills}
    if len(meters) > 1:
        raise UsageError(f"check the bills of one meter at a time, got {', '.join(sorted(meters))}")
    checks: dict[int, BillCheck] = {}
    warnings: list[str] = []
    layers = _layers(bills)
    if len(layers) > 1:
        warnings.append("some bills overlap in time (a reissued bill with other dates?); each is checked on its own")
    for layer in layers:
        lb = [bills[i] for i in layer]
        prepared = prepare_audit(frame, tariff, tz=tz, interval_minutes=interval_minutes,
                                 periods=[b.period for b in lb], history_peak_kw=history_peak_kw)
        result = prepared.run()
        alt = alternative_figures(prepared, frame, max_shift_days=int(tol.max_shift_days))
        upper = None
        if any(p.intervals < p.expected_intervals for p in result.periods):
            filled = fill_gaps_high(frame, prepared.periods, tz, interval_minutes)
            upper = prepare_audit(filled, tariff, tz=tz, interval_minutes=interval_minutes,
                                  periods=prepared.periods, history_peak_kw=history_peak_kw).run()
        for i, c in zip(layer, reconcile(lb, result, tariff, alt, tol, interval_minutes, upper), strict=True):
            checks[i] = c
    ordered = tuple(checks[i] for i in sorted(checks, key=lambda i: (bills[i].period_start, bills[i].period_end)))
    for c in ordered:
        warnings.extend(c.warnings)
    return Reconciliation(ordered, tariff.currency, tariff.name, tol, tuple(warnings))


def with_tolerances(base: Tolerances | None = None, **changes) -> Tolerances:
    """``base`` (default tolerances) with the given fields replaced; None values are ignored."""
    return replace(base or Tolerances(), **{k: v for k, v in changes.items() if v is not None})

