"""Harvest scheduling: eligibility, the period-by-period cut, the flow searches and the LP."""

from yieldscape.schedule.flow import (
    SEARCHES,
    FlowResult,
    find_even_flow,
    find_nondeclining,
    find_step_down,
    run_targets,
    schedule,
    stable_periods_for,
)
from yieldscape.schedule.simulate import NO_RULES, HarvestRules, Simulation, simulate
from yieldscape.schedule.spatial import SpatialRules

__all__ = [
    "NO_RULES",
    "SEARCHES",
    "FlowResult",
    "HarvestRules",
    "Simulation",
    "SpatialRules",
    "find_even_flow",
    "find_nondeclining",
    "find_step_down",
    "run_targets",
    "schedule",
    "simulate",
    "stable_periods_for",
]
