"""The whole chain as library calls: :func:`check` and :func:`run`.

>>> import yieldscape
>>> scn = yieldscape.load_scenario("sample_region/scenario.toml")   # doctest: +SKIP
>>> result = yieldscape.run(scn, "results/")                        # doctest: +SKIP
>>> result.wood_flow.head()                                        # doctest: +SKIP
"""

from __future__ import annotations

import logging
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from yieldscape.adjacency import Adjacency, build_adjacency
from yieldscape.config import HarvestConfig, NetdownStep, Scenario
from yieldscape.errors import InputError, OutputError
from yieldscape.growth.rules import max_mai
from yieldscape.inventory import CheckReport, prepare_inventory
from yieldscape.io.cache import cached_arrays
from yieldscape.io.outputs import (
    check_files_dir,
    check_output_dir,
    read_run,
    replace_file,
    staged_output,
)
from yieldscape.io.rasters import RasterData, raster_crs, read_window
from yieldscape.io.vector import read_layer
from yieldscape.landbase import (
    Netdown,
    NetdownError,
    apply_netdown,
    metres_per_unit,
    metric_geometries,
)
from yieldscape.limits import check_run_size
from yieldscape.policies import Targets
from yieldscape.projection import (
    CurveSet,
    Periods,
    StandArrays,
    regulated_growing_stock_m3,
    zone_codes,
    zone_names,
)
from yieldscape.publish import (
    COMPARISON_CSV,
    COMPARISON_PNG,
    CURVES_CSV,
    FIGURES_DIR,
    MANAGED,
    RUN_JSON,
    dominant_sites,
    figure_age,
    write_outputs,
)
from yieldscape.reporting import (
    harvests_layer,
    stands_layer,
    wood_flow_by_product,
    wood_flow_table,
)
from yieldscape.reporting.compare import comparison_figure, comparison_table, flatten
from yieldscape.reporting.concerns import level_held_down, monte_carlo_spread
from yieldscape.reporting.curves import curves_table
from yieldscape.reporting.curves import notes as curve_notes
from yieldscape.reporting.figures import curve_figure
from yieldscape.reporting.indicators import (
    Verdict,
    age_class_table,
    boundary_index,
    harvest_breakdown,
    horizon_indicators,
    judge,
    revenue_by_period,
    stand_ages_table,
)
from yieldscape.schedule import FlowResult, schedule, simulate, spatial_rules, stable_periods_for
from yieldscape.schedule.cover import CoverRule, CoverRules
from yieldscape.schedule.eligibility import never_cut_warnings
from yieldscape.schedule.lp import Economics, LPResult, Strata, make_strata, solve_lp
from yieldscape.versions import library_versions
from yieldscape.zonal import zonal

log = logging.getLogger("yieldscape")


@dataclass
class RunResult:
    """What a run produced: the tables in memory and where the files went."""

    out_dir: Path | None
    inventory: CheckResult
    flow: FlowResult
    wood_flow: pd.DataFrame
    stands: gpd.GeoDataFrame
    harvests: gpd.GeoDataFrame
    products: pd.DataFrame
    timings_s: dict[str, float] = field(default_factory=dict)
    write_harvestable_layer: bool = False
    long_term_sustained_yield: dict[str, float] = field(default_factory=dict)  # m3/year
    openings: pd.DataFrame | None = None  # with spatial rules
    lp: dict | None = None  # the harvest LP: solver, status, objective, gap
    cover: pd.DataFrame | None = None  # cover targets per period
    monte_carlo: pd.DataFrame | None = None  # percentiles over disturbance replicates
    cases: dict[str, RunResult] = field(default_factory=dict)  # sensitivity cases by name
    verdict: Verdict | None = None  # is the flow sustainable, and why
    indicators: pd.DataFrame | None = None  # one row per indicator over the horizon
    age_classes: pd.DataFrame | None = None  # area by year, zone and age class
    stand_ages: pd.DataFrame | None = None  # each stand's age at the report years
    harvest_breakdown: pd.DataFrame | None = None  # harvest by period, zone and species
    regulated_hlb_stock_m3: float = float("nan")  # a regulated forest's, harvestable land
    curves: pd.DataFrame | None = None  # the curves report table (per species and site)
    curve_summaries: dict = field(default_factory=dict)  # its SiteSummary lists by species
    log: list[str] = field(default_factory=list)  # the run's log lines (run.log)
    warnings: tuple[str, ...] = ()  # what the run warned of (also in run.log and the report)

    @property
    def level_m3_per_year(self) -> float:
        return self.flow.level_m3_per_year


class _Timer:
    def __init__(self) -> None:
        self.timings: dict[str, float] = {}

    @contextmanager
    def stage(self, name: str) -> Iterator[None]:
        log.info("%s ...", name)
        t0 = time.perf_counter()
        yield
        self.timings[name] = round(time.perf_counter() - t0, 4)
        log.info("%s done in %.2f s", name, self.timings[name])


@dataclass(frozen=True)
class CheckResult:
    """A checked inventory with its land base: stands (with netdown columns), report, netdown."""

    stands: gpd.GeoDataFrame
    report: CheckReport
    netdown: Netdown

    def summary(self) -> str:
        lines = [self.report.summary(), "land base netdown (ha):"]
        for row in self.netdown.table.itertuples(index=False):
            step = "" if pd.isna(row.step) else f"{row.step:>2}"
            removed = "" if pd.isna(row.removed_ha) else f"{row.removed_ha:>12,.1f}"
            lines.append(
                f"  {step:>2} {row.label:<30} {removed:>12} {row.percent_of_gross:>6.1f}%"
                f" {row.remaining_ha:>12,.1f}"
            )
        lines += [f"note: {n}" for n in self.netdown.notes]
        return "\n".join(lines)


def check(scenario: Scenario, strict: bool = False) -> CheckResult:
    """Read the stand layer, run every inventory check and the land base netdown.

    Nothing is projected or written.
    """
    for message in scenario.warnings:
        log.warning("%s", message)
    cfg = scenario.inventory
    frame, layer = read_layer(cfg.path, cfg.layer)
    fill = None
    if cfg.from_raster.site_index is not None:

        def fill(geoms: np.ndarray, crs: pyproj.CRS) -> np.ndarray:
            return _raster_site_index(cfg.from_raster.site_index, cfg.from_raster.band, geoms, crs)

    inventory = prepare_inventory(
        frame, scenario, where=f"{cfg.path}, layer {layer!r}", strict=strict, site_fill=fill
    )
    stands = inventory.stands
    netdown = apply_netdown(
        stands,
        scenario.landbase.steps,
        _where_fields(stands, scenario),
        _read_overlay,
        _read_raster,
        strict=strict,
    )
    for message in (*inventory.report.warnings, *netdown.warnings):
        log.warning("%s", message)
    for note in netdown.notes:
        log.warning("%s", note)
    stands = stands.copy()
    geom = stands.geometry.name
    extra = {"gross_ha": netdown.gross_ha}
    for step, removed in zip(scenario.landbase.steps, netdown.removed_ha, strict=True):
        extra[f"removed_step{step.number}_ha"] = removed
    extra["harvestable_ha"] = netdown.harvestable_ha
    at = list(stands.columns).index("area_ha") + 1
    for offset, (name, values) in enumerate(extra.items()):
        stands.insert(at + offset, name, values)
    stands = stands[[c for c in stands.columns if c != geom] + [geom]]
    result = CheckResult(stands, inventory.report, netdown)
    cover_rules(scenario, result)  # a target naming an unknown zone is an input error now
    extent = (0.0, 0.0)
    if scenario.report.raster_cell_m:
        geoms, wcrs = metric_geometries(stands)
        x0, y0, x1, y1 = shapely.total_bounds(geoms)
        extent = ((x1 - x0) * metres_per_unit(wcrs), (y1 - y0) * metres_per_unit(wcrs))
    where = f"{scenario.source}: " if scenario.source is not None else ""
    check_run_size(scenario, len(stands), extent, where)
    opening = scenario.harvest.max_opening_ha
    if scenario.harvest.spatial and opening:
        big = netdown.harvestable_ha > opening * (1 + 1e-9)
        if big.any():
            log.warning(
                "harvest.max_opening_ha = %g: %d stands (%.0f ha harvestable) are larger and "
                "will never be cut; raise it or split those stands",
                opening,
                int(big.sum()),
                float(netdown.harvestable_ha[big].sum()),
            )
    return result


def _where_fields(stands: gpd.GeoDataFrame, scenario: Scenario) -> dict[str, pd.Series]:
    """Fields a netdown rule may name: ours, the layer's names for them, and the others."""
    fields = {c: stands[c] for c in stands.columns if c != stands.geometry.name}
    f = scenario.inventory.fields
    for ours, theirs in (
        ("stand_id", f.stand_id),
        ("species", f.species),
        ("site_index", f.site_index),
        ("age_years", f.age),
        ("zone", f.zone),
    ):
        if theirs is not None and theirs not in fields:
            fields[theirs] = stands[ours]
    return fields


def _read_overlay(step: NetdownStep, crs: pyproj.CRS) -> gpd.GeoDataFrame:
    assert step.layer is not None
    where = f"[[landbase.steps]] #{step.number} {step.label!r}"
    try:
        frame, layer = read_layer(step.layer, step.layer_name, "layer_name", "overlay layer")
    except InputError as exc:
        raise NetdownError(f"{where}: {exc}") from None
    if frame.crs is None:
        raise NetdownError(f"{where}: {step.layer}, layer {layer!r}: the layer has no CRS")
    frame = frame[~(frame.geometry.is_empty | frame.geometry.isna())]
    return frame.to_crs(crs)


def _read_raster(
    step: NetdownStep, geoms: np.ndarray, crs: pyproj.CRS
) -> tuple[RasterData | None, np.ndarray]:
    assert step.raster is not None
    where = f"[[landbase.steps]] #{step.number} {step.label!r}"
    return _raster_over(step.raster, step.band, geoms, crs, where)


def _raster_over(
    path: Path, band: int, geoms: np.ndarray, crs: pyproj.CRS, what: str
) -> tuple[RasterData | None, np.ndarray]:
    """The raster window over the geometries, and the geometries in the raster's CRS."""
    rcrs = raster_crs(path, what)
    in_r = geoms if rcrs == crs else gpd.GeoSeries(geoms, crs=crs).to_crs(rcrs).to_numpy()
    live = in_r[~(shapely.is_empty(in_r) | shapely.is_missing(in_r))]
    if not len(live):
        return None, in_r
    return read_window(path, tuple(shapely.total_bounds(live)), band, what), in_r


def _raster_site_index(path: Path, band: int, geoms: np.ndarray, crs: pyproj.CRS) -> np.ndarray:
    what = "inventory.from_raster.site_index"
    raster, in_r = _raster_over(path, band, geoms, crs, what)
    if raster is None:
        raise InputError(f"{path}: {what}: the raster does not overlap the stands")
    z = zonal(in_r, raster)
    if not z.covered.any():
        raise InputError(f"{path}: {what}: the raster holds no data over the stands")
    missing = int((~z.covered).sum())
    if missing:
        log.warning("%s: %s: %d stands are not covered (outside it or nodata)", path, what, missing)
    return z.mean


def run(scenario: Scenario, out_dir: str | Path | None, strict: bool = False) -> RunResult:
    """Check, project, schedule and (if ``out_dir`` is given) write every output.

    The run's log (progress, warnings, the verdict) is kept in ``RunResult.log`` and written
    to ``run.log`` beside the other outputs.
    """
    out = Path(out_dir) if out_dir is not None else None
    for name, _, _ in scenario.sensitivity:
        if name in MANAGED:
            raise InputError(f"[[sensitivity]] name {name!r} is the name of an output file")
    if out is not None:
        check_output_dir(out, MANAGED)  # before the long stages, not after
    with _captured_log() as capture:
        result = _project(scenario, strict)
        result.out_dir, result.log = out, capture.lines
        result.warnings = tuple(capture.warnings)  # this run's own, not its cases'
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
            with _named_lines(f"case {name!r}: "):
                result.cases[name] = run(case, None, strict=strict)
        if out is not None:
            with staged_output(out, MANAGED) as tmp:
                log.info("write outputs ...")
                write_outputs(result, scenario, tmp)
    return result


@contextmanager
def _named_lines(prefix: str) -> Iterator[None]:
    """Begin every yieldscape log line with ``prefix`` while the block runs, so that a
    sensitivity case's lines (its warnings, its verdict) say whose they are."""

    def name(record: logging.LogRecord) -> bool:
        record.msg, record.args = prefix + record.getMessage(), ()
        return True

    logger = logging.getLogger("yieldscape")
    logger.addFilter(name)
    try:
        yield
    finally:
        logger.removeFilter(name)


class _LogLines(logging.Handler):
    """Keeps the formatted records of a run in a list."""

    def __init__(self) -> None:
        super().__init__(logging.INFO)
        self.lines: list[str] = []
        self.warnings: list[str] = []  # the messages of WARNING records and above
        self.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))

    def emit(self, record: logging.LogRecord) -> None:
        self.lines.append(self.format(record))
        if record.levelno >= logging.WARNING:
            self.warnings.append(record.getMessage())


@contextmanager
def _captured_log() -> Iterator[_LogLines]:
    """Collect the yieldscape logger's INFO and higher records while the block runs. A library
    caller who configured no logging still sees warnings on stderr, as without capture."""
    logger = logging.getLogger("yieldscape")
    capture = _LogLines()
    extra: list[logging.Handler] = [capture]
    if not logger.handlers and not logging.getLogger().handlers:
        warn = logging.StreamHandler()
        warn.setLevel(logging.WARNING)
        extra.append(warn)
    level = logger.level
    if logger.getEffectiveLevel() > logging.INFO:
        logger.setLevel(logging.INFO)
    for h in extra:
        logger.addHandler(h)
    try:
        yield capture
    finally:
        for h in extra:
            logger.removeHandler(h)
        logger.setLevel(level)


def _project(scenario: Scenario, strict: bool) -> RunResult:
    """Everything of a run but writing: check, project, schedule, tables, indicators."""
    timer = _Timer()
    with timer.stage("read and check inventory"):
        inventory = check(scenario, strict=strict)
    periods = Periods.from_scenario(scenario)
    curves = CurveSet.from_scenario(scenario)
    for code, curve in zip(curves.codes, curves.curves, strict=True):
        if getattr(curve, "collapses", False):
            log.warning(
                "species %s: initial_m3_ha is below min_viable_m3_ha, so its stands "
                "collapse after harvest instead of regrowing",
                code,
            )
    arrays = StandArrays.from_table(inventory.stands, scenario, curves)
    for message in never_cut_warnings(arrays, curves, scenario.growth.max_age_years):
        log.warning("%s", message)
    with timer.stage("project and schedule"):
        adjacency = None
        if scenario.harvest.spatial:
            adjacency = stand_adjacency(scenario, inventory)
        lp = None
        fcfg = scenario.flow
        if fcfg.method == "optimize" or (fcfg.lp_bound and fcfg.policy in ("even", "nondeclining")):
            with timer.stage("harvest LP"):
                lp, strata = harvest_lp(scenario, arrays, curves, periods, inventory)
        cover = cover_rules(scenario, inventory)
        rate = scenario.disturbance.annual_rate
        snaps = tuple(boundary_index(periods, y) for y in scenario.report.age_class_years)
        if fcfg.method == "optimize":
            assert lp is not None
            flow = lp_schedule(
                lp, strata, arrays, curves, periods, scenario, adjacency, cover, snaps
            )
        else:
            flow = schedule(
                arrays,
                curves,
                periods,
                scenario.flow,
                scenario.harvest,
                adjacency,
                cover,
                rate,
                snaps,
            )
        openings = None
        if adjacency is not None:
            if fcfg.method == "rules":
                aspatial = schedule(
                    arrays,
                    curves,
                    periods,
                    scenario.flow,
                    replace(scenario.harvest, greenup_years=0.0, max_opening_ha=None),
                    None,
                    cover,
                    rate,
                )
                flow.details["aspatial_level_m3_per_period"] = aspatial.level_m3_per_period
                flow.details["spatial_cost_m3_per_period"] = (
                    aspatial.level_m3_per_period - flow.level_m3_per_period
                )
            openings = openings_table(flow, adjacency, periods, scenario.harvest)
            check_openings(openings, scenario.harvest)
    log.info("flow level %.0f m3/year; limited by %s", flow.level_m3_per_year, flow.binding)
    ltsy = long_term_sustained_yield(scenario, curves, arrays)
    with timer.stage("build output tables"):
        revenue = revenue_by_period(flow, arrays, curves, scenario, periods)
        wood_flow = wood_flow_table(flow, periods, None if lp is None else lp.harvest_m3, revenue)
        stands = stands_layer(flow, inventory.stands, arrays, curves, periods)
        harvests = harvests_layer(flow, inventory.stands, periods)
        products = wood_flow_by_product(flow, arrays, curves, scenario)
    monte_carlo = None
    if scenario.disturbance.replicates:
        with timer.stage("Monte Carlo disturbance"):
            monte_carlo = monte_carlo_table(
                flow, arrays, curves, periods, scenario, adjacency, cover
            )
    cover_table = None
    if scenario.cover:
        cover_table = cover_report(cover, flow, periods)
    with timer.stage("indicators"):
        rep = scenario.report
        snapshots = flow.simulation.snapshots
        area = arrays.harvestable_ha if arrays.harvestable_ha is not None else arrays.area_ha
        regulated = regulated_growing_stock_m3(curves, arrays, area)
        verdict = judge(
            wood_flow,
            flow,
            scenario,
            ltsy["at_culmination"],
            regulated,
            stable_periods_for(periods, fcfg.long_term_periods),
            cover_table,
        )
        concerns = [
            level_held_down(
                wood_flow,
                ltsy["at_culmination"],
                regulated,
                stable_periods_for(periods, fcfg.long_term_periods),
                flow.binding,
            ),
            None if monte_carlo is None else monte_carlo_spread(monte_carlo),
        ]
        for message in filter(None, concerns):
            log.warning("%s", message)
        lp_rec = lp_record(lp, flow, scenario)
        indicators = horizon_indicators(
            wood_flow,
            flow,
            scenario,
            inventory.report.area_ha,
            float(inventory.netdown.harvestable_ha.sum()),
            ltsy,
            regulated,
            verdict,
            lp_rec,
            monte_carlo,
        )
        age_classes = age_class_table(
            snapshots, inventory.stands, periods, rep.age_class_years, rep.age_class_width_years
        )
        stand_ages = stand_ages_table(snapshots, inventory.stands, periods, rep.age_class_years)
        breakdown = harvest_breakdown(flow, inventory.stands, periods)
        curve_table, curve_sums = curves_table(scenario, inventory.stands)
    log.info("verdict: %s", verdict.statement)
    result = RunResult(
        None,
        inventory,
        flow,
        wood_flow,
        stands,
        harvests,
        products,
        timer.timings,
        scenario.landbase.write_harvestable_layer,
        ltsy,
        openings,
        lp_rec,
        cover_table,
        monte_carlo,
        verdict=verdict,
        indicators=indicators,
        age_classes=age_classes,
        stand_ages=stand_ages,
        harvest_breakdown=breakdown,
        regulated_hlb_stock_m3=regulated,
        curves=curve_table,
        curve_summaries=curve_sums,
    )
    return result


def long_term_sustained_yield(
    scenario: Scenario, curves: CurveSet, arrays: StandArrays
) -> dict[str, float]:
    """Harvestable area times MAI, summed over stands [m3/year]: at each stand's MAI
    culmination, and at its minimum harvest age (the rotation the rules use)."""
    area = arrays.harvestable_ha if arrays.harvestable_ha is not None else arrays.area_ha
    at_cul = np.zeros(arrays.n)
    for i in range(len(curves.codes)):  # per species; per distinct site inside
        mine = arrays.species_idx == i
        if mine.any():
            at_cul[mine] = max_mai(
                curves.curves[i], arrays.site_index[mine], scenario.growth.search()
            )
    r = arrays.min_harvest_age
    ok = np.isfinite(r) & (r > 0)
    at_rot = np.zeros(arrays.n)
    at_rot[ok] = curves.volume_m3_ha(arrays.species_idx[ok], r[ok], arrays.site_index[ok]) / r[ok]
    return {
        "at_culmination": float(np.dot(area, at_cul)),
        "at_min_harvest_age": float(np.dot(area, at_rot)),
    }


def monte_carlo_table(
    flow: FlowResult,
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    scenario: Scenario,
    adjacency: Adjacency | None,
    cover: CoverRules | None,
) -> pd.DataFrame:
    """Replicates of the schedule's targets under random whole-stand disturbance.

    Each replicate aims at the harvest the expected-value schedule takes in each period;
    P10 / P50 / P90 of harvest and growing stock and the share of replicates that fall short
    of the target are reported per period. The seed is ``disturbance.seed``.
    """
    d = scenario.disturbance
    spatial = spatial_rules(scenario.harvest, adjacency)
    targets = tuple(flow.simulation.harvest_m3)
    rng = np.random.default_rng(d.seed)
    h, gs = [], []
    for _ in range(d.replicates):  # replicates, each a vectorised horizon
        sim = simulate(
            arrays,
            curves,
            periods,
            0.0,
            priority=scenario.harvest.priority,
            max_area_ha=scenario.harvest.max_area_ha_per_period,
            record=True,
            rule=Targets(targets),
            spatial=spatial,
            cover=cover,
            disturbance=d.annual_rate,
            rng=rng,
        )
        h.append(sim.harvest_m3)
        gs.append(sim.growing_stock_end_m3)
    h_arr, gs_arr = np.array(h), np.array(gs)
    short = h_arr < np.asarray(targets)[None, :] * (1 - 1e-6)
    q = [10, 50, 90]
    hp, gp = np.percentile(h_arr, q, axis=0), np.percentile(gs_arr, q, axis=0)
    return pd.DataFrame(
        {
            "period": np.arange(1, periods.count + 1),
            "target_m3": targets,
            "p10_m3": hp[0],
            "p50_m3": hp[1],
            "p90_m3": hp[2],
            "shortfall_probability": short.mean(axis=0),
            "growing_stock_p10_m3": gp[0],
            "growing_stock_p50_m3": gp[1],
            "growing_stock_p90_m3": gp[2],
        }
    )


def cover_rules(scenario: Scenario, checked: CheckResult) -> CoverRules | None:
    """The scenario's [[cover]] targets over the stands' zones (unknown zones are errors)."""
    if not scenario.cover:
        return None
    names = zone_names(checked.stands)
    codes = zone_codes(checked.stands)
    area = np.bincount(codes, checked.stands["area_ha"].to_numpy(), len(names))
    rules = []
    for n, t in enumerate(scenario.cover, start=1):
        if t.zone != "*" and t.zone not in names:
            raise InputError(
                f"[[cover]] #{n}: zone {t.zone!r} is not a zone of the stands; "
                f"their zones: {', '.join(n for n in names if n) or '(none)'}"
            )
        code = -1 if t.zone == "*" else names.index(t.zone)
        rules.append(CoverRule(code, t.zone, t.kind, t.age_years, t.share))
    return CoverRules(tuple(rules), area)


def cover_report(cover: CoverRules | None, flow: FlowResult, periods: Periods) -> pd.DataFrame:
    """Per period and target: the share reached after the period's cut, and whether it holds."""
    assert cover is not None
    areas = flow.simulation.cover_area_ha
    rows = []
    for i, r in enumerate(cover.rules):
        share = areas[:, i] / cover.area_of(r)
        met = share >= r.share - 1e-9 if r.kind == "old" else share <= r.share + 1e-9
        rows.append(
            pd.DataFrame(
                {
                    "period": np.arange(1, periods.count + 1),
                    "zone": r.zone_name,
                    "rule": r.label,
                    "target": r.share,
                    "share": share,
                    "met": met,
                }
            )
        )
    return pd.concat(rows, ignore_index=True)


def harvest_lp(
    scenario: Scenario,
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    checked: CheckResult,
) -> tuple[LPResult, Strata]:
    """The Model II harvest LP of the scenario (aspatial), solved with HiGHS."""
    f = scenario.flow
    zones = zone_codes(checked.stands)
    strata = make_strata(arrays, zones, f.lp_site_class_m, f.lp_age_class_years)
    policy = "nondeclining" if f.policy == "nondeclining" else "even"
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
        cover_rules(scenario, checked),
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
    adjacency: Adjacency | None = None,
    cover: CoverRules | None = None,
    snapshots: tuple[int, ...] = (),
) -> FlowResult:
    """Map the LP onto stands: each stratum's stands (in id order) are planned for the periods
    in which the LP cuts the stratum's area, and the scheduler then takes the LP's harvest of
    each period as its target, planned stands first. The rules the LP does not model (spatial
    rules, cover targets, disturbance) are applied here, so the gap shows what they cost."""
    spatial = spatial_rules(scenario.harvest, adjacency)
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
        0.0,
        priority=scenario.harvest.priority,
        max_area_ha=scenario.harvest.max_area_ha_per_period,
        record=True,
        rule=Targets(tuple(lp.harvest_m3)),
        planned=planned,
        spatial=spatial,
        cover=cover,
        disturbance=scenario.disturbance.annual_rate,
        snapshots=snapshots,
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


def lp_record(lp: LPResult | None, flow: FlowResult, scenario: Scenario) -> dict | None:
    """What run.json says of the LP: solver, status, size, objective, duals, gap."""
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
    }


def stand_adjacency(scenario: Scenario, checked: CheckResult) -> Adjacency:
    """The adjacency graph of the stands, from the cache when the stand layer is unchanged."""
    h = scenario.harvest
    geoms, wcrs = metric_geometries(checked.stands)
    separation = h.separation_m / metres_per_unit(wcrs)

    def build() -> dict[str, np.ndarray]:
        adj = build_adjacency(geoms, h.adjacency, separation)
        return {"indptr": adj.indptr, "indices": adj.indices}

    options = f"adjacency|{scenario.inventory.layer}|{h.adjacency}|{h.separation_m}|{len(geoms)}"
    with _Timer().stage("adjacency graph"):
        arrays, hit = cached_arrays("adjacency", scenario.inventory.path, options, build)
    adj = Adjacency(arrays["indptr"], arrays["indices"])
    log.info("adjacency: %d neighbour pairs (%s)", adj.pairs, "cached" if hit else "built")
    return adj


def openings_table(
    flow: FlowResult, adjacency: Adjacency, periods: Periods, harvest: HarvestConfig
) -> pd.DataFrame:
    """Openings at each period's harvest, rebuilt from the harvest events: stands cut within
    the green-up window, grouped by adjacency; area is the area cut in the window."""
    sim = flow.simulation
    times = periods.harvest_years - periods.start_year
    ev_t = times[sim.event_period - 1] if len(sim.event_period) else np.zeros(0)
    rows = []
    for p in range(periods.count):  # per period, a handful of vectorised calls
        t = times[p]
        window = (ev_t <= t + 1e-9) & (t - ev_t < harvest.greenup_years - 1e-9)
        area = np.bincount(sim.event_stand[window], sim.event_area_ha[window], adjacency.n)
        labels = adjacency.components(area > 0)
        if (labels >= 0).any():
            lab = labels[labels >= 0]
            sizes = np.bincount(lab, area[labels >= 0])
            counts = np.bincount(lab)
            rows.append(
                pd.DataFrame(
                    {
                        "period": p + 1,
                        "opening_id": np.arange(1, len(sizes) + 1),
                        "area_ha": sizes,
                        "n_stands": counts,
                    }
                )
            )
    cols = ["period", "opening_id", "area_ha", "n_stands"]
    return pd.concat(rows, ignore_index=True) if rows else pd.DataFrame(columns=cols)


def check_openings(openings: pd.DataFrame, harvest: HarvestConfig) -> None:
    """The rules hold in the output: a breach here is a bug, never a user's error."""
    if harvest.max_opening_ha:
        bad = openings[openings["area_ha"] > harvest.max_opening_ha * (1 + 1e-9)]
    else:
        bad = openings[openings["n_stands"] > 1]
    if len(bad):
        raise RuntimeError(f"spatial rules broken in the schedule: {bad.head().to_dict('records')}")


@dataclass
class CurvesResult:
    """The curves report: the table, its notes, and the files written (if any)."""

    table: pd.DataFrame
    notes: list[str]
    files: list[Path]


def curves(
    scenario: Scenario, out_dir: str | Path | None = None, site_step_m: float = 1.0
) -> CurvesResult:
    """Per species and site value in use: culmination, rules, rotations; CSV and figures.

    Files go into ``out_dir`` one by one, each written to a temporary name and moved into
    place, so the report can sit beside a run's outputs without touching them.
    """
    out = Path(out_dir) if out_dir is not None else None
    if out is not None:
        check_files_dir(out)
    inventory = check(scenario)
    with _Timer().stage("curves report"):
        table, summaries = curves_table(scenario, inventory.stands, site_step_m)
    files: list[Path] = []
    if out is not None:
        replace_file(out / CURVES_CSV, lambda p: table.to_csv(p, index=False), out)
        files.append(out / CURVES_CSV)
        for code, main in dominant_sites(table, summaries).items():
            path = out / FIGURES_DIR / f"curves_{code}.png"
            curve = scenario.species[code].yield_curve()
            age = figure_age(main, scenario.growth.max_age_years)
            replace_file(
                path, lambda p, c=code, cv=curve, m=main, a=age: curve_figure(p, c, cv, m, a), out
            )
            files.append(path)
    return CurvesResult(table, curve_notes(table), files)


def compare(run_dirs: list[str | Path], out_dir: str | Path) -> pd.DataFrame:
    """Compare yieldscape runs: ``OUT/comparison.csv`` (one row per run) and the overlay
    figure ``OUT/comparison.png``; each file is written to a temporary name first."""
    out = Path(out_dir)
    check_files_dir(out)
    if (out / RUN_JSON).exists():
        raise OutputError(
            f"--out {out}: holds a yieldscape run ({RUN_JSON}), whose own {COMPARISON_CSV} the "
            "comparison would replace; choose another directory"
        )
    runs = []
    for d in map(Path, run_dirs):
        rec, wf = read_run(d)
        runs.append((str(d), rec, wf))
    table = comparison_table(runs)
    replace_file(out / COMPARISON_CSV, lambda p: table.to_csv(p, index=False), out)
    replace_file(out / COMPARISON_PNG, lambda p: comparison_figure(p, runs), out)
    return table
