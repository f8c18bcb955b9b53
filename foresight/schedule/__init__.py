"""Harvest scheduling: eligibility, priority rules, the period-by-period cut and the flow search."""

from foresight.schedule.flow import FlowResult, find_even_flow
from foresight.schedule.priority import PRIORITY_RULES
from foresight.schedule.simulate import Simulation, simulate

__all__ = ["PRIORITY_RULES", "FlowResult", "Simulation", "find_even_flow", "simulate"]
