"""Remedies for a site that runs leading: a switched shunt reactor, or existing capacitance
switched out while the site runs leading — their cost assumptions and their sizing.

A site whose reactive cost comes from *leading* energy (lightly loaded buildings with long
cables, LED drivers, a fixed capacitor left in) is not helped by a capacitor bank. Two remedies,
priced with the same finance as a bank:

* a shunt reactor, sized from the distribution of the leading kvar in the windows where the
  tariff charges leading energy, switched in by a var relay while the site runs leading;
* the existing capacitance taken out of service while the site runs leading (a contactor on
  the existing capacitor driven by a var relay or a timer) — if that capacitance serves no
  purpose, switching it off for good is simpler still.

Both lower the voltage a little (≈ 100·Q/S_sc %, the mirror of a bank's rise).

References
----------
.. [1] IEEE Std 1036-2010 (capacitor application; switched banks). Shunt reactors for leading
   sites — common practice.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from auditor.errors import UsageError

#: Shunt reactor sizes tried by the optimiser, kvar — common practice (illustrative list).
STANDARD_REACTOR_KVAR = (2.5, 5, 7.5, 10, 12.5, 15, 20, 25, 30, 40, 50, 60, 75, 100, 125, 150, 200)


@dataclass(frozen=True)
class ReactorCosts:
    """Cost assumptions of the leading-site remedies.

    Every default is an invented demonstration figure, not a market price: replace them with
    quotations. Losses are from memory (iron-core LV shunt reactors lose roughly 1–2 % of
    their rating).

    Parameters
    ----------
    capex_fixed : float
        Fixed installed cost of a reactor (enclosure, protection, cabling, labour). Demo: 1200.
    capex_per_kvar : float
        Installed cost per kvar of reactor. Demo: 40.
    switching_premium : float
        Var relay and contactor that switch the reactor with the site's leading kvar. Demo: 600.
    switch_off_cost : float
        A contactor and var relay (or timer) fitted to the existing capacitor, with labour.
        Demo: 450.
    loss_w_per_kvar : float
        Losses of an energised reactor, W per kvar. From memory: 15.
    """

    capex_fixed: float = 1200.0
    capex_per_kvar: float = 40.0
    switching_premium: float = 600.0
    switch_off_cost: float = 450.0
    loss_w_per_kvar: float = 15.0

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value) \
                    or value < 0:
                raise UsageError(f"reactor cost input {f.name} must be a finite number >= 0, got {value!r}")

    @classmethod
    def from_mapping(cls, values: dict | None) -> ReactorCosts:
        values = dict(values or {})
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise UsageError(f"unknown reactor cost input {unknown[0]!r}; known: {', '.join(sorted(known))}")
        return cls(**values)

    def capex(self, kind: str, total_kvar: float) -> float:
        """Installed cost of a reactor, or of switching existing capacitance."""
        if kind == "switch_off":
            return float(self.switch_off_cost)
        return float(self.capex_fixed + self.capex_per_kvar * total_kvar + self.switching_premium)


def leading_kvar_in_windows(kvar_net: np.ndarray, mask: np.ndarray | None) -> np.ndarray:
    """Leading kvar (positive numbers) of the intervals inside the charged windows where the site
    runs leading; the whole data when no window is known."""
    q = np.asarray(kvar_net, dtype=float)
    if mask is not None:
        q = q[np.asarray(mask, dtype=bool)]
    lead = -q[q < 0]
    return lead


def reactor_sizes(leading_kvar: np.ndarray, quantiles=(0.5, 0.8, 0.95)) -> tuple[float, ...]:
    """Standard reactor sizes near the quantiles of the leading kvar in the charged windows.

    For each quantile the largest standard size not above it and the next one up, so the
    optimiser weighs a reactor that cancels most leading intervals against one that cancels
    nearly all.
    """
    lead = np.asarray(leading_kvar, dtype=float)
    if lead.size == 0:
        return ()
    sizes: set[float] = set()
    std = np.array(STANDARD_REACTOR_KVAR, dtype=float)
    for q in quantiles:
        x = float(np.quantile(lead, q))
        below = std[std <= x]
        above = std[std > x]
        if below.size:
            sizes.add(float(below[-1]))
        if above.size:
            sizes.add(float(above[0]))
    return tuple(sorted(sizes))


def existing_capacitance_kvar(leading_kvar: np.ndarray, quantile: float = 0.95) -> float | None:
    """A lower bound on the capacitance left in on a leading site: the leading kvar it shows at
    the ``quantile`` of its leading intervals, rounded up to a whole kvar. The data cannot show
    more: a site that leads by X kvar has at least X kvar of capacitance in service."""
    lead = np.asarray(leading_kvar, dtype=float)
    if lead.size == 0:
        return None
    return float(max(math.ceil(float(np.quantile(lead, quantile))), 1.0))
