"""Harvest scheduling: eligibility, priority rules, the period-by-period cut and the flow search."""

from yieldscape.schedule.flow import (
    FlowResult,
    find_even_flow,
    find_nondeclining,
    find_step_down,
    run_targets,
    stable_periods_for,
)
from yieldscape.schedule.simulate import Simulation, simulate
from yieldscape.schedule.spatial import SpatialRules

__all__ = [
    "FlowResult",
    "Simulation",
    "find_even_flow",
    "find_nondeclining",
    "find_step_down",
    "run_targets",
    "schedule",
    "simulate",
    "spatial_rules",
    "stable_periods_for",
]


def schedule(
    stands,
    curves,
    periods,
    flow_cfg,
    harvest_cfg,
    adjacency=None,  # noqa: ANN001
    cover=None,
    disturbance=0.0,
    snapshots=(),
) -> FlowResult:
    """Run the flow policy of the scenario (``[flow]``, ``[harvest]``) over the stands.

    With ``harvest.greenup_years`` > 0 the ``adjacency`` graph carries the spatial rules;
    the recorded run keeps the stand parts at the period boundaries in ``snapshots``.
    """
    spatial = spatial_rules(harvest_cfg, adjacency)
    common = {
        "priority": harvest_cfg.priority,
        "max_area_ha": harvest_cfg.max_area_ha_per_period,
        "spatial": spatial,
        "cover": cover,
        "disturbance": disturbance,
        "snapshots": tuple(snapshots),
    }
    if flow_cfg.policy == "targets":
        return run_targets(
            stands,
            curves,
            periods,
            flow_cfg.targets_m3,
            ending_stock=flow_cfg.ending_stock,
            **common,
        )
    if flow_cfg.policy == "stepdown":
        return find_step_down(
            stands,
            curves,
            periods,
            flow_cfg.step_down_max,
            flow_cfg.ending_stock,
            stable_periods=stable_periods_for(periods, flow_cfg.long_term_periods),
            **common,
        )
    if flow_cfg.policy == "nondeclining":
        return find_nondeclining(stands, curves, periods, flow_cfg.ending_stock, **common)
    return find_even_flow(stands, curves, periods, flow_cfg.band, flow_cfg.ending_stock, **common)


def spatial_rules(harvest_cfg, adjacency) -> SpatialRules | None:  # noqa: ANN001
    """The green-up and opening rules of ``[harvest]`` over the graph (None without them)."""
    if not harvest_cfg.spatial:
        return None
    if adjacency is None:
        raise ValueError("spatial rules need the adjacency graph")
    return SpatialRules(adjacency, harvest_cfg.greenup_years, harvest_cfg.max_opening_ha or 0.0)
