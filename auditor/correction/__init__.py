"""Power factor correction: sizing, designs and controller, screening, harmonics, scenarios,
optimiser, specification.

Pure layer: interval frames and tariffs in, corrected tariff runs, screening rules, a harmonic
study and a costed scenario with its specification out. Imports neither the store nor the web
layer.
"""
from auditor.correction.banks import (
    DETUNING_PERCENTS,
    BankDesign,
    bank_output_kvar,
    corrected_kvarh,
    output_factor,
    parse_steps,
    stage_totals,
    standard_capacitor_voltage,
    switch_stages,
    tuning_order,
)
from auditor.correction.harmonics import (
    Spectrum,
    estimate_spectrum,
    frequency_scan,
    ieee519_voltage_limits,
    spectrum_from_table,
)
from auditor.correction.optimiser import STANDARD_KVAR, candidate_designs, optimise
from auditor.correction.remedies import ReactorCosts
from auditor.correction.scenario import (
    PreparedScenario,
    ScenarioResult,
    SiteScenarioResult,
    prepare_scenario,
    run_scenario,
    run_site,
    sum_meters,
)
from auditor.correction.screening import (
    CAUTIONS,
    RuleResult,
    ScreeningLimits,
    ScreeningResult,
    SiteElectrical,
    parallel_resonance_order,
    screen,
    voltage_rise_percent,
)
from auditor.correction.sizing import (
    SizingResult,
    kw_multiplier,
    required_kvar,
    size_required,
    tan_phi,
)
from auditor.finance import CostInputs

__all__ = [
    "CostInputs", "STANDARD_KVAR", "ScenarioResult", "SiteScenarioResult", "candidate_designs",
    "optimise", "run_scenario", "run_site", "sum_meters", "PreparedScenario", "prepare_scenario",
    "BankDesign", "CAUTIONS", "DETUNING_PERCENTS", "ScreeningResult", "SiteElectrical",
    "SizingResult", "bank_output_kvar", "corrected_kvarh", "kw_multiplier", "output_factor",
    "parallel_resonance_order", "parse_steps", "required_kvar", "screen", "size_required",
    "stage_totals", "switch_stages", "tan_phi", "tuning_order", "voltage_rise_percent",
    "RuleResult", "ScreeningLimits", "ReactorCosts", "Spectrum", "estimate_spectrum",
    "frequency_scan", "ieee519_voltage_limits", "spectrum_from_table", "standard_capacitor_voltage",
]
