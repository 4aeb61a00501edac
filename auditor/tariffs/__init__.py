"""Tariffs: the model of a tariff and its clauses (:mod:`~auditor.tariffs.model`), the TOML
loader and validator (:mod:`~auditor.tariffs.loader`), the clauses in words
(:mod:`~auditor.tariffs.describe`), tariff-level answers about the reactive clauses
(:mod:`~auditor.tariffs.facts`), lookup by name (:mod:`~auditor.tariffs.catalog`) and the charge
engine (:mod:`~auditor.tariffs.engine`)."""
from auditor.tariffs.catalog import (
    EXAMPLES_DIR,
    TariffChoice,
    find_tariff,
    load_named_tariff,
    tariff_choices,
)
from auditor.tariffs.describe import describe_tariff
from auditor.tariffs.facts import (
    ClauseFacts,
    clause_facts,
    lagging_keys,
    leading_keys,
    pf_threshold,
    threshold_pfs,
)
from auditor.tariffs.loader import load_tariff, tariff_from_dict
from auditor.tariffs.model import MECHANISMS, Tariff

__all__ = [
    "EXAMPLES_DIR",
    "MECHANISMS",
    "ClauseFacts",
    "Tariff",
    "TariffChoice",
    "clause_facts",
    "describe_tariff",
    "find_tariff",
    "lagging_keys",
    "leading_keys",
    "load_named_tariff",
    "load_tariff",
    "pf_threshold",
    "tariff_choices",
    "tariff_from_dict",
    "threshold_pfs",
]
