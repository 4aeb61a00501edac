"""Tariff-level answers about the reactive clauses, for every layer that asks them.

The bill check, the dashboard, the correction case and the monitoring all ask the same
questions of a tariff -- which PF keeps each clause at zero, which clauses charge lagging and
which leading energy -- and get their answers here, from the clauses themselves
(:mod:`auditor.tariffs.model`).

:func:`clause_facts` is the stable interface: one :class:`ClauseFacts` per reactive clause, in
bill order. Its fields and their meaning do not change without a note in DEVELOPERS.md.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

from auditor.tariffs.model import Tariff

__all__ = [
    "ClauseFacts",
    "clause_facts",
    "lagging_keys",
    "leading_keys",
    "pf_threshold",
    "threshold_pfs",
]


@dataclass(frozen=True)
class ClauseFacts:
    """What a reactive clause charges for, in the terms callers need.

    Attributes
    ----------
    key : str
        The charge key (label, else kind) under which the engine reports the clause.
    kind : str
        The clause kind (``kvarh_excess`` ...).
    threshold_pf : float or None
        The PF at or above which the clause charges nothing; None when no PF does (a charge on
        leading energy).
    pf_measure : str or None
        What ``threshold_pf`` is compared with: ``"period"`` (the billing period's energy PF on
        the clause's kvarh basis, after the tariff's rounding), ``"peak"`` (the PF at the kW
        peak) or ``"interval"`` (each metered interval's PF); None without a threshold.
    lagging, leading : bool
        Whether lagging (inductive) and leading (capacitive) energy add to the charge. A clause
        on net kvarh counts leading energy as a reduction, so ``leading`` is False for it.
    windowed : bool
        The clause counts energy only inside time-of-use windows.
    """

    key: str
    kind: str
    threshold_pf: float | None
    pf_measure: str | None
    lagging: bool
    leading: bool
    windowed: bool

    @property
    def sense(self) -> str:
        """``"lagging"``, ``"leading"`` or ``"both"``: the reactive energy the clause charges."""
        if self.lagging and self.leading:
            return "both"
        return "leading" if self.leading else "lagging"

    def to_dict(self) -> dict:
        d = asdict(self)
        d["sense"] = self.sense
        return d


def clause_facts(tariff: Tariff) -> tuple[ClauseFacts, ...]:
    """One :class:`ClauseFacts` per reactive clause of ``tariff``, in bill order."""
    return tuple(
        ClauseFacts(
            key=m.key,
            kind=m.kind,
            threshold_pf=m.threshold_pf,
            pf_measure=m.pf_measure,
            lagging=m.charges_lagging,
            leading=m.charges_leading,
            windowed=bool(m.windows),
        )
        for m in tariff.reactive
    )


def threshold_pfs(tariff: Tariff) -> list[dict]:
    """``[{"key", "pf"}]`` for every clause that has a threshold PF, whatever it is compared
    with (the dashboard draws them as lines on PF charts and on the P-Q scatter)."""
    return [{"key": f.key, "pf": f.threshold_pf} for f in clause_facts(tariff) if f.threshold_pf is not None]


def pf_threshold(tariff: Tariff) -> float | None:
    """The period energy PF at or above which none of the tariff's lagging PF clauses charges
    anything: the highest threshold among clauses compared with the period's PF (or the PF at
    the kW peak). Clauses on peak kvar (compared per interval) and on leading energy are left
    out. None when the tariff has no such clause.

    References
    ----------
    .. [1] IEEE Std 1459-2010, section 3.1.1 (tan phi = Q / P, PF = P / S).
    """
    limits = [f.threshold_pf for f in clause_facts(tariff)
              if f.threshold_pf is not None and f.pf_measure in ("period", "peak")]
    return max(limits) if limits else None


def lagging_keys(tariff: Tariff) -> tuple[str, ...]:
    """Charge keys of the clauses counted by :func:`pf_threshold`."""
    return tuple(f.key for f in clause_facts(tariff)
                 if f.threshold_pf is not None and f.pf_measure in ("period", "peak"))


def leading_keys(tariff: Tariff) -> tuple[str, ...]:
    """Charge keys of the clauses that charge leading energy only (over-correction charges)."""
    return tuple(f.key for f in clause_facts(tariff) if f.leading and not f.lagging)
