"""Compatibility module: the tariff specification now lives in three modules by concern --
:mod:`auditor.tariffs.model` (frozen dataclasses), :mod:`auditor.tariffs.loader` (TOML load and
validation) and :mod:`auditor.tariffs.describe` (the clauses in words). Every name importable
from here before the split still is."""
from __future__ import annotations

from auditor.tariffs.describe import describe_tariff
from auditor.tariffs.loader import load_tariff, tariff_from_dict
from auditor.tariffs.model import (
    BASE_CHARGES,
    DAY_GROUPS,
    DAY_NAMES,
    HOLIDAY_RULES,
    KVARH_BASES,
    MECHANISMS,
    Band,
    Calendar,
    DemandCharge,
    EnergyCharge,
    KvarDemand,
    KvarhBanded,
    KvarhExcess,
    LeadingKvarh,
    Mechanism,
    PfDemandAdjust,
    PfPercent,
    Tariff,
    Window,
)

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
    "describe_tariff",
    "load_tariff",
    "tariff_from_dict",
]
