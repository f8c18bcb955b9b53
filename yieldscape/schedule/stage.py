"""The scheduling stage of a run: the scenario's management units and harvest partitions on the
stands, the flow search they call for (the flow policy's, or each unit's flow side by side:
:mod:`yieldscape.schedule.units`), the harvest LP beside it (or its plan mapped onto stands),
the LP-guided orders, and what the spatial rules cost and the openings they leave."""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from yieldscape.config import Scenario
from yieldscape.config.model import FlowConfig, UnitConfig
from yieldscape.errors import InputError
from yieldscape.io.outputs import REGION
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.runlog import Timer
from yieldscape.schedule import lp_plan
from yieldscape.schedule import spatial as arm
from yieldscape.schedule.flow import FlowResult, schedule
from yieldscape.schedule.lp import LPResult, Strata
from yieldscape.schedule.lp_units import Cells, Partition, UnitFlow, make_cells
from yieldscape.schedule.partitions import PartitionRules, partition_rules
from yieldscape.schedule.simulate import HarvestRules, Simulation
from yieldscape.schedule.units import NoUnitFlows, UnitFlows, UnitPolicy, find_unit_flows

log = logging.getLogger("yieldscape")


@dataclass(frozen=True)
class Units:
    """The management units of a run: names (the ``[[units]]`` tables' order, then the other
    values of the unit field, sorted), each stand's unit code and each unit's flow."""

    names: tuple[str, ...]
    of_stand: NDArray[np.int64]
    policies: tuple[UnitPolicy, ...]

    def lp_flows(self) -> tuple[UnitFlow, ...]:
        return tuple(UnitFlow(u.name, u.policy, u.band, u.ending_stock) for u in self.policies)

    @property
    def ending_stock(self) -> NDArray:
        return np.array([u.ending_stock for u in self.policies], dtype=np.float64)

    @property
    def in_lp(self) -> bool:
        """Whether the harvest LP models every unit's flow (targets units: not)."""
        return all(u.policy == "even" for u in self.policies)


def management_units(scenario: Scenario, stand_unit: pd.Series, where: str) -> Units | None:
    """The units of the stands' ``unit`` column (None without ``[inventory.fields] unit``);
    ``where`` (the stand layer) names the field's file in messages."""
    field = scenario.inventory.fields.unit
    if field is None:
        return None
    factor, uniques = pd.factorize(stand_unit)
    present = [str(u) for u in uniques]
    if REGION in present:
        raise InputError(
            f"{where}: field {field!r} (inventory.fields.unit): the unit name {REGION!r} is "
            "kept for the regional total in the output tables; rename that unit"
        )
    tables = {u.name: u for u in scenario.units}
    for name in tables:
        if name not in present:
            shown = ", ".join(repr(v) for v in sorted(present)[:10])
            raise InputError(
                f"{where}: [[units]] name = {name!r}: no stand has that unit in field "
                f"{field!r} (inventory.fields.unit); its values are: {shown}"
            )
    order = list(tables) + sorted(set(present) - set(tables))
    at = {name: i for i, name in enumerate(order)}
    codes = np.array([at[u] for u in present], dtype=np.int64)[factor]
    policies = tuple(_policy(scenario.flow, tables.get(name), name) for name in order)
    return Units(tuple(order), codes, policies)


def _policy(flow: FlowConfig, table: UnitConfig | None, name: str) -> UnitPolicy:
    """A unit's flow: its table's keys, [flow]'s where the table leaves one out."""

    def pick(key: str):  # noqa: ANN202 - the key's value
        own = getattr(table, key) if table is not None else None
        return own if own is not None else getattr(flow, key)

    return UnitPolicy(
        name, pick("policy"), pick("band"), pick("ending_stock"), tuple(pick("targets_m3") or ())
    )


def harvest_partitions(
    scenario: Scenario, fields: Mapping[str, pd.Series], codes: tuple[str, ...], where: str
) -> PartitionRules | None:
    """The ``[[partitions]]`` over the stands' ``fields`` (None without any)."""
    if not scenario.partitions:
        return None
    rules = partition_rules(scenario.partitions, fields, codes, where)
    for k, spec in enumerate(scenario.partitions):
        if not rules.member[:, :, k].any():
            log.warning(
                "%s: [[partitions]] %r selects no stand (where = %r; the unit field's values "
                "are compared as text: unit == '1')",
                where,
                spec.name,
                spec.where,
            )
    return rules


@dataclass(frozen=True)
class Schedule:
    """What the scheduling stage produced."""

    flow: FlowResult
    rules: HarvestRules
    lp: LPResult | None
    openings: pd.DataFrame | None
    units: Units | None = None


def schedule_run(
    scenario: Scenario,
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules,
    units: Units | None,
    timer: Timer,
) -> Schedule:
    """The flow policy's schedule (or the LP's plan mapped onto stands), the LP beside it,
    what the spatial rules cost and the openings they leave; ``rules`` with the units and
    partitions in place."""
    s, c, p, f = stands, curves, periods, scenario.flow

    def search(r: HarvestRules) -> FlowResult:
        if units is None:
            found_one = schedule(s, c, p, f, f.policy, r)
            _kept(found_one.simulation, r)
            return found_one
        try:
            found = find_unit_flows(s, c, p, r, units.policies)
        except NoUnitFlows as exc:
            _kept(exc.simulation, r)
            raise
        return unit_flow_result(found, units, p)

    known = arm.without_never_cut(s, rules.spatial)  # for the LP and the comparison
    lp = strata = None
    if lp_plan.wanted(scenario) and (units is None or units.in_lp):
        with timer.stage("harvest LP"):
            lp, strata = _harvest_lp(scenario, known, c, p, rules, units)
    elif lp_plan.wanted(scenario):
        log.info("no harvest LP: a unit follows its own targets, which the LP does not model")
    if f.method == "optimize":
        if lp is None or strata is None:
            raise InputError(
                "flow.method = 'optimize' needs the harvest LP, which does not model units "
                "that follow their own targets"
            )
        rules = lp_plan.guided(lp, strata, s, p, rules)
        end = units.ending_stock if units is not None else None
        flow = lp_plan.lp_schedule(lp, s, c, p, scenario, rules, end)
    else:
        flow = search(rules)
        if lp is not None and strata is not None:  # the LP's plan as the cutting order too
            with timer.stage("LP-guided search"):
                flow, rules, order = lp_plan.guided_search(
                    flow, lp, strata, s, c, p, f, f.policy, rules, search
                )
            log.info("schedule: %s", order)
    if rules.partitions is not None and flow.level_m3_per_period <= 0:
        _no_harvest(flow, lp, search, rules, units is not None)
    openings = None
    if rules.spatial is not None:
        if f.method == "rules":
            plain = replace(rules, spatial=None, snapshots=())
            # the schedule itself holds without the spatial rules: the search without them
            # found at least its level (a search is a heuristic, not monotone in the rules)
            aspatial = max(search(plain).level_m3_per_period, flow.level_m3_per_period)
            flow.details["aspatial_level_m3_per_period"] = aspatial
            flow.details["spatial_cost_m3_per_period"] = aspatial - flow.level_m3_per_period
            flow.details["never_cut_harvestable_ha"] = arm.never_cut_area_ha(s, rules.spatial)
        openings = _openings(flow, p, rules, scenario.harvest.max_opening_ha)
    return Schedule(flow, rules, lp, openings, units)


def _no_harvest(
    flow: FlowResult,
    lp: LPResult | None,
    search: Callable[[HarvestRules], FlowResult],
    rules: HarvestRules,
    with_units: bool,
) -> None:
    """An input error where the partitions leave no harvest but one is found without them."""
    assert rules.partitions is not None
    if search(replace(rules, partitions=None, plan=None)).level_m3_per_period <= 0:
        return
    names = ", ".join(repr(n) for n in rules.partitions.names)
    hint = (
        " (with management units the rule-based search scales the units' levels found "
        "without the partitions by one common factor, which cannot change the share one "
        "unit takes; flow.method = 'optimize' lets the LP set them)"
        if with_units and (lp is None or (lp.level_m3 or 0.0) > 0)
        else ""
    )
    raise InputError(
        f"[[partitions]] {names}: no schedule with a harvest keeps them; the level found is 0 "
        f"m3/year ({flow.binding}){hint}"
    )


def _kept(sim: Simulation, rules: HarvestRules) -> None:
    """An input error where the search's run breaks a partition: no level keeps it."""
    if rules.partitions is None or sim.feasible or not sim.fail_reason.startswith("partition"):
        return
    raise InputError(
        f"[[partitions]]: no schedule keeps every partition: in period {sim.fail_period}, "
        f"{sim.fail_reason}"
    )


def _harvest_lp(
    scenario: Scenario,
    known: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules,
    units: Units | None,
) -> tuple[LPResult, Strata]:
    """The harvest LP, with the units' flows and the partitions where the run has them."""
    parts = rules.partitions
    if units is None and parts is None:
        return lp_plan.harvest_lp(scenario, known, curves, periods, rules.cover)
    stand_unit = units.of_stand if units is not None else np.zeros(known.n, np.int64)
    member = parts.member if parts is not None else np.zeros((known.n, len(curves.codes), 0), bool)
    cells: Cells = make_cells(stand_unit, member)
    lp_parts = [
        Partition(x.name, x.min_share, x.max_share, x.min_m3, x.max_m3) for x in scenario.partitions
    ]
    flows = units.lp_flows() if units is not None else None
    return lp_plan.harvest_lp(scenario, known, curves, periods, rules.cover, cells, flows, lp_parts)


def unit_flow_result(found: UnitFlows, units: Units, periods: Periods) -> FlowResult:
    """The units' flows as one run's flow: the level is the sum of the units' levels (a unit
    on targets: its mean harvest), the binding rule each unit's."""
    sim = found.simulation
    mean = (
        sim.unit_harvest_m3.mean(axis=0) if sim.unit_harvest_m3.size else np.zeros(len(units.names))
    )
    searched = np.array([u.policy == "even" for u in units.policies])
    levels = np.where(searched, found.levels_m3, mean)
    level = float(levels.sum())
    why = [w or "its targets" for w in found.binding]
    binding = "; ".join(f"unit {n!r}: {w}" for n, w in zip(units.names, why, strict=True))
    policy = "targets" if not searched.any() else "even"
    return FlowResult(
        level,
        level / periods.period_years,
        sim,
        binding,
        found.steps,
        policy,
        units=units.names,
        unit_levels_m3_per_period=tuple(float(x) for x in levels),
        unit_binding=tuple(why),
    )


def _openings(
    flow: FlowResult, periods: Periods, rules: HarvestRules, max_opening_ha: float | None
) -> pd.DataFrame:
    """The openings the schedule's clearcuts leave, checked against the largest allowed."""
    assert rules.spatial is not None
    sim = flow.simulation
    times = periods.harvest_years - periods.start_year
    clear = sim.event_treatment == 0  # thinnings open nothing
    ev_t = times[sim.event_period[clear] - 1] if clear.any() else np.zeros(0)
    openings = arm.openings_table(
        sim.event_stand[clear],
        ev_t,
        sim.event_area_ha[clear],
        times,
        rules.spatial.adjacency,
        rules.spatial.greenup_years,
    )
    arm.check_openings(openings, max_opening_ha)
    return openings
