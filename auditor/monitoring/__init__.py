"""Monitoring between bills: pure checks over day summaries of interval data and tariffs.

``days`` reduces interval frames of many meters to day summaries; ``panel`` lays them out as
(meters x days) arrays; ``pricing`` applies a tariff to them; ``checks`` holds the checks. This
package imports only the quantities, audit and tariffs layers: never the store, the services or
the web.
"""
from auditor.monitoring.checks import (
    KINDS,
    SEVERITY,
    Anchor,
    CheckSettings,
    Evaluation,
    Finding,
    Projection,
    TariffPlan,
    correction_loss,
    data_quality,
    data_stopped,
    leading_at_light_load,
    multiplier_change,
    project_periods,
    projected_charge,
    run_checks,
)
from auditor.monitoring.days import DaySummaries, summarise_days
from auditor.monitoring.panel import Panel, build_panel

__all__ = [
    "KINDS", "SEVERITY", "Anchor", "CheckSettings", "Evaluation", "Finding", "Projection", "TariffPlan",
    "DaySummaries", "Panel", "build_panel", "summarise_days", "correction_loss", "data_quality",
    "data_stopped", "leading_at_light_load", "multiplier_change", "project_periods", "projected_charge", "run_checks",
]
