"""The harvest LP beside the rule-based scheduler: the LP of a scenario, its plan mapped onto
stands, and what run.json says of it."""

from __future__ import annotations

import logging

import numpy as np
from numpy.typing import NDArray

from yieldscape.config import Scenario
from yieldscape.policies import Targets, flow_policy
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.regimes import Regimes
from yieldscape.schedule.cover import CoverRules
from yieldscape.schedule.flow import FlowResult
from yieldscape.schedule.lp import Economics, LPResult, Strata, make_strata, solve_lp
from yieldscape.schedule.simulate import HarvestRules, simulate
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
) -> tuple[LPResult, Strata]:
    """The Model II harvest LP of the scenario (aspatial), solved with HiGHS; ``cover`` are the
    cover targets over the stands' zones (``arrays.zone_idx``)."""
    f = scenario.flow
    zones = arrays.zone_idx if arrays.zone_idx is not None else np.zeros(arrays.n, np.int64)
    disturbed = scenario.disturbance.annual_rate > 0
    strata = make_strata(arrays, zones, f.lp_site_class_m, f.lp_age_class_years, disturbed)
    policy = f.policy  # wanted(): a policy of the registry the LP models (lp.FLOW_ROWS)
    # beside a rule-based run the LP bounds the schedule's total volume under the same flow rows
    objective = f.objective if f.method == "optimize" else "max-volume"
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


def lp_schedule(
    lp: LPResult,
    strata: Strata,
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    scenario: Scenario,
    rules: HarvestRules,
) -> FlowResult:
    """Map the LP onto stands: each stratum's stands (in id order) are planned for the periods
    in which the LP cuts the stratum's area, and the scheduler then takes the LP's harvest of
    each period as its target, planned stands first. The rules the LP does not model (spatial
    rules, whole stands) are applied here, so the gap shows what they cost."""
    P = periods.count
    planned = np.full(arrays.n, P + 1, dtype=np.int64)
    area = arrays.harvestable_ha if arrays.harvestable_ha is not None else arrays.area_ha
    cum_cut = np.cumsum(lp.cut_area, axis=1)
    for s in range(strata.n):  # per stratum, not per stand
        members = np.flatnonzero(strata.of_stand == s)
        members = members[np.argsort(arrays.id_rank[members], kind="stable")]
        mid = np.cumsum(area[members]) - area[members] / 2
        p = np.searchsorted(cum_cut[s], mid * (1 - 1e-9))  # first period covering the stand
        planned[members] = np.where(p < P, p + 1, P + 1)
    sim = simulate(
        arrays,
        curves,
        periods,
        Targets(tuple(lp.harvest_m3)),
        rules,
        record=True,
        planned=planned,
        regen_shares=lp_regen_shares(lp, arrays.regimes),
    )
    got, want = float(sim.harvest_m3.sum()), float(lp.harvest_m3.sum())
    gap = (want - got) / want if want > 0 else 0.0
    why = (
        f"the LP ({lp.status.lower()}, objective {scenario.flow.objective}) on {lp.strata} "
        f"strata; mapped onto stands the schedule takes {100 * (1 - gap):.2f}% of the LP's "
        "volume"
    )
    need = scenario.flow.ending_stock * sim.initial_stock_m3
    if sim.ending_stock_m3 < need * (1 - 1e-6):
        log.warning(
            "the optimised schedule, mapped onto stands, leaves the ending growing stock "
            "%.2f%% below flow.ending_stock",
            100 * (1 - sim.ending_stock_m3 / need),
        )
        why += (
            f"; on the stands the ending growing stock is {sim.ending_stock_m3:,.0f} m3, "
            f"{100 * (1 - sim.ending_stock_m3 / need):.2f}% short of flow.ending_stock"
        )
    level = float(sim.harvest_m3[0])
    return FlowResult(
        level, level / periods.period_years, sim, why, 1, "optimize", {"disaggregation_gap": gap}
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
    """What run.json says of the LP: solver, status, size, objective, duals, gap, and the area
    it regenerates from each code into each (its choices)."""
    if lp is None:
        return None
    total = float(lp.harvest_m3.sum())
    got = float(flow.simulation.harvest_m3.sum())
    f = scenario.flow
    objective = f.objective if f.method == "optimize" else "max-volume"
    return {
        "solver": f"HiGHS {library_versions().get('highspy', '')}",
        "status": lp.status,
        "objective": lp.objective,
        "objective_name": objective,
        "objective_unit": "currency (net present value)" if objective == "max-npv" else "m3",
        "leaves_out": [
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
        ],
        "seconds": round(lp.seconds, 3),
        "strata": lp.strata,
        "columns": lp.columns,
        "rows": lp.rows,
        "duals": lp.duals,
        "total_harvest_m3": total,
        "gap_of_schedule_to_lp": (total - got) / total if total > 0 else 0.0,
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
