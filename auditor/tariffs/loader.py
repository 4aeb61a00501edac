"""The tariff loader: read a TOML file, validate every key, build the model.

A tariff that does not validate never produces numbers: the first problem raises
:class:`auditor.errors.TariffError` naming the key (``reactive[2].tan_phi_limit``), what is
wrong and what is allowed, and -- for a file -- the line that holds the key (or its table).
Unknown keys are errors too, because a misspelt optional key would otherwise silently change a
bill; the error names the closest known key ("did you mean tan_phi_limit?").

File layout (every key; ``?`` marks optional ones)::

    name = "..."                 currency = "EUR"          description? = "..."
    pf_rounding? = 2 | "none" | { step, mode? }            kvarh_basis? = "lag" | "net" | ...
    [calendar]?   country = "DE"   subdivision? = "BY"      (public holidays, `holidays` library)
    [energy]      price_per_kwh = 0.10                      (outside every window)
      [[energy.windows]]?  name?, days?, hours, months?, holidays?, price_per_kwh
    [demand]?     basis? = "kw" | "kva"   price_per_kw   ratchet_percent?   ratchet_periods? = 11
                  ratchet_on? = "measured" | "billing"   rounding? = { step, mode? }
      [[demand.windows]]?  name?, days?, hours, months?, holidays?, price_per_kw, excess_over?
    [fixed]?      price_per_period
    [[reactive]]* kind = one of MECHANISMS, label?, then the kind's own keys; shared shapes:
                  per? = "period" | "window" | "interval", block_minutes?, excess_rounding?,
                  [[reactive.windows]]? (name, days, hours "HH:MM" or whole hours, months,
                  holidays, kvarh for per-interval clauses), [[reactive.tiers]]?, [[reactive.slopes]]?

A rounding table is ``{ step = 0.01, mode = "up" | "down" | "half_up" | "half_down" }``.

Defaults, documented once here: ``pf_rounding = 2`` (PF rounded half up to two decimals wherever
a tariff compares a PF with a limit or divides by it; figures are reported unrounded);
``kvarh_basis = "lag"`` (lagging kvarh only, the most common rule); demand basis ``"kw"``;
window ``days = "all"``, ``holidays = "as_sunday"`` (a public holiday is billed like a Sunday).

Why a hand-written validator rather than a schema library: see DEVELOPERS.md ("Tariff
mechanisms", "The validator").
"""
from __future__ import annotations

import difflib
import math
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from auditor.errors import TariffError
from auditor.tariffs.model import (
    BASE_CHARGES,
    DAY_GROUPS,
    DAY_NAMES,
    EVALUATIONS,
    HOLIDAY_RULES,
    KVARH_BASES,
    MECHANISMS,
    RATCHET_BASES,
    ROUNDING_MODES,
    Band,
    Calendar,
    DemandCharge,
    DemandWindow,
    EnergyCharge,
    KvarDemand,
    KvarhBanded,
    KvarhExcess,
    LeadingKvarh,
    Mechanism,
    PfDemandAdjust,
    PfPercent,
    Rounding,
    Slope,
    Tariff,
    Tier,
    Window,
)
from auditor.tariffs.toml_lines import deepest_nesting, locate_key

__all__ = ["load_tariff", "tariff_from_dict"]


#: Every key name the tariff format knows, in any table. A key of the file that is missing from
#: this list cannot be a legitimate key read later, so a required key that is absent while such
#: a key is close to it is reported as that key misspelt. ``tests/test_tariff_facts.py`` checks
#: that every key the validator reads is listed.
KNOWN_KEYS = frozenset("""
    above_tan_phi adjusted_rounding allowance_lookback_periods allowance_ratio applies_to
    apply_below_pf bands base_pf basis below_pf block_minutes calendar country credit currency days demand description
    difference_rounding energy excess_over excess_rounding fixed holidays hours kind kvarh
    kvarh_basis label max_credit_percent max_increase_percent max_rebate_percent
    max_surcharge_percent min_pf mode months name per percent_per_hundredth pf pf_rounding
    price_per_kvar price_per_kvarh price_per_kw price_per_kwh price_per_period ratchet_percent
    ratchet_on ratchet_periods reactive rebate_above_pf rebate_percent_per_hundredth reference_pf rounding
    slopes step subdivision tan_phi_limit threshold_pf tiers windows
""".split())


# Plausible ranges (documented in DEVELOPERS.md, "Ranges"). Wide enough for every currency in
# use (a kWh costs thousands in some), narrow enough that no finite meter figure times a price
# overflows a float, so totals stay finite.
MAX_PRICE_PER_UNIT = 1e6  # per kWh or kvarh
MAX_PRICE_PER_DEMAND = 1e8  # per kW, kVA or kvar of demand
MAX_FIXED = 1e10  # per billing period
MAX_TAN_PHI = 10.0  # tan phi 10 <-> PF 0.0995: any real limit is far below
MAX_PERCENT = 1000.0  # caps on surcharges and rebates, in percent
MAX_NESTING = 16  # arrays / inline tables inside each other; a tariff needs 2

PRICE_UNIT = dict(lo=0, hi=MAX_PRICE_PER_UNIT, what=f"a price of at least 0 and at most {MAX_PRICE_PER_UNIT:g}")
PRICE_DEMAND = dict(lo=0, hi=MAX_PRICE_PER_DEMAND, what=f"a price of at least 0 and at most {MAX_PRICE_PER_DEMAND:g}")
TAN_PHI = dict(lo=0, hi=MAX_TAN_PHI, what=f"a tan phi limit of at least 0 and at most {MAX_TAN_PHI:g}")
PERCENT = dict(lo=0, hi=MAX_PERCENT, what=f"a percentage of at least 0 and at most {MAX_PERCENT:g}")
PERCENT_PER_STEP = dict(lo=0, hi=100, what="a percentage of at least 0 and at most 100")


def _closest(word: str, candidates, cutoff: float = 0.75) -> str | None:
    """The candidate closest to a misspelt ``word`` (difflib ratio at least ``cutoff``), or None."""
    found = difflib.get_close_matches(word, sorted(candidates), n=1, cutoff=cutoff)
    return found[0] if found else None


# --------------------------------------------------------------------------------------------
# Validation helpers
# --------------------------------------------------------------------------------------------
class _V:
    """Reads one table, naming keys by their full path, and rejects keys nobody read."""

    def __init__(self, data: Any, path: str, source: str | None):
        self.path = path
        self.source = source
        if not isinstance(data, Mapping):
            self.fail(path or "(top level)", f"must be a table, got {_type(data)}")
        self.data = data
        self.used: set[str] = set()

    def key(self, k: str) -> str:
        return f"{self.path}.{k}" if self.path else k

    def fail(self, key: str, message: str):
        raise TariffError(key, message, self.source)

    def has(self, k: str) -> bool:
        return k in self.data

    #: Every key name any table has read (for the vocabulary check of the tests).
    seen: set[str] = set()

    def raw(self, k: str, required: bool = False, what: str = "a value"):
        self.used.add(k)
        _V.seen.add(k)
        if k not in self.data:
            if required:
                # A misspelling of the required key is reported as what it is.
                typo = _closest(k, [x for x in self.data if x not in KNOWN_KEYS and x not in self.used])
                if typo is not None:
                    self.fail(self.key(typo), f"unknown key; did you mean {k!r}? ({k} is required: {what})")
                self.fail(self.key(k), f"is required ({what})")
            return None
        return self.data[k]

    def number(self, k, *, required=False, default=None, lo=None, hi=None, lo_open=False, what="a number"):
        v = self.raw(k, required, what)
        if v is None:
            return default
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            self.fail(self.key(k), f"must be {what}, got {_repr(v)}")
        if lo is not None and (v < lo or (lo_open and v == lo)):
            self.fail(self.key(k), f"must be {what}, got {_repr(v)}")
        if hi is not None and v > hi:
            self.fail(self.key(k), f"must be {what}, got {_repr(v)}")
        return float(v)

    def integer(self, k, *, required=False, default=None, lo=None, hi=None, what="a whole number"):
        v = self.raw(k, required, what)
        if v is None:
            return default
        if isinstance(v, bool) or not isinstance(v, int) or (lo is not None and v < lo) or (hi is not None and v > hi):
            self.fail(self.key(k), f"must be {what}, got {_repr(v)}")
        return int(v)

    def string(self, k, *, required=False, default=None, choices=None, what="a text"):
        v = self.raw(k, required, what if choices is None else _choices(choices))
        if v is None:
            return default
        if not isinstance(v, str) or not v.strip():
            self.fail(self.key(k), f"must be {what if choices is None else _choices(choices)}, got {_repr(v)}")
        if choices is not None and v not in choices:
            near = _closest(v, choices, cutoff=0.6)
            hint = f" (did you mean {near!r}?)" if near else ""
            self.fail(self.key(k), f"must be {_choices(choices)}, got {_repr(v)}{hint}")
        return v

    def boolean(self, k, *, default=False):
        v = self.raw(k)
        if v is None:
            return default
        if not isinstance(v, bool):
            self.fail(self.key(k), f"must be true or false, got {_repr(v)}")
        return v

    def tables(self, k, *, required=False, what="an array of tables"):
        v = self.raw(k, required, what)
        if v is None:
            return []
        if not isinstance(v, list) or not all(isinstance(t, Mapping) for t in v):
            self.fail(self.key(k), f"must be {what} ([[{self.key(k)}]] sections), got {_type(v)}")
        return v

    def done(self, allowed_note: str = ""):
        unknown = [k for k in self.data if k not in self.used]
        if unknown:
            allowed = ", ".join(sorted(self.used)) or "none"
            near = _closest(str(unknown[0]), self.used)
            hint = f"; did you mean {near!r}?" if near else ""
            self.fail(self.key(unknown[0]), f"unknown key{allowed_note}{hint}; allowed here: {allowed}")


def _repr(v: Any) -> str:
    if isinstance(v, str):
        return repr(v)
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    return _type(v)


def _type(v: Any) -> str:
    if isinstance(v, Mapping):
        return "a table"
    if isinstance(v, list):
        return "an array"
    if isinstance(v, str):
        return f"text {v!r}"
    return type(v).__name__


def _choices(choices) -> str:
    c = [f'"{x}"' for x in choices]
    return "one of " + ", ".join(c) if len(c) > 2 else " or ".join(c)


PF_WHAT = "a power factor greater than 0 and at most 1"
PF = dict(lo=0, hi=1, lo_open=True, what=PF_WHAT)
#: Block lengths in minutes for ``per = "interval"``; 1440 is a local day (a daily integration
#: period), whatever its length on a daylight-saving change.
BLOCKS = (5, 10, 15, 30, 60, 1440)
HOURS_WHAT = ('[start, end] in local time: whole hours 0-24 or "HH:MM" text (end exclusive, '
              "start > end wraps past midnight)")


def _rounding(v: _V, k: str, unit_hint: str) -> Rounding | None:
    """A rounding table ``{ step = 1, mode = "half_down" }`` (mode default "half_up")."""
    raw = v.raw(k)
    if raw is None:
        return None
    r = _V(raw, v.key(k), v.source)
    step = r.number("step", required=True, lo=0, hi=1e6, lo_open=True,
                    what=f"a positive step to round to ({unit_hint})")
    mode = r.string("mode", default="half_up", choices=ROUNDING_MODES)
    r.done()
    return Rounding(step, mode)


def _clock_minutes(v: _V, h, *, end: bool) -> int | None:
    """Minutes after local midnight of an hours item (an int hour or "HH:MM"), or None."""
    if isinstance(h, int) and not isinstance(h, bool):
        return h * 60 if (0 <= h <= 23 or (end and h == 24)) else None
    if isinstance(h, str):
        m = re.fullmatch(r"(\d{1,2}):(\d{2})", h.strip())
        if m:
            hh, mm = int(m.group(1)), int(m.group(2))
            total = hh * 60 + mm
            if mm < 60 and (total < 1440 or (end and total == 1440)):
                return total
    return None


def _window(v: _V, *, with_price: bool, hours_only: bool = False, with_kvarh: bool = False) -> Window:
    days_raw = v.raw("days")
    if days_raw is None:
        days = DAY_GROUPS["all"]
    elif isinstance(days_raw, str) and days_raw in DAY_GROUPS:
        days = DAY_GROUPS[days_raw]
    elif isinstance(days_raw, list) and days_raw and all(isinstance(d, str) and d in DAY_NAMES for d in days_raw):
        days = tuple(sorted({DAY_NAMES.index(d) for d in days_raw}))
    else:
        v.fail(
            v.key("days"),
            f'must be "all", "weekdays", "weekend" or a list of day names {list(DAY_NAMES)}, got {_repr(days_raw)}',
        )
    hours = v.raw("hours", True, HOURS_WHAT)
    span = None
    if isinstance(hours, list) and len(hours) == 2:
        start, end = _clock_minutes(v, hours[0], end=False), _clock_minutes(v, hours[1], end=True)
        if start is not None and end is not None and start != end and end > 0:
            span = (start, end)
    if span is None:
        v.fail(
            v.key("hours"),
            "must be [start_hour, end_hour]: whole hours with start 0-23 and end 1-24, or \"HH:MM\" text "
            f"(end exclusive, start > end wraps past midnight), got {_repr(hours) if not isinstance(hours, list) else hours}",
        )
    months_raw = None if hours_only else v.raw("months")
    if months_raw is None:
        months = tuple(range(1, 13))
    elif (
        isinstance(months_raw, list)
        and months_raw
        and all(isinstance(m, int) and not isinstance(m, bool) and 1 <= m <= 12 for m in months_raw)
    ):
        months = tuple(sorted(set(months_raw)))
    else:
        v.fail(v.key("months"), f"must be a list of month numbers 1-12, got {_repr(months_raw)}")
    holidays = v.string("holidays", default="as_sunday", choices=HOLIDAY_RULES)
    name = None if hours_only else v.string("name")
    price = v.number("price_per_kwh", required=True, **PRICE_UNIT) if with_price else None
    kvarh = v.string("kvarh", choices=("lag", "lead")) if with_kvarh else None
    return Window(
        start_minute=span[0], end_minute=span[1], days=days, months=months, holidays=holidays, name=name,
        price_per_kwh=price, kvarh=kvarh,
    )


def _windows(parent: _V, k: str, *, with_price: bool, with_kvarh: bool = False) -> tuple[Window, ...]:
    out = []
    for i, t in enumerate(parent.tables(k)):
        w = _V(t, f"{parent.key(k)}[{i}]", parent.source)
        out.append(_window(w, with_price=with_price, with_kvarh=with_kvarh))
        w.done()
    return tuple(out)


def _kvarh(v: _V, default: str) -> str:
    return v.string("kvarh", default=default, choices=KVARH_BASES)


def _per(v: _V, choices=EVALUATIONS) -> str:
    return v.string("per", default="period", choices=choices)


def _block_minutes(v: _V, per: str) -> int | None:
    blocks = v.integer("block_minutes", what=f"a block length in minutes, one of {', '.join(map(str, BLOCKS))}")
    if blocks is not None:
        if blocks not in BLOCKS:
            v.fail(v.key("block_minutes"), f"must be a block length in minutes, one of {', '.join(map(str, BLOCKS))}, got {blocks}")
        if per != "interval":
            v.fail(v.key("block_minutes"), 'only applies with per = "interval"')
    return blocks


def _check_per_window(v: _V, per: str, windows) -> None:
    if per == "window" and not windows:
        v.fail(v.key("per"), 'per = "window" needs [[reactive.windows]] (each named window group is a time band)')


def _tiers(v: _V, first: float) -> tuple[Tier, ...]:
    out, last = [], first
    for i, t in enumerate(v.tables("tiers", what="[[reactive.tiers]] tables with above_tan_phi and price_per_kvarh")):
        tv = _V(t, f"{v.key('tiers')}[{i}]", v.source)
        above = tv.number("above_tan_phi", required=True, **TAN_PHI)
        if above <= last:
            tv.fail(tv.key("above_tan_phi"), f"must be above the previous limit ({last:g}): tiers go up in order")
        out.append(Tier(above, tv.number("price_per_kvarh", required=True, **PRICE_UNIT)))
        tv.done()
        last = above
    return tuple(out)


def _slopes(v: _V, threshold: float) -> tuple[Slope, ...]:
    out, last = [], threshold
    for i, t in enumerate(v.tables("slopes", what="[[reactive.slopes]] tables with below_pf and percent_per_hundredth")):
        sv = _V(t, f"{v.key('slopes')}[{i}]", v.source)
        below = sv.number("below_pf", required=True, **PF)
        if below >= last:
            sv.fail(sv.key("below_pf"), f"must be below the previous threshold ({last:g}): slopes go down in order")
        out.append(Slope(below, sv.number("percent_per_hundredth", required=True, **PERCENT_PER_STEP)))
        sv.done()
        last = below
    return tuple(out)


def _mechanism(v: _V, tariff_basis: str) -> Mechanism:
    kind = v.string("kind", required=True, choices=MECHANISMS)
    label = v.string("label", what="a non-empty text (the charge's name on the bill)")
    if label is not None and label in BASE_CHARGES:
        v.fail(v.key("label"), f"must not be one of {', '.join(BASE_CHARGES)} (those name the base charges)")
    if kind == "kvarh_excess":
        per = _per(v)
        windows = _windows(v, "windows", with_price=False, with_kvarh=True)
        _check_per_window(v, per, windows)
        for j, w in enumerate(windows):
            if w.kvarh is not None and per != "interval":
                v.fail(f"{v.key('windows')}[{j}].kvarh", 'only applies with per = "interval"')
        if v.has("reference_pf"):  # the excess valued as the active energy it stands for
            for k in ("tan_phi_limit", "price_per_kvarh", "tiers"):
                if v.has(k):
                    v.fail(v.key(k), "does not combine with reference_pf (give either tan_phi_limit and "
                                     "price_per_kvarh, or reference_pf and price_per_kwh)")
            ref = v.number("reference_pf", required=True, **PF)
            m = KvarhExcess(
                tan_phi_limit=math.sqrt(max(0.0, 1.0 / ref**2 - 1.0)),
                price_per_kvarh=0.0,
                kvarh=_kvarh(v, tariff_basis),
                windows=windows,
                label=label,
                per=per,
                block_minutes=_block_minutes(v, per),
                reference_pf=ref,
                price_per_kwh=v.number("price_per_kwh", required=True, **PRICE_UNIT),
            )
        else:
            tan_phi = v.number("tan_phi_limit", required=True, **TAN_PHI)
            m = KvarhExcess(
                tan_phi_limit=tan_phi,
                price_per_kvarh=v.number("price_per_kvarh", required=True, **PRICE_UNIT),
                kvarh=_kvarh(v, tariff_basis),
                windows=windows,
                label=label,
                tiers=_tiers(v, tan_phi),
                per=per,
                block_minutes=_block_minutes(v, per),
                excess_rounding=_rounding(v, "excess_rounding", "kvarh"),
            )
    elif kind == "kvarh_banded":
        tan_phi = v.number("tan_phi_limit", required=True, **TAN_PHI)
        bands = []
        for i, t in enumerate(v.tables("bands", required=True, what="[[reactive.bands]] tables with min_pf and price_per_kvarh")):
            b = _V(t, f"{v.key('bands')}[{i}]", v.source)
            bands.append(
                Band(
                    min_pf=b.number("min_pf", required=True, lo=0, hi=1, what="a power factor from 0 to 1"),
                    price_per_kvarh=b.number("price_per_kvarh", required=True, **PRICE_UNIT),
                )
            )
            b.done()
        if not bands:
            v.fail(v.key("bands"), "needs at least one band")
        mins = [b.min_pf for b in bands]
        if len(set(mins)) != len(mins):
            v.fail(v.key("bands"), "two bands have the same min_pf; each band needs its own lower PF bound")
        if min(mins) != 0:
            v.fail(v.key("bands"), "the lowest band must have min_pf = 0 so that every PF has a price")
        per = _per(v, ("period", "window"))
        windows = _windows(v, "windows", with_price=False)
        _check_per_window(v, per, windows)
        m = KvarhBanded(
            tan_phi_limit=tan_phi,
            bands=tuple(sorted(bands, key=lambda b: -b.min_pf)),
            kvarh=_kvarh(v, tariff_basis),
            label=label,
            windows=windows,
            per=per,
            excess_rounding=_rounding(v, "excess_rounding", "kvarh"),
        )
    elif kind == "pf_demand_adjust":
        credit = v.boolean("credit", default=False)
        m = PfDemandAdjust(
            base_pf=v.number("base_pf", required=True, **PF),
            credit=credit,
            max_credit_percent=v.number("max_credit_percent", lo=0, hi=100, what="a percentage from 0 to 100"),
            pf=v.string("pf", default="energy", choices=("energy", "at_peak", "peak_kva")),
            kvarh=_kvarh(v, tariff_basis),
            label=label,
            apply_below_pf=v.number("apply_below_pf", **PF),
            max_increase_percent=v.number("max_increase_percent", **PERCENT),
            adjusted_rounding=_rounding(v, "adjusted_rounding", "kW"),
        )
        if m.max_credit_percent is not None and not credit:
            v.fail(v.key("max_credit_percent"), "only applies with credit = true")
        if m.apply_below_pf is not None and credit:
            v.fail(v.key("apply_below_pf"), "does not combine with credit = true (a trigger below the base PF leaves "
                                            "no PF at which to credit)")
    elif kind == "pf_percent":
        threshold = v.number("threshold_pf", required=True, **PF)
        applies = v.raw("applies_to", True, f"a list of charges from {list(BASE_CHARGES)}")
        if (
            not isinstance(applies, list)
            or not applies
            or not all(isinstance(a, str) and a in BASE_CHARGES for a in applies)
            or len(set(applies)) != len(applies)
        ):
            v.fail(v.key("applies_to"), f"must be a non-empty list of distinct charges from {list(BASE_CHARGES)}, got {_repr(applies) if not isinstance(applies, list) else applies}")
        rebate_pf = v.number("rebate_above_pf", lo=threshold, hi=1, what=f"a power factor from threshold_pf ({threshold}) to 1")
        rebate_pct = v.number("rebate_percent_per_hundredth", **PERCENT_PER_STEP)
        if (rebate_pf is None) != (rebate_pct is None):
            missing = "rebate_percent_per_hundredth" if rebate_pct is None else "rebate_above_pf"
            v.fail(v.key(missing), "is required when the other rebate key is given (rebate_above_pf and rebate_percent_per_hundredth go together)")
        max_rebate = v.number("max_rebate_percent", lo=0, hi=100, what="a percentage from 0 to 100")
        if max_rebate is not None and rebate_pf is None:
            v.fail(v.key("max_rebate_percent"), "only applies with rebate_above_pf")
        m = PfPercent(
            threshold_pf=threshold,
            percent_per_hundredth=v.number("percent_per_hundredth", required=True, **PERCENT_PER_STEP),
            applies_to=tuple(applies),
            rebate_above_pf=rebate_pf,
            rebate_percent_per_hundredth=rebate_pct or 0.0,
            max_surcharge_percent=v.number("max_surcharge_percent", **PERCENT),
            max_rebate_percent=max_rebate,
            kvarh=_kvarh(v, tariff_basis),
            label=label,
            slopes=_slopes(v, threshold),
            difference_rounding=_rounding(v, "difference_rounding", "of PF, e.g. 0.01"),
        )
    elif kind == "kvar_demand":
        m = KvarDemand(
            allowance_ratio=v.number("allowance_ratio", required=True, lo=0, hi=MAX_TAN_PHI,
                                     what=f"a ratio of at least 0 and at most {MAX_TAN_PHI:g} (kvar allowed per kW of peak)"),
            price_per_kvar=v.number("price_per_kvar", required=True, **PRICE_DEMAND),
            label=label,
            excess_rounding=_rounding(v, "excess_rounding", "kvar"),
            allowance_lookback_periods=v.integer(
                "allowance_lookback_periods", lo=1, hi=36,
                what="a whole number of previous periods from 1 to 36 (the allowance is a share of the highest kW "
                     "of this and those periods)"),
        )
    else:  # leading_kvarh
        listed = v.has("windows")
        if listed and v.has("hours"):
            v.fail(v.key("hours"), "give either hours (one window) or [[reactive.windows]] (several), not both")
        windows = _windows(v, "windows", with_price=False) if listed else (_window(v, with_price=False, hours_only=True),)
        if not windows:
            v.fail(v.key("windows"), "needs at least one window")
        per = _per(v, ("period", "interval"))
        m = LeadingKvarh(
            price_per_kvarh=v.number("price_per_kvarh", required=True, **PRICE_UNIT),
            windows=windows,
            tan_phi_limit=v.number("tan_phi_limit", default=0.0, **TAN_PHI),
            label=label,
            per=per,
            block_minutes=_block_minutes(v, per),
            excess_rounding=_rounding(v, "excess_rounding", "kvarh"),
        )
    v.done(f" for kind {kind!r}")
    return m


def _demand_windows(dm: _V) -> tuple[DemandWindow, ...]:
    out = []
    for i, t in enumerate(dm.tables("windows")):
        w = _V(t, f"demand.windows[{i}]", dm.source)
        window = _window(w, with_price=False)
        out.append(DemandWindow(
            window=window,
            price_per_kw=w.number("price_per_kw", required=True, **PRICE_DEMAND),
            excess_over=w.string("excess_over", what="the name of another demand window"),
        ))
        w.done()
    names = [d.name for d in out]
    for i, d in enumerate(out):
        if d.excess_over is not None:
            if d.excess_over not in names or d.excess_over == d.name:
                known = ", ".join(repr(n) for n in names if n and n != d.name) or "none"
                dm.fail(f"demand.windows[{i}].excess_over", f"must name another demand window (named: {known}), got {d.excess_over!r}")
            if d.name is None:
                dm.fail(f"demand.windows[{i}].name", "is required with excess_over (name each window)")
    return tuple(out)


def tariff_from_dict(d: Mapping[str, Any], source: str | None = None) -> Tariff:
    """Validate a parsed tariff (a TOML document as a dict) and build the :class:`Tariff`.

    Raises
    ------
    auditor.errors.TariffError
        Naming the first bad key, the problem and what is allowed.
    """
    top = _V(d, "", source)
    name = top.string("name", required=True, what="the tariff's name")
    currency = top.string("currency", required=True, what="a three-letter currency code such as \"EUR\"")
    if not re.fullmatch(r"[A-Z]{3}", currency):
        top.fail("currency", f'must be a three-letter currency code in capitals such as "EUR", got {currency!r}')
    description = top.string("description")
    rounding_raw = top.raw("pf_rounding")
    if rounding_raw is None:
        pf_rounding: int | Rounding | None = 2
    elif rounding_raw == "none":
        pf_rounding = None
    elif isinstance(rounding_raw, int) and not isinstance(rounding_raw, bool) and 0 <= rounding_raw <= 6:
        pf_rounding = int(rounding_raw)
    elif isinstance(rounding_raw, Mapping):
        pf_rounding = _rounding(top, "pf_rounding", "of PF, e.g. 0.01")
        if pf_rounding.step > 0.1:
            top.fail("pf_rounding.step", f"must be at most 0.1 (a PF step), got {pf_rounding.step:g}")
    else:
        top.fail("pf_rounding", f'must be a number of decimals 0-6, "none", or a table {{ step = 0.01, mode = "down" }}, got {_repr(rounding_raw)}')
    kvarh_basis = top.string("kvarh_basis", default="lag", choices=KVARH_BASES)

    calendar = None
    if top.has("calendar"):
        c = _V(top.raw("calendar"), "calendar", source)
        calendar = _calendar(c)
        c.done()

    e = _V(top.raw("energy", True, "an [energy] table with price_per_kwh"), "energy", source)
    energy = EnergyCharge(
        price_per_kwh=e.number("price_per_kwh", required=True, **PRICE_UNIT),
        windows=_windows(e, "windows", with_price=True),
    )
    e.done()

    demand = None
    if top.has("demand"):
        dm = _V(top.raw("demand"), "demand", source)
        demand = DemandCharge(
            basis=dm.string("basis", default="kw", choices=("kw", "kva")),
            price_per_kw=dm.number("price_per_kw", required=True, lo=0, hi=MAX_PRICE_PER_DEMAND,
                                   what=f"a price of at least 0 and at most {MAX_PRICE_PER_DEMAND:g} per kW (per kVA when basis = \"kva\")"),
            ratchet_percent=dm.number("ratchet_percent", lo=0, hi=100, lo_open=True, what="a percentage greater than 0 and at most 100"),
            ratchet_periods=dm.integer("ratchet_periods", default=11, lo=1, hi=36, what="a whole number of previous periods from 1 to 36"),
            rounding=_rounding(dm, "rounding", "kW or kVA"),
            windows=_demand_windows(dm),
            ratchet_on=dm.string("ratchet_on", default="measured", choices=RATCHET_BASES),
        )
        for k in ("ratchet_periods", "ratchet_on"):
            if dm.has(k) and demand.ratchet_percent is None:
                dm.fail(f"demand.{k}", "only applies with ratchet_percent")
        dm.done()

    fixed = 0.0
    if top.has("fixed"):
        fx = _V(top.raw("fixed"), "fixed", source)
        fixed = fx.number("price_per_period", required=True, lo=0, hi=MAX_FIXED,
                          what=f"a charge of at least 0 and at most {MAX_FIXED:g} per billing period")
        fx.done()

    reactive = []
    for i, t in enumerate(top.tables("reactive")):
        reactive.append(_mechanism(_V(t, f"reactive[{i}]", source), kvarh_basis))
    top.done()

    keys = [Tariff.key_of(m) for m in reactive]
    for i, k in enumerate(keys):
        if k in keys[:i]:
            raise TariffError(
                f"reactive[{i}].label",
                f"charge key {k!r} is used twice; give each mechanism of the same kind its own label",
                source,
            )
    adjusts = [i for i, m in enumerate(reactive) if isinstance(m, PfDemandAdjust)]
    if len(adjusts) > 1:
        raise TariffError(
            f"reactive[{adjusts[1]}].kind",
            "only one pf_demand_adjust per tariff (billing demand can be adjusted once)",
            source,
        )
    for i, m in enumerate(reactive):
        if isinstance(m, PfDemandAdjust):
            if demand is None:
                raise TariffError(f"reactive[{i}].kind", "pf_demand_adjust needs a [demand] table", source)
            if demand.basis != "kw":
                raise TariffError(
                    f"reactive[{i}].kind",
                    'pf_demand_adjust needs demand.basis = "kw" (a kVA demand already charges for low PF)',
                    source,
                )
        if isinstance(m, KvarDemand) and m.allowance_lookback_periods and demand is not None and demand.basis != "kw":
            raise TariffError(f"reactive[{i}].allowance_lookback_periods",
                              'needs demand.basis = "kw" (the look-back uses the kW demand of earlier periods)', source)
        if isinstance(m, PfPercent) and "demand" in m.applies_to and demand is None:
            raise TariffError(f"reactive[{i}].applies_to", '"demand" is listed but the tariff has no [demand] table', source)
    return Tariff(
        name=name, currency=currency, energy=energy, demand=demand, fixed_per_period=fixed,
        reactive=tuple(reactive), pf_rounding=pf_rounding, kvarh_basis=kvarh_basis,
        calendar=calendar, description=description, source=source,
    )


def _calendar(c: _V) -> Calendar:
    from auditor.tariffs.holiday_days import country_subdivisions  # the holidays library's answers

    country = c.string("country", required=True, what="an ISO 3166 country code such as \"DE\"")
    subdivisions = country_subdivisions(country)
    if subdivisions is None:
        c.fail("calendar.country", f"{country!r} is not a country the holidays library knows; use an ISO 3166 code such as \"DE\", \"FR\", \"US\"")
    sub = c.string("subdivision", what="a subdivision code")
    if sub is not None and sub not in subdivisions:
        allowed = ", ".join(subdivisions) or "none for this country"
        c.fail("calendar.subdivision", f"{sub!r} is not a subdivision of {country}; allowed: {allowed}")
    return Calendar(country=country, subdivision=sub)


_LINE = re.compile(r"at line (\d+), column (\d+)")


def load_tariff(path: str | Path) -> Tariff:
    """Read and validate a TOML tariff file.

    Raises
    ------
    auditor.errors.TariffError
        For an unreadable file, a TOML syntax error (naming line and column) or any key that does
        not validate (naming the key, and the line that holds it or its table).
    """
    p = Path(path)
    try:
        text = p.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise TariffError("(file)", "no such tariff file", str(p)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise TariffError("(file)", f"cannot be read as UTF-8 text: {exc}", str(p)) from None
    deep = deepest_nesting(text, MAX_NESTING)
    if deep is not None:
        raise TariffError("(syntax)", f"arrays or inline tables nested more than {MAX_NESTING} deep "
                          "(a tariff needs at most 2)", str(p), line=deep)
    try:
        data = tomllib.loads(text)
    except RecursionError:  # pragma: no cover - the nesting check above comes first
        raise TariffError("(syntax)", "nested too deeply to read", str(p)) from None
    except tomllib.TOMLDecodeError as exc:
        m = _LINE.search(str(exc))
        where = f"line {m.group(1)}, column {m.group(2)}" if m else "unknown position"
        msg = _LINE.sub("", str(exc)).replace("()", "").strip()
        raise TariffError("(syntax)", f"TOML syntax error at {where}: {msg}", str(p)) from None
    try:
        return tariff_from_dict(data, source=str(p))
    except TariffError as exc:
        raise TariffError(exc.key, exc.detail, str(p), line=locate_key(text, exc.key)) from None
