"""Management units and harvest partitions in the outputs: each unit's wood flow beside the
regional total, its indicators and verdict, each partition's volume and share of every period's
harvest, and the harvest LP's reported rows with their duals and the rules that cost the most.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from yieldscape.config import Scenario
from yieldscape.projection import (
    CurveSet,
    Periods,
    StandArrays,
    SustainedYield,
    regulated_growing_stock_m3,
)
from yieldscape.reporting.indicators import Verdict, judge
from yieldscape.reporting.tables import wood_flow_table
from yieldscape.schedule.flow import FlowResult
from yieldscape.schedule.lp import LPResult
from yieldscape.schedule.partitions import PartitionRules
from yieldscape.schedule.stage import Units

COSTLIEST = 3  # the rules the report names


def with_unit(wood_flow: pd.DataFrame, unit: str) -> pd.DataFrame:
    """The wood flow table with its ``unit`` column first."""
    return pd.concat([pd.DataFrame({"unit": [unit] * len(wood_flow)}), wood_flow], axis=1)


def unit_flows(flow: FlowResult, units: Units, periods: Periods, lp: LPResult | None) -> list:
    """Per unit its own flow result (the unit's harvests, targets, floors and growing stock in
    the simulation's regional fields) and wood flow table, in unit order."""
    sim = flow.simulation
    P, U = periods.count, len(units.names)
    u_ev = units.of_stand[sim.event_stand]
    clear = sim.event_treatment == 0
    key = u_ev * P + (sim.event_period - 1)

    def per_unit(mask: NDArray, values: NDArray) -> NDArray:  # (units, periods)
        return np.bincount(key[mask], values[mask], U * P).reshape(U, P)

    ha = per_unit(clear, sim.event_area_ha)
    age_area = per_unit(clear, sim.event_age_years * sim.event_area_ha)
    thin_m3 = per_unit(~clear, sim.event_volume_m3)
    thin_ha = per_unit(~clear, sim.event_area_ha)
    gs_end, hlb_end = sim.unit_stock_end_m3.T, sim.unit_hlb_stock_end_m3.T
    lp_h = None
    if lp is not None:
        lp_h = lp.unit_harvest_m3 if len(lp.unit_harvest_m3) else lp.harvest_m3[None]
    out = []
    for u, (name, pol) in enumerate(zip(units.names, units.policies, strict=True)):
        own = replace(
            sim,
            harvest_m3=sim.unit_harvest_m3[:, u],
            harvest_ha=ha[u],
            harvest_age_area=age_area[u],
            thinning_m3=thin_m3[u],
            thinning_ha=thin_ha[u],
            growing_stock_start_m3=np.r_[sim.unit_initial_stock_m3[u], gs_end[u, :-1]],
            growing_stock_end_m3=gs_end[u],
            hlb_stock_start_m3=np.r_[sim.unit_initial_hlb_stock_m3[u], hlb_end[u, :-1]],
            ending_hlb_stock_m3=float(hlb_end[u, -1]),
            initial_stock_m3=float(sim.unit_initial_stock_m3[u]),
            ending_stock_m3=float(gs_end[u, -1]),
            target_m3=sim.unit_target_m3[:, u],
            floor_m3=sim.unit_floor_m3[:, u],
            disturbed_ha=np.full(P, np.nan),
            disturbed_m3=np.full(P, np.nan),
        )
        level = flow.unit_levels_m3_per_period[u]
        unit_flow = replace(
            flow,
            level_m3_per_period=level,
            level_m3_per_year=level / periods.period_years,
            simulation=own,
            binding=flow.unit_binding[u],
            policy="optimize" if flow.policy == "optimize" else pol.policy,
            details={},
        )
        table = wood_flow_table(unit_flow, periods, None if lp_h is None else lp_h[u])
        out.append((unit_flow, with_unit(table, name)))
    return out


def unit_table(
    per_unit: list,
    units: Units,
    scenario: Scenario,
    arrays: StandArrays,
    curves: CurveSet,
    long_term: int,
    lp: LPResult | None,
    sustained: SustainedYield,
) -> tuple[pd.DataFrame, list[Verdict]]:
    """One row per management unit: its flow, its growing stock, its long-term sustained
    yield (``sustained``: the region's per hectare, summed over the unit's harvestable area)
    and its verdict (the region's checks on the unit's own wood flow,
    :func:`~yieldscape.reporting.indicators.judge`), and the verdicts."""
    rows, verdicts = [], []
    L = scenario.scenario.period_years
    for u, ((flow, wf), pol) in enumerate(zip(per_unit, units.policies, strict=True)):
        mine = units.of_stand == u
        area = np.where(mine, arrays.cuttable_ha, 0.0)
        ltsy = sustained.over(area)
        regulated = regulated_growing_stock_m3(curves, arrays, area)
        flow_keys = replace(scenario.flow, policy=pol.policy, ending_stock=pol.ending_stock)
        v = judge(
            wf,
            flow,
            replace(scenario, flow=flow_keys),
            ltsy["at_culmination"],
            regulated,
            long_term,
        )
        verdicts.append(v)
        gs0, gs1 = flow.simulation.initial_stock_m3, flow.simulation.ending_stock_m3
        lp_level = np.nan
        if lp is not None and len(lp.unit_level_m3) > u:
            lp_level = float(lp.unit_level_m3[u]) / L
        rows.append(
            {
                "unit": pol.name,
                "policy": pol.policy,
                "band": pol.band,
                "ending_stock_share": pol.ending_stock,
                "stands": int(mine.sum()),
                "area_ha": float(arrays.area_ha[mine].sum()),
                "harvestable_ha": float(area.sum()),
                "level_m3_per_year": flow.level_m3_per_year,
                "lp_level_m3_per_year": lp_level,
                "harvest_m3": float(wf["harvest_m3"].sum()),
                "initial_growing_stock_m3": gs0,
                "ending_growing_stock_m3": gs1,
                "ending_stock_ratio": gs1 / gs0 if gs0 > 0 else np.nan,
                "long_term_sustained_yield_m3_per_year": ltsy["at_culmination"],
                "sustainable": v.sustainable,
                "verdict": v.headline,
                "limited_by": flow.binding,
            }
        )
    return pd.DataFrame(rows), verdicts


def partition_table(
    flow: FlowResult, rules: PartitionRules, periods: Periods, wood_flow: pd.DataFrame
) -> pd.DataFrame:
    """Per partition and period: the schedule's volume from the partition, its share of the
    period's harvest, the period's least and most volume the limits allow [m3] and whether
    they hold."""
    sim, P = flow.simulation, periods.count
    h = sim.harvest_m3
    vol = sim.partition_m3 if sim.partition_m3.size else np.zeros((P, rules.n))
    rows = []
    for k, name in enumerate(rules.names):
        low = np.array([rules.minimum(x)[k] for x in h])
        high = np.array([rules.maximum(x)[k] for x in h])
        v = vol[:, k]
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(h > 0, v / np.where(h > 0, h, 1.0), np.nan)
        rows.append(
            pd.DataFrame(
                {
                    "partition": name,
                    "period": np.arange(1, P + 1),
                    "start_year": wood_flow["start_year"].to_numpy(),
                    "harvest_m3": h,
                    "volume_m3": v,
                    "share_of_harvest": share,
                    "min_share": rules.min_share[k],
                    "max_share": rules.max_share[k],
                    "min_m3": low,
                    "max_m3": np.where(np.isfinite(high), high, np.nan),
                    "holds": (v >= low * (1 - 1e-6) - 1e-6) & (v <= high * (1 + 1e-6) + 1e-6),
                }
            )
        )
    return pd.concat(rows, ignore_index=True)


def constraint_table(
    lp: LPResult, period_years: float, initial_stock_m3: dict[str, float]
) -> pd.DataFrame:
    """The LP's reported rows (partitions, ending stocks, cover targets, the area cap) with
    ``rule`` (the row's rule in words) and ``cost_m3_per_year_per_percent``: the level, m3 per
    year, that loosening the rule by one percent gives to first order, from the row's dual:
    one percentage point of a share the scenario sets (``flow.ending_stock``: |dual| x 1% of
    the initial growing stock, ``initial_stock_m3`` by unit, "" for the region; a partition's
    ``min_share`` / ``max_share``: |dual| / 100), 1% of an amount otherwise (|dual x limit| /
    100: ``min_m3`` / ``max_m3``, the cover rows' and the area cap's hectares)."""
    c = lp.constraints.copy()
    if c.empty:
        return c
    low = c["lower"].notna()
    rhs = np.where(low, c["lower"], c["upper"]).astype(np.float64)
    side = np.where(low & c["upper"].notna(), "equal", np.where(low, "minimum", "maximum"))
    c.insert(
        0,
        "rule",
        [
            _rule(k, n, u, s)
            for k, n, u, s in zip(c["kind"], c["name"], c["unit"], side, strict=True)
        ],
    )
    step = np.abs(rhs)  # what one percent of the rule moves the row's limit by, x 100
    share = (c["rhs_unit"] == "share").to_numpy()
    step[share] = 1.0
    ending = (c["kind"] == "ending_stock").to_numpy()
    step[ending] = [initial_stock_m3.get(u, np.nan) for u in c["unit"][ending]]
    c["cost_m3_per_year_per_percent"] = np.abs(c["dual"]) * step / 100.0 / period_years
    return c


def _rule(kind: str, name: str, unit: str, side: str) -> str:
    where = f" of unit {unit!r}" if unit else ""
    if kind == "partition":  # the LP names a partition's row "NAME.KEY" (min_share, ...)
        base, _, key = name.rpartition(".")
        per = " (per point)" if key.endswith("share") else ""
        return f"partition {base or name!r} {key or side}{per}"
    if kind == "ending_stock":
        return f"ending growing stock{where} ({name}, per point)"
    if kind == "cover":
        return f"cover target {name}"
    return f"{name}{where}"


def costliest(constraints: pd.DataFrame, n: int = COSTLIEST) -> list[dict]:
    """The ``n`` rules whose rows cost the most level over the horizon (each rule's
    ``cost_m3_per_year_per_percent`` summed over its periods; rules that cost nothing left
    out), most first."""
    if constraints.empty:
        return []
    by = constraints.groupby("rule", sort=False)
    cost = by["cost_m3_per_year_per_percent"].sum()
    dual = by["dual"].sum()
    kind = by["kind"].first()
    top = cost[cost > 1e-9].sort_values(ascending=False).head(n)
    return [
        {
            "rule": rule,
            "kind": str(kind[rule]),
            "cost_m3_per_year_per_percent": float(top[rule]),
            "dual_sum": float(dual[rule]),
        }
        for rule in top.index
    ]


@dataclass
class UnitOutputs:
    """The tables of a run's units, partitions and LP rows (None where the run has none)."""

    wood_flow: pd.DataFrame | None = None  # the units' rows of wood_flow
    units: pd.DataFrame | None = None  # management_units
    verdicts: list[Verdict] = field(default_factory=list)  # per unit, in unit order
    partitions: pd.DataFrame | None = None
    constraints: pd.DataFrame | None = None
    costliest: list[dict] = field(default_factory=list)


def unit_outputs(
    flow: FlowResult,
    units: Units | None,
    partitions: PartitionRules | None,
    lp: LPResult | None,
    scenario: Scenario,
    model: tuple[StandArrays, CurveSet, Periods, SustainedYield],
    long_term: int,
    wood_flow: pd.DataFrame,
) -> UnitOutputs:
    """Every table of :class:`UnitOutputs` the run has (``model``: the stand arrays, curves,
    periods and the stands' long-term sustained yields per hectare, the units' sums of them)."""
    arrays, curves, periods, sustained = model
    out = UnitOutputs()
    if units is not None:
        per_unit = unit_flows(flow, units, periods, lp)
        out.wood_flow = pd.concat([wf for _, wf in per_unit], ignore_index=True)
        out.units, out.verdicts = unit_table(
            per_unit, units, scenario, arrays, curves, long_term, lp, sustained
        )
    if partitions is not None:
        out.partitions = partition_table(flow, partitions, periods, wood_flow)
    if lp is not None and not lp.constraints.empty:
        sim = flow.simulation
        stocks = {"": sim.initial_stock_m3}
        if units is not None:
            stocks |= dict(zip(units.names, sim.unit_initial_stock_m3, strict=True))
        out.constraints = constraint_table(lp, periods.period_years, stocks)
        out.costliest = costliest(out.constraints)
    return out


def _records(table: pd.DataFrame) -> list[dict]:
    """A table's rows as JSON-ready dicts (NaN and NA as None, numpy scalars as Python's)."""
    clean = table.astype(object).where(table.notna(), None)
    return [
        {k: (v.item() if isinstance(v, np.generic) else v) for k, v in row.items()}
        for row in clean.to_dict(orient="records")
    ]


def units_record(out: UnitOutputs) -> dict:
    """What run.json says of the units, partitions and the LP's reported rows (keys only
    where the run has them): ``units`` (the management_units rows, each with its verdict's
    checks), ``partitions`` (per partition its least and largest share of a period's harvest
    and whether every period held), ``constraints`` (every reported LP row with its dual) and
    ``costliest_rules``."""
    rec: dict = {}
    if out.units is not None:
        rows = _records(out.units)
        for row, v in zip(rows, out.verdicts, strict=True):
            row["checks"] = [
                {"check": c.name, "holds": bool(c.holds), "detail": c.detail} for c in v.checks
            ]
        rec["units"] = rows
    if out.partitions is not None:
        by = out.partitions.groupby("partition", sort=False)
        rec["partitions"] = [
            {
                "name": str(name),
                "least_share_of_harvest": float(g["share_of_harvest"].min()),
                "largest_share_of_harvest": float(g["share_of_harvest"].max()),
                "volume_m3": float(g["volume_m3"].sum()),
                "holds_every_period": bool(g["holds"].all()),
            }
            for name, g in by
        ]
    if out.constraints is not None:
        rec["constraints"] = _records(out.constraints)
        rec["costliest_rules"] = out.costliest
    return rec
