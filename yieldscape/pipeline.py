"""The whole chain as library calls: :func:`check` and :func:`run` (the other commands' calls
are in :mod:`yieldscape.commands`).

This module only orchestrates: it reads through ``io/``, hands the tables to the layers that
own the domain (inventory, landbase, projection, schedule, reporting), times the stages, keeps
the run's log, and gives the results to the writer (:mod:`yieldscape.publish`).

>>> import yieldscape
>>> scn = yieldscape.load_scenario("sample_region/scenario.toml")   # doctest: +SKIP
>>> result = yieldscape.run(scn, "results/")                        # doctest: +SKIP
>>> result.wood_flow.head()                                        # doctest: +SKIP
"""

from __future__ import annotations

import logging
from contextlib import nullcontext
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyproj

from yieldscape.adjacency import stand_adjacency
from yieldscape.config import Scenario
from yieldscape.errors import InputError
from yieldscape.inventory import prepare_inventory
from yieldscape.io.geoparquet import partition_rows
from yieldscape.io.outputs import check_output_dir, staged_output
from yieldscape.io.readers import raster_site_index, read_overlay, read_step_raster
from yieldscape.io.vector import read_layer
from yieldscape.landbase import netdown_in_parts, where_fields, with_netdown_columns
from yieldscape.limits import check_run_size, stand_extent_m
from yieldscape.parallel import Parallel, Pool, pool
from yieldscape.projection import (
    CurveSet,
    Periods,
    StandArrays,
    SustainedYield,
    regulated_growing_stock_m3,
    zone_codes,
    zone_names,
)
from yieldscape.publish import MANAGED, Ahead, outputs_ahead, write_case, write_outputs
from yieldscape.reporting import (
    harvests_layer,
    stands_layer,
    wood_flow_by_product,
    wood_flow_table,
)
from yieldscape.reporting.compare import flatten
from yieldscape.reporting.concerns import level_held_down, monte_carlo_spread
from yieldscape.reporting.curves import curves_table
from yieldscape.reporting.indicators import (
    age_class_table,
    analysis_unit_table,
    boundary_index,
    harvest_breakdown,
    horizon_indicators,
    judge,
    revenue_by_period,
    stand_ages_table,
)
from yieldscape.reporting.tables import regeneration_table
from yieldscape.reporting.units import unit_outputs, with_unit
from yieldscape.results import CheckResult, RunResult
from yieldscape.runlog import Timer, captured_log, named_lines, released
from yieldscape.schedule import HarvestRules, SpatialRules, lp_plan, stable_periods_for
from yieldscape.schedule.cover import CoverRules, cover_report, cover_rules
from yieldscape.schedule.eligibility import (
    collapse_warnings,
    never_cut_warnings,
    too_large_for_openings,
)
from yieldscape.schedule.montecarlo import monte_carlo_table
from yieldscape.schedule.stage import (
    REGION,
    Schedule,
    harvest_partitions,
    management_units,
    schedule_run,
)

log = logging.getLogger("yieldscape")


def _warn(messages: list[str] | tuple[str, ...]) -> None:
    for message in messages:
        log.warning("%s", message)


# ----------------------------------------------------------------------------- check
def check(scenario: Scenario, strict: bool = False) -> CheckResult:
    """Read the stand layer, run every inventory check and the land base netdown.

    Nothing is projected or written.
    """
    _warn(scenario.warnings)
    cfg = scenario.inventory
    frame, layer = read_layer(cfg.path, cfg.layer)
    fill = None
    if cfg.from_raster.site_index is not None:
        raster = cfg.from_raster

        def fill(geoms: np.ndarray, crs: pyproj.CRS) -> np.ndarray:
            values, missing = raster_site_index(raster.site_index, raster.band, geoms, crs)
            if missing:
                log.warning(
                    "%s: inventory.from_raster.site_index: %d stands are not covered "
                    "(outside it or nodata)",
                    raster.site_index,
                    missing,
                )
            return values

    inventory = prepare_inventory(
        frame, scenario, where=f"{cfg.path}, layer {layer!r}", strict=strict, site_fill=fill
    )
    names = _layer_names(scenario)
    netdown = netdown_in_parts(  # a partitioned GeoParquet inventory one partition at a time
        inventory.stands,
        partition_rows(cfg.path),
        scenario.landbase.steps,
        lambda stands: where_fields(stands, names),
        read_overlay,
        read_step_raster,
        strict=strict,
    )
    _warn((*inventory.report.warnings, *netdown.warnings, *netdown.notes))
    stands = with_netdown_columns(inventory.stands, netdown, scenario.landbase.steps)
    _cover(scenario, stands)  # a target naming an unknown zone is an input error now
    check_run_size(scenario, len(stands), stand_extent_m(stands, scenario), _where(scenario))
    if scenario.harvest.spatial and scenario.harvest.max_opening_ha:
        _warn(too_large_for_openings(netdown.harvestable_ha, scenario.harvest.max_opening_ha))
    return CheckResult(stands, inventory.report, netdown)


def _layer_names(scenario: Scenario) -> dict[str, str | None]:
    """The stand table's standard columns -> the layer's names (where rules name either)."""
    f = scenario.inventory.fields
    names = {"stand_id": f.stand_id, "species": f.species, "site_index": f.site_index}
    return names | {"age_years": f.age, "zone": f.zone, "unit": f.unit}


def _where(scenario: Scenario) -> str:
    return f"{scenario.source}: " if scenario.source is not None else ""


def _cover(scenario: Scenario, stands: pd.DataFrame) -> CoverRules | None:
    names = zone_names(stands)
    codes = zone_codes(stands)
    return cover_rules(scenario.cover, names, codes, stands["area_ha"].to_numpy())


# ----------------------------------------------------------------------------- run
def run(
    scenario: Scenario,
    out_dir: str | Path | None,
    strict: bool = False,
    parallel: Parallel | None = None,
) -> RunResult:
    """Check, project, schedule and (if ``out_dir`` is given) write every output.

    The run's log (progress, warnings, the verdict) is kept in ``RunResult.log`` and written
    to ``run.log`` beside the other outputs. With ``parallel`` (:class:`Parallel`) the
    sensitivity cases and Monte Carlo replicates run as Dask tasks, with the same results.
    """
    out = Path(out_dir) if out_dir is not None else None
    for name, _, _ in scenario.sensitivity:
        if name in MANAGED:
            raise InputError(f"[[sensitivity]] name {name!r} is the name of an output file")
    if out is not None:
        check_output_dir(out, MANAGED)  # before the long stages, not after
    settings = parallel or Parallel()
    # staged first: outputs go there ahead of the write stage, cases on workers write there
    # as they end; left in reverse: the helpers writing ahead, the pool (no worker after it)
    with (
        captured_log() as capture,
        staged_output(out, MANAGED) if out else nullcontext(None) as staged,
        pool(settings, __name__) as tasks,
        outputs_ahead(staged, scenario) as ahead,
    ):
        cases = tasks and {  # started before the base case, to go on beside it
            name: tasks.submit(
                run_case,
                case,
                strict,
                staged and (str(staged), name, dict(sets)),
                prefix=f"case {name!r}: ",
            )
            for name, sets, case in scenario.sensitivity
        }
        result = _project(scenario, strict, tasks, ahead)
        result.out_dir, result.log = out, capture.lines
        result.warnings = tuple(capture.warnings)  # this run's own, not its cases'

        def collect() -> None:
            _run_cases(scenario, result, strict, cases)
            if tasks is not None:
                tasks.connected()  # a scheduler not reached: an error before anything is out
                tasks.close()  # the cluster shuts down beside what is left to write

        if staged is None or tasks is None:  # in one process: the cases, then all the writing
            collect()
        if staged is not None:
            log.info("write outputs ...")
            # with tasks, the base case's layers and figures are written while they end
            more = None if tasks is None else collect
            write_outputs(result, scenario, staged, cases=more, ahead=ahead)
    return result


def run_case(case: Scenario, strict: bool, where: tuple[str, str, dict] | None) -> RunResult:
    """A sensitivity case as a task: :func:`run` with no output; with ``where`` (the staged
    output folder, the case's name and keys set), written there (:func:`publish.write_case`)."""
    result = run(case, None, strict)
    return result if where is None else write_case(result, case, *where)


def _run_cases(scenario: Scenario, result: RunResult, strict: bool, tasks: dict | None) -> None:
    """Each [[sensitivity]] case as a run of its own, its log lines named after it (or its
    task's result, with its lines, where ``tasks`` has them)."""
    base = flatten(scenario.to_dict())
    for n, (name, sets, case) in enumerate(scenario.sensitivity, start=1):
        if flatten(case.to_dict()) == base:
            log.warning(
                "[[sensitivity]] %r changes nothing against the base case (%s; a --set "
                "of the same key applies to the base too)",
                name,
                ", ".join(f"{k} = {v!r}" for k, v in sets.items()),
            )
        log.info("sensitivity case %r (%d of %d) ...", name, n, len(scenario.sensitivity))
        if tasks:
            result.cases[name] = tasks[name].result()
            continue
        with named_lines(f"case {name!r}: "):
            result.cases[name] = run(case, None, strict=strict)


@dataclass(frozen=True)
class _Model:
    """What the projection runs on: the time grid, the curves and the per-stand arrays."""

    periods: Periods
    curves: CurveSet
    arrays: StandArrays


def _project(scenario: Scenario, strict: bool, tasks: Pool | None, ahead: Ahead) -> RunResult:
    """All but writing (the stands layer to ``ahead``): check, project, schedule, tables..."""
    timer = Timer()
    with timer.stage("read and check inventory"):
        inventory = check(scenario, strict=strict)
    ahead.curve_figures(inventory.stands)  # drawn beside the search
    model = _model(scenario, inventory)
    with timer.stage("project and schedule"):
        sched = _schedule(scenario, inventory, model, timer)
    flow = sched.flow
    log.info("flow level %.0f m3/year; limited by %s", flow.level_m3_per_year, flow.binding)
    with timer.stage("build output tables"):
        result = _tables(scenario, inventory, model, sched, ahead)
    if scenario.disturbance.replicates:
        with timer.stage("Monte Carlo disturbance"):
            d = scenario.disturbance
            targets = tuple(flow.simulation.harvest_m3)
            result.monte_carlo = monte_carlo_table(
                targets,
                model.arrays,
                model.curves,
                model.periods,
                sched.rules,
                d.replicates,
                d.seed,
                tasks,
            )
    if sched.rules.cover is not None:
        sim = flow.simulation
        result.cover = cover_report(sched.rules.cover, sim.cover_area_ha, model.periods.count)
    with timer.stage("indicators"):
        _indicators(scenario, model, sched, result)
    assert result.verdict is not None
    log.info("verdict: %s", result.verdict.statement)
    result.timings_s = timer.timings
    return result


def _model(scenario: Scenario, inventory: CheckResult) -> _Model:
    curves = CurveSet.from_scenario(scenario)
    _warn(collapse_warnings(curves))
    arrays = StandArrays.from_table(inventory.stands, scenario, curves)
    _warn(never_cut_warnings(arrays, curves, scenario.growth.max_age_years))
    return _Model(Periods.from_scenario(scenario), curves, arrays)


def _harvest_rules(scenario: Scenario, inventory: CheckResult, periods: Periods) -> HarvestRules:
    """The scenario's harvest rules as one value (the adjacency graph built or cached)."""
    h = scenario.harvest
    spatial = None
    if h.spatial:
        with Timer().stage("adjacency graph"):
            inv = scenario.inventory
            adj, hit = stand_adjacency(
                inventory.stands, inv.path, inv.layer, h.adjacency, h.separation_m
            )
        log.info("adjacency: %d neighbour pairs (%s)", adj.pairs, "cached" if hit else "built")
        spatial = SpatialRules(adj, h.greenup_years, h.max_opening_ha or 0.0)
    return HarvestRules(
        h.priority,
        h.max_area_ha_per_period,
        spatial,
        _cover(scenario, inventory.stands),
        scenario.disturbance.annual_rate,
        tuple(boundary_index(periods, y) for y in scenario.report.age_class_years),
    )


def _schedule(scenario: Scenario, inventory: CheckResult, model: _Model, timer: Timer) -> Schedule:
    """The scheduling stage (:func:`yieldscape.schedule.stage.schedule_run`) over the harvest
    rules with the scenario's management units and partitions."""
    stands, where = inventory.stands, f"{scenario.inventory.path}"
    units = management_units(scenario, stands["unit"], where)
    fields = where_fields(stands, _layer_names(scenario))
    parts = harvest_partitions(
        scenario, fields, model.curves.codes, str(scenario.source or "scenario")
    )
    rules = replace(
        _harvest_rules(scenario, inventory, model.periods),
        units=units.of_stand if units is not None else None,
        partitions=parts,
    )
    return schedule_run(scenario, model.arrays, model.curves, model.periods, rules, units, timer)


def _tables(
    scenario: Scenario, inventory: CheckResult, model: _Model, sched: Schedule, ahead: Ahead
) -> RunResult:
    """The run's tables (wood flow, stands, harvests, products) in a result to complete."""
    flow, s, c, p = sched.flow, model.arrays, model.curves, model.periods
    stands = released(stands_layer(flow, inventory.stands, s, c, p))
    ahead.stands_layer(stands)  # written beside the rest
    revenue = revenue_by_period(flow, s, c, scenario, p)
    lp_bound = None if sched.lp is None else sched.lp.harvest_m3
    return RunResult(  # released: each big table's temporaries freed before the next one's
        out_dir=None,
        inventory=inventory,
        flow=flow,
        wood_flow=with_unit(wood_flow_table(flow, p, lp_bound, revenue), REGION),
        stands=stands,
        harvests=released(harvests_layer(flow, inventory.stands, p, c.codes)),
        regeneration=released(regeneration_table(flow, c.codes)),
        products=released(wood_flow_by_product(flow, s, c, scenario)),
        write_harvestable_layer=scenario.landbase.write_harvestable_layer,
        openings=sched.openings,
    )


def _indicators(scenario: Scenario, model: _Model, sched: Schedule, result: RunResult) -> None:
    """The verdict, the concerns worth a warning, the indicators and the structure tables."""
    flow, s, p, stands = sched.flow, model.arrays, model.periods, result.inventory.stands
    area = s.cuttable_ha
    regulated = regulated_growing_stock_m3(model.curves, s, area)
    sustained = SustainedYield.of(model.curves, s, scenario.growth.search())  # units: its sums
    ltsy = result.long_term_sustained_yield = sustained.over(area)
    long_term = stable_periods_for(p, scenario.flow.long_term_periods)
    wf = result.wood_flow
    verdict = judge(wf, flow, scenario, ltsy["at_culmination"], regulated, long_term, result.cover)
    concerns = [level_held_down(wf, ltsy["at_culmination"], regulated, long_term, flow.binding)]
    if result.monte_carlo is not None:
        concerns.append(monte_carlo_spread(result.monte_carlo))
    _warn([c for c in concerns if c])
    result.by_unit = unit_outputs(
        flow,
        sched.units,
        sched.rules.partitions,
        sched.lp,
        scenario,
        (s, model.curves, p, sustained),
        long_term,
        wf,
    )
    if sched.units is not None:
        for name, v in zip(sched.units.names, result.by_unit.verdicts, strict=True):
            (log.info if v.sustainable else log.warning)("unit %r: %s", name, v.headline)
    result.lp = lp_plan.lp_record(sched.lp, flow, scenario)
    gross = result.inventory.report.area_ha
    hlb = float(result.inventory.netdown.harvestable_ha.sum())
    result.verdict, result.regulated_hlb_stock_m3 = verdict, regulated
    result.indicators = horizon_indicators(
        wf, flow, scenario, gross, hlb, ltsy, regulated, verdict, result.lp, result.monte_carlo
    )
    rep, snaps = scenario.report, flow.simulation.snapshots
    result.age_classes = released(
        age_class_table(snaps, stands, p, rep.age_class_years, rep.age_class_width_years)
    )
    result.stand_ages = released(stand_ages_table(snaps, stands, p, rep.age_class_years))
    result.analysis_units = analysis_unit_table(snaps, p, rep.age_class_years, model.curves.codes)
    result.harvest_breakdown = released(harvest_breakdown(flow, stands, p, model.curves.codes))
    result.curves, result.curve_summaries = curves_table(scenario, stands)
