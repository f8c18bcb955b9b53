"""The harvest LP beside the rule-based scheduler: the LP of a scenario, its plan mapped onto
stands, and what run.json says of it."""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from dataclasses import replace

import numpy as np
from numpy.typing import NDArray

from yieldscape.config import Scenario
from yieldscape.policies import FixedTargets, PerUnit, flow_policy
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.regimes import Regimes
from yieldscape.schedule.cover import CoverRules
from yieldscape.schedule.flow import FlowResult, FlowSettings, schedule
from yieldscape.schedule.lp import Economics, LPResult, Strata, make_strata, solve_lp
from yieldscape.schedule.lp_units import Cells, Partition, UnitFlow
from yieldscape.schedule.simulate import HarvestRules, Plan, Simulation, simulate
from yieldscape.versions import library_versions

log = logging.getLogger("yieldscape")


def wanted(scenario: Scenario) -> bool:
    """Whether the run solves the LP: to schedule (flow.method = "optimize"), or to bound a
    rule-based run of a policy the LP models (flow.lp_bound)."""
    f = scenario.flow
    return f.method == "optimize" or (f.lp_bound and flow_policy(f.policy).in_lp)


def harvest_lp(
    scenario: Scenario,
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    cover: CoverRules | None,
    cells: Cells | None = None,
    units: Sequence[UnitFlow] | None = None,
    partitions: Sequence[Partition] = (),
) -> tuple[LPResult, Strata]:
    """The Model II harvest LP of the scenario (aspatial), solved with HiGHS; ``cover`` are the
    cover targets over the stands' zones (``arrays.zone_idx``); ``cells``, ``units`` and
    ``partitions``: the management units' flows and the harvest partitions
    (:mod:`yieldscape.schedule.lp_units`; default one flow, no partition)."""
    f = scenario.flow
    zones = arrays.zone_idx if arrays.zone_idx is not None else np.zeros(arrays.n, np.int64)
    disturbed = scenario.disturbance.annual_rate > 0
    strata = make_strata(
        arrays, zones, f.lp_site_class_m, f.lp_age_class_years, disturbed, cells=cells
    )
    policy = f.policy  # wanted(): a policy of the registry the LP models (lp.BOUND_ROWS)
    objective = objective_of(scenario)
    econ = None
    if objective == "max-npv":
        sp = [scenario.species[c] for c in curves.codes]
        econ = Economics(
            np.array([s.price_per_m3 for s in sp], dtype=np.float64),
            np.array([s.regen_cost_per_ha for s in sp], dtype=np.float64),
            float(scenario.economics.discount_rate),
            scenario.economics.compounding,
            f.terminal_value,
        )
    lp = solve_lp(
        arrays,
        curves,
        periods,
        strata,
        objective,
        policy,
        f.band,
        f.ending_stock,
        scenario.harvest.max_area_ha_per_period,
        econ,
        cover,
        zones,
        scenario.disturbance.annual_rate,
        units=units,
        partitions=partitions,
    )
    log.info(
        "harvest LP: %s, %d strata, %d columns, %d rows, %.1f s",
        lp.status,
        lp.strata,
        lp.columns,
        lp.rows,
        lp.seconds,
    )
    return lp, strata


def objective_of(scenario: Scenario) -> str:
    """The LP's objective: the scenario's when the LP schedules; beside a rule-based run the
    bound of the same problem, the highest level every period holds under the limits the
    rule-based search obeys (``max-level``, :data:`yieldscape.schedule.lp.BOUND_ROWS`)."""
    f = scenario.flow
    return f.objective if f.method == "optimize" else "max-level"


def planned_periods(lp: LPResult, strata: Strata, arrays: StandArrays, P: int) -> NDArray:
    """Per stand, the period in which the LP first cuts it (``P + 1``: not cut): each
    stratum's stands, oldest first (ties by stand id), take the stratum's cut area of each
    period in turn, a stand going to the period that covers its middle."""
    planned = np.full(arrays.n, P + 1, dtype=np.int64)
    area = arrays.cuttable_ha
    cum_cut = np.cumsum(lp.cut_area, axis=1)
    for s in range(strata.n):  # per stratum, not per stand
        members = np.flatnonzero(strata.of_stand == s)
        members = members[np.lexsort((arrays.id_rank[members], -arrays.age_years[members]))]
        mid = np.cumsum(area[members]) - area[members] / 2
        p = np.searchsorted(cum_cut[s], mid * (1 - 1e-9))  # first period covering the stand
        planned[members] = np.where(p < P, p + 1, P + 1)
    return planned


def plan_of(lp: LPResult, strata: Strata, arrays: StandArrays, periods: Periods) -> Plan:
    """The LP's plan on the stands: each stand's first cut (:func:`planned_periods`) and the
    LP's regeneration choices (:func:`lp_regen_shares`)."""
    return Plan(
        planned_periods(lp, strata, arrays, periods.count), lp_regen_shares(lp, arrays.regimes)
    )


def guided(
    lp: LPResult, strata: Strata, arrays: StandArrays, periods: Periods, rules: HarvestRules
) -> HarvestRules:
    """The harvest rules with the LP's plan: in each period the stands the LP cuts by then
    come first, then those it cuts in the next period, the one after, and so on (the priority
    rule ordering each group), and cut area regrows as the LP chose
    (an LP-guided order in the spirit of Hoganson & Rose 1984, For. Sci. 30:220-238, with
    the LP's cuts in place of its dual prices)."""
    return replace(rules, plan=plan_of(lp, strata, arrays, periods))


def ending_from(arrays: StandArrays, periods: Periods) -> int:
    """The first period (index from 0) whose clearcuts regrow too little to be cut again by
    the last period's harvest moment: the regrowth of a cut in period index p is (P - 1 - p)
    periods less its delay old then, below every code's minimum harvest age on every stand
    (the least of minimum age plus delay over codes and stands with harvestable area; ``P``:
    none, as where no stand is ever cut)."""
    P, L = periods.count, float(periods.period_years)
    live = arrays.cuttable_ha > 0
    if arrays.min_age_by_code is not None and arrays.regimes is not None:
        by_code = arrays.min_age_by_code[:, live] + arrays.regimes.delay[:, None]
    else:
        by_code = (arrays.min_harvest_age + arrays.regen_delay_years)[live]
    by_code = by_code[np.isfinite(by_code)]  # NaN: a code nothing regrows as; inf: never cut
    if not len(by_code):
        return P
    youngest = float(by_code.min())
    return int(min(max(np.floor(P - 1 - youngest / L) + 1, 0), P))


def ending_ordered(
    rules: HarvestRules, arrays: StandArrays, periods: Periods
) -> HarvestRules | None:
    """The LP-guided rules (:func:`guided`) with each rank of the last periods, those whose
    cuts cannot be cut again (:func:`ending_from`), ordered by the ending growing stock a cut
    gives up per m3 it yields, least first (:class:`~yieldscape.schedule.simulate.EndingCost`)
    instead of by the priority rule: where the ending stock holds the level down, the same
    harvest leaves more of it standing. None where there are no such periods."""
    assert rules.plan is not None
    first = ending_from(arrays, periods)
    if first >= periods.count:
        return None
    return replace(rules, plan=replace(rules.plan, ending_from=first))


def better(
    ordered: FlowResult, guided_flows: Sequence[FlowResult]
) -> tuple[FlowResult, int | None]:
    """Of the rule-based search in priority order and in the LP-guided orders (the plan's
    ranks ordered by the priority rule, then, where tried, by the ending stock given up:
    :func:`ending_ordered`), the one that holds the highest level (each meets every rule and
    the ending stock: each is a search's feasible result); ties keep the earlier. The levels
    go into ``details`` (``lp_guided_level_m3_per_period``: the best LP-guided order's); the
    index says which LP-guided order won (None: the priority order)."""
    won, best = None, ordered
    for i, flow in enumerate(guided_flows):
        if flow.level_m3_per_period > best.level_m3_per_period * (1 + 1e-9):
            won, best = i, flow
    details = dict(best.details)
    details["priority_order_level_m3_per_period"] = ordered.level_m3_per_period
    details["lp_guided_level_m3_per_period"] = max(f.level_m3_per_period for f in guided_flows)
    if len(guided_flows) > 1:
        details["lp_guided_rank_order_level_m3_per_period"] = guided_flows[0].level_m3_per_period
        details["lp_guided_ending_order_level_m3_per_period"] = guided_flows[1].level_m3_per_period
    steps = ordered.steps + sum(f.steps for f in guided_flows)
    return replace(best, details=details, steps=steps), won


# the cutting order a run kept, by :func:`better`'s index (None: the priority order)
ORDER_NAMES = {
    None: "the priority order",
    0: "the LP-guided order",
    1: "the LP-guided order, its last periods by the ending stock a cut gives up",
}


def guided_search(
    ordered: FlowResult,
    lp: LPResult,
    strata: Strata,
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    flow: FlowSettings,
    policy: str,
    rules: HarvestRules,
    search: Callable[[HarvestRules], FlowResult] | None = None,
) -> tuple[FlowResult, HarvestRules, str]:
    """The flow policy's search again in the LP-guided orders (:func:`guided`, and
    :func:`ending_ordered` where it has periods) of ``policy``: the best of them and of the
    search in priority order (``ordered``, under ``rules``) by :func:`better`, the rules that
    found it and the order's name. ``search(rules)``: the search to run (default the policy's,
    :func:`~yieldscape.schedule.flow.schedule`; the management units' flows where they have
    their own)."""
    if search is None:

        def search(r: HarvestRules) -> FlowResult:
            return schedule(arrays, curves, periods, flow, policy, r)

    lp_rules = guided(lp, strata, arrays, periods, rules)
    tried = [r for r in (lp_rules, ending_ordered(lp_rules, arrays, periods)) if r is not None]
    found = [search(r) for r in tried]
    best, won = better(ordered, found)
    return best, tried[won] if won is not None else rules, ORDER_NAMES[won]


def lp_schedule(
    lp: LPResult,
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    scenario: Scenario,
    rules: HarvestRules,
    unit_ending_stock: NDArray | None = None,
) -> FlowResult:
    """The LP's schedule on the stands: with the LP's plan (``rules.plan``, :func:`guided`),
    each period takes the LP's harvest as its target and floor, under every rule the LP leaves out
    (spatial rules, whole stands). Where the mapped plan misses a target or the ending
    growing stock, every target is lowered by one factor, found by bisection, until the
    schedule holds them all and the ending stock; the schedule then meets every requirement
    and the factor says what the mapping cost. With management units (``rules.units``) each
    unit takes its own LP harvest and keeps its own ending stock (``unit_ending_stock``)."""
    need: float | NDArray = scenario.flow.ending_stock
    if rules.units is not None:
        assert unit_ending_stock is not None
        need = unit_ending_stock

    def trial(scale: float, record: bool = False) -> Simulation:
        targets: FixedTargets | PerUnit = FixedTargets(tuple(scale * lp.harvest_m3))
        if rules.units is not None:
            per_unit = lp.unit_harvest_m3 if len(lp.unit_harvest_m3) else lp.harvest_m3[None]
            targets = PerUnit(tuple(FixedTargets(tuple(scale * h)) for h in per_unit))
        return simulate(arrays, curves, periods, targets, rules, ending_stock=need, record=record)

    scale, steps = 1.0, 1
    if not trial(1.0).feasible:
        lo, hi = 0.0, 1.0
        while hi - lo > 1e-6:
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if trial(mid).feasible else (lo, mid)
            steps += 1
        scale = lo
    sim = trial(scale, record=True)
    why = (
        f"the LP ({lp.status.lower()}, objective {scenario.flow.objective}) on {lp.strata} "
        f"strata; mapped onto stands the schedule holds {100 * scale:.2f}% of the LP's "
        "harvest in every period"
    )
    if scale < 1.0:
        why += " (lowered until every target and the ending growing stock hold)"
        log.warning(
            "the LP's schedule, mapped onto stands, holds %.2f%% of the LP's harvest: at "
            "more it misses a target or the ending growing stock",
            100 * scale,
        )
    level = float(sim.harvest_m3[0])
    details = {"disaggregation_gap": 1.0 - scale}
    flow = FlowResult(level, level / periods.period_years, sim, why, steps, "optimize", details)
    if rules.units is None:
        return flow
    first = tuple(float(x) for x in sim.unit_harvest_m3[0])  # each unit's period 1, its level
    return replace(
        flow, units=lp.units, unit_levels_m3_per_period=first, unit_binding=(why,) * len(first)
    )


def lp_regen_shares(lp: LPResult, reg: Regimes | None) -> NDArray | None:
    """The LP's choices as ``simulate``'s ``regen_shares`` (periods x codes x codes): per period,
    the shares in which the LP sends the area cut from a code with a choice to each option,
    over all its strata (a code the LP does not cut in a period takes its first option); the
    other codes regrow in their transitions' shares. None without a choice."""
    if reg is None or not any(reg.choices):
        return None
    area = np.where(lp.regen_area_ha > 1e-9, lp.regen_area_ha, 0.0)  # solver noise off
    total = area.sum(axis=2, keepdims=True)
    fixed = np.broadcast_to(reg.transitions, area.shape)
    shares = np.where(total > 0, area / np.where(total > 0, total, 1.0), fixed)
    choice = np.array([bool(c) for c in reg.choices])
    return np.where(choice[None, :, None], shares, fixed)


def lp_record(lp: LPResult | None, flow: FlowResult, scenario: Scenario) -> dict | None:
    """What run.json says of the LP: solver, status, size, objective, duals, the gap of the
    schedule to it and what of that gap is measured, and the area it regenerates from each
    code into each (its choices).

    Beside a rule-based run the LP is the bound of the same problem: ``level_m3_per_period``
    is the highest level every period can hold, and the gap is that of the schedule's lowest
    period to it; with ``flow.method = "optimize"`` it is the shortfall of the mapped
    schedule's total from the LP's."""
    if lp is None:
        return None
    total = float(lp.harvest_m3.sum())
    h = flow.simulation.harvest_m3
    objective = objective_of(scenario)
    if lp.level_m3 is not None:
        bound, held = lp.level_m3, float(h.min()) if len(h) else 0.0
        gap = (bound - held) / bound if bound > 0 else 0.0
    else:
        got = float(h.sum())
        gap = (total - got) / total if total > 0 else 0.0
    return {
        "solver": f"HiGHS {library_versions().get('highspy', '')}",
        "status": lp.status,
        "objective": lp.objective,
        "objective_name": objective,
        "objective_unit": "currency (net present value)" if objective == "max-npv" else "m3",
        "leaves_out": leaves_out(scenario),
        "seconds": round(lp.seconds, 3),
        "strata": lp.strata,
        "columns": lp.columns,
        "rows": lp.rows,
        "duals": lp.duals,
        "total_harvest_m3": total,
        "level_m3_per_period": lp.level_m3,
        "gap_of_schedule_to_lp": gap,
        "gap_explained": _gap_explained(lp, flow, scenario) if lp.level_m3 is not None else None,
        "regeneration": [
            {
                "period": int(r.period),
                "from_species": str(r.from_species),
                "to_species": str(r.to_species),
                "area_ha": float(r.area_ha),
            }
            for r in lp.regeneration().itertuples(index=False)
        ],
    }


def leaves_out(scenario: Scenario) -> list[str]:
    """What the LP does not model that the schedule keeps."""
    always = ["whole-stand cuts (the LP cuts any share of a stratum)"]
    return always + [
        name
        for name, on in (
            ("spatial rules", scenario.harvest.spatial),
            (
                "the exact timing of disturbed regrowth (off by half a period unless "
                "scenario.harvest_timing = 'midpoint')",
                scenario.disturbance.annual_rate > 0
                and scenario.scenario.harvest_timing != "midpoint",
            ),
        )
        if on
    ]


def _gap_explained(lp: LPResult, flow: FlowResult, scenario: Scenario) -> dict[str, float]:
    """The gap of the schedule's lowest period to the bound [m3 per period], and the part of
    it that is measured: what the spatial rules cost (the same search without them). The rest
    is the schedule's whole stands and cutting order and the LP's strata (stands averaged
    into classes), which no run here separates."""
    h = flow.simulation.harvest_m3
    bound = float(lp.level_m3 or 0.0)
    gap = bound - float(h.min()) if len(h) else bound
    spatial = float(flow.details.get("spatial_cost_m3_per_period", 0.0))
    return {
        "gap_m3_per_period": gap,
        "spatial_rules_m3_per_period": spatial,
        "rest_m3_per_period": gap - spatial,
    }
