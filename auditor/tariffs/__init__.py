"""Tariffs: the TOML specification (load + strict validation) and the charge engine."""
from auditor.tariffs.spec import (
    MECHANISMS,
    Tariff,
    describe_tariff,
    load_tariff,
    tariff_from_dict,
)

__all__ = ["MECHANISMS", "Tariff", "describe_tariff", "load_tariff", "tariff_from_dict", "EXAMPLES_DIR"]

from pathlib import Path as _Path

EXAMPLES_DIR = _Path(__file__).parent / "examples"
