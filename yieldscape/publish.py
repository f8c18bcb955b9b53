"""Everything a run writes into its (staged) output directory: the GeoPackage with its tables
and per-period map layers, the CSV tables, figures, the HTML (and Markdown) report, optional
GeoTIFFs, ``run.json`` and ``run.log``. Names of every file are here, in one place."""

from __future__ import annotations

import logging
import os
import shutil
import time
from collections.abc import Callable, Iterator
from contextlib import ExitStack, contextmanager, nullcontext
from datetime import UTC, datetime
from functools import partial
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from yieldscape import sharedwork
from yieldscape.config import Scenario
from yieldscape.geometry import metres_per_unit, metric_geometries
from yieldscape.growth import StockGrowth
from yieldscape.growth.rules import SiteSummary
from yieldscape.io.geoparquet import write_geoparquet
from yieldscape.io.outputs import replace_file, sha256_file, write_json
from yieldscape.io.rasters import write_geotiff
from yieldscape.io.vector import (
    add_feature_views,
    fid_runs,
    fids_in_order,
    move_attribute_table,
    sync_in_background,
    unsynced_gpkg,
    write_gpkg_layer,
)
from yieldscape.reporting.compare import comparison_figure, comparison_table
from yieldscape.reporting.curves import curves_table, rotation_summary
from yieldscape.reporting.figures import (
    age_class_figure,
    cover_figure,
    curve_figure,
    growing_stock_figure,
    harvest_figure,
    harvest_map_figure,
    monte_carlo_figure,
    stock_shapes_figure,
)
from yieldscape.reporting.report import Figure, ReportData, html_report, markdown_report
from yieldscape.reporting.units import units_record
from yieldscape.results import CheckResult, RunResult, without_stands
from yieldscape.sharedwork import Claim, shared_jobs
from yieldscape.versions import library_versions
from yieldscape.zonal import stand_grid

log = logging.getLogger("yieldscape")


GPKG_NAME = "projection.gpkg"
# output.format = "geoparquet": the layers as GeoParquet files instead of the GeoPackage
STANDS_PARQUET = "stands.parquet"
HARVESTS_PARQUET = "harvests.parquet"
HARVESTABLE_PARQUET = "harvestable.parquet"
STAND_AGES_PARQUET = "stand_ages.parquet"  # a plain Parquet table (no geometry)
HARVEST_EVENTS = "harvest_events"  # the table under the harvests view
WOOD_FLOW_CSV = "wood_flow.csv"
PRODUCTS_CSV = "wood_flow_by_product.csv"
NETDOWN_CSV = "netdown.csv"
OPENINGS_CSV = "openings.csv"
COVER_CSV = "cover.csv"
MONTE_CARLO_CSV = "monte_carlo.csv"
INDICATORS_CSV = "indicators.csv"
VERDICT_CSV = "verdict.csv"
AGE_CLASSES_CSV = "age_classes.csv"
BREAKDOWN_CSV = "harvest_by_zone_species.csv"
REGENERATION_CSV = "regeneration.csv"
UNITS_CSV = "area_by_analysis_unit.csv"
MANAGEMENT_UNITS_CSV = "management_units.csv"
PARTITIONS_CSV = "partitions.csv"
CONSTRAINTS_CSV = "constraints.csv"
COMPARISON_CSV = "comparison.csv"
COMPARISON_PNG = "comparison.png"
REPORT_HTML = "report.html"
REPORT_MD = "report.md"
RUN_JSON = "run.json"
RUN_LOG = "run.log"
CURVES_CSV = "curves.csv"
STOCK_SHAPES_PNG = "stock_shapes.png"  # in FIGURES_DIR, with stock-growth species
FIGURES_DIR = "figures"
RASTERS_DIR = "rasters"
# every entry yieldscape writes into an output directory (run, curves)
MANAGED = frozenset(
    {
        GPKG_NAME,
        STANDS_PARQUET,
        HARVESTS_PARQUET,
        HARVESTABLE_PARQUET,
        STAND_AGES_PARQUET,
        WOOD_FLOW_CSV,
        PRODUCTS_CSV,
        NETDOWN_CSV,
        OPENINGS_CSV,
        COVER_CSV,
        MONTE_CARLO_CSV,
        INDICATORS_CSV,
        VERDICT_CSV,
        AGE_CLASSES_CSV,
        BREAKDOWN_CSV,
        REGENERATION_CSV,
        UNITS_CSV,
        MANAGEMENT_UNITS_CSV,
        PARTITIONS_CSV,
        CONSTRAINTS_CSV,
        COMPARISON_CSV,
        REPORT_HTML,
        REPORT_MD,
        RUN_JSON,
        RUN_LOG,
        CURVES_CSV,
        FIGURES_DIR,
        RASTERS_DIR,
    }
)
LONG_TABLE = "stand_ages"  # the longest table (stands x report years)
SIDE_GPKG = ".stand_ages.gpkg"  # where a helper process writes it (moved into GPKG_NAME)
WRITING = ".writing"  # SIDE_GPKG's name while the helper writes it
MAP_PIXELS = 1200  # cells along the longer side of the harvest map figure
BASE_LABEL = "base"  # the base case's name in the comparison with its sensitivity cases


class Ahead:
    """Outputs written ahead of the write stage, each by a helper process forked
    (:func:`~yieldscape.sharedwork.beside`) once what it needs is built, beside the run's
    stages that keep one core busy: the yield-curve figures once the stands are read
    (beside the flow search), the ``stands`` layer once built (beside the other tables and
    the indicators; GDAL's inserts of its rows took 4.5-8.6 s at 1M stands). The writer
    waits for each where it needs it. A run that writes nothing, or does not fork (not
    Linux), writes everything in its write stage (:data:`NOT_AHEAD`, :func:`outputs_ahead`).
    """

    def __init__(self, directory: Path | None, scenario: Scenario, stack: ExitStack) -> None:
        self.directory, self.scenario, self.stack = directory, scenario, stack
        self._waits: dict[str, Callable[[], object]] = {}
        self._done: dict[str, object] = {}

    def _start(self, name: str, task: Callable[[], object]) -> None:
        if self.directory is not None and name not in self._waits:
            helper = ExitStack()  # closed once waited for, else with the run's
            self.stack.callback(helper.close)
            wait = helper.enter_context(sharedwork.beside(task, name))

            def waited() -> object:
                value = wait()
                helper.close()  # the helper's pipes closed, its objects no longer frozen
                return value

            self._waits[name] = waited

    def _wait(self, name: str) -> object:
        if name in self._waits and name not in self._done:
            self._done[name] = self._waits[name]()
        return self._done.get(name)

    def curve_figures(self, stands: pd.DataFrame) -> None:
        """Draw the yield-curve figures of ``stands`` (the netted-down inventory)."""
        if self.directory is not None and self.scenario.report.figures:
            figures = self.directory / FIGURES_DIR
            self._start("drawing curves", partial(curve_figures, self.scenario, stands, figures))

    def stands_layer(self, layer: gpd.GeoDataFrame) -> None:
        """Write the ``stands`` layer."""
        if self.directory is not None:
            write = partial(_stands_unsynced, layer, self.directory, self.scenario)
            self._start("writing stands", write)

    def figures(self) -> dict[str, Figure]:
        """The figures drawn ahead, by key (waits for them; none if none were started)."""
        return self._wait("drawing curves") or {}  # type: ignore[return-value]

    def stands_written(self) -> bool:
        """Whether the stands layer is in the output (waits for it; False if not started)."""
        self._wait("writing stands")
        return "writing stands" in self._done


NOT_AHEAD = Ahead(None, None, ExitStack())  # type: ignore[arg-type]


@contextmanager
def outputs_ahead(directory: Path | None, scenario: Scenario) -> Iterator[Ahead]:
    """An :class:`Ahead` writing into ``directory`` (the staged output); leaving the block
    kills the helpers not waited for (the caller removes the staged output)."""
    if directory is None or not sharedwork.FORK:
        yield NOT_AHEAD
        return
    with ExitStack() as stack:
        yield Ahead(directory, scenario, stack)


def curve_figures(scenario: Scenario, stands: pd.DataFrame, directory: Path) -> dict[str, Figure]:
    """The figure of each species' yield curve at the site holding the most of its area
    (``stands``: the inventory after the netdown, as :func:`curves_table` reads it) into
    ``directory``, by key: the figures :func:`write_figures` draws as ``curves_<code>``."""
    directory.mkdir(exist_ok=True)
    figs = _Figures(directory)
    table, summaries = curves_table(scenario, stands)
    for code, summary in dominant_sites(table, summaries).items():
        _curve_figure(None, scenario, figs, code=code, summary=summary)
    return dict(figs)


def _stands_unsynced(stands: gpd.GeoDataFrame, directory: Path, scenario: Scenario) -> None:
    """:func:`write_stands_layer` as the run writes it (the GeoPackage synced once, later)."""
    out = scenario.output
    with unsynced_gpkg(directory / GPKG_NAME, sync=False):
        parquet, native = out.format == "geoparquet", out.geoparquet_geometry == "native"
        write_stands_layer(stands, directory, parquet, native)


def write_stands_layer(
    stands: gpd.GeoDataFrame, directory: Path, parquet: bool = False, native: bool = False
) -> None:
    """The ``stands`` layer: into the GeoPackage or, with ``parquet``, as
    :data:`STANDS_PARQUET` (``native``: GeoParquet 1.1's native encoding)."""
    if parquet:
        write_geoparquet(directory / STANDS_PARQUET, stands, native)
    else:
        write_gpkg_layer(directory / GPKG_NAME, stands, "stands")


def write_outputs(
    result: RunResult,
    scenario: Scenario,
    directory: Path,
    case: tuple[str, dict] | None = None,
    cases: Callable[[], object] | None = None,
    ahead: Ahead = NOT_AHEAD,
) -> dict:
    """Write every output of a run into the existing ``directory``, and the sensitivity
    cases' outputs into ``directory/<name>/`` with a comparison of them; ``case`` (name and
    keys set) marks the run as one of those cases. ``cases``, if given, is called once the
    run's own layers and tables are written, before the cases are needed (it fills
    ``result.cases``: their tasks finish beside this run's writes). ``ahead``: what was
    started ahead of this (:class:`Ahead`). Returns what run.json holds."""
    t0 = time.perf_counter()
    rep = scenario.report
    gpkg = directory / GPKG_NAME
    # the longest table goes to the helper drawing the figures, where there is one
    helper = rep.figures and sharedwork.FORK and result.stand_ages is not None
    helper = helper and scenario.output.format != "geoparquet"  # stand_ages: Parquet then
    side = directory / SIDE_GPKG if helper else None
    synced = _nothing  # waits for the GeoPackage's last sync, after the long table
    result.figures_ahead = ahead.figures()  # before the figures' jobs are listed
    with (
        shared_figures(result, scenario, directory / FIGURES_DIR, side)
        if rep.figures
        else nullcontext(dict)
    ) as drawn:
        # the stands layer first: written ahead (waited for here), else by write_tables
        skip = {"stands"} if ahead.stands_written() else set()
        if scenario.output.format == "geoparquet":
            native = scenario.output.geoparquet_geometry == "native"
            write_tables(result, directory, skip, parquet=True, native=native)
        else:
            with unsynced_gpkg(gpkg, sync=side is None):  # else synced after the long table
                write_tables(result, directory, skip | ({LONG_TABLE} if side else set()))
                if rep.map_layers and side is None:
                    write_map_layers(result, scenario, gpkg)
        if rep.raster_cell_m:
            write_rasters(result, scenario, directory / RASTERS_DIR)
        record = run_record(result, scenario)
        if cases is not None:
            cases()
        comparison = _write_cases(result, scenario, directory, record)
        # the layers written so far go to disk while the long table is moved in (the sync
        # after it then has less left to write)
        first = sync_in_background(gpkg) if side is not None else _nothing
        # the helper's table, once written (renamed into place), goes in its place (the last
        # of the tables) with the map layers while the helper draws; else after the figures
        early = side is not None and side.exists()
        if early:
            synced = _long_table_and_maps(result, scenario, gpkg, side)
        figures = {**drawn(), **result.figures_ahead}  # the curves last, as they were
    if side is not None and not early:
        synced = _long_table_and_maps(result, scenario, gpkg, side)
    first()  # (after an error the threads end on their own, on a file about to be removed)
    synced()
    if comparison is not None and rep.figures:
        figures["comparison"] = Figure(
            directory / FIGURES_DIR / COMPARISON_PNG,
            "Sensitivity cases",
            "Harvest forecast of the base case and of each case on the same axes.",
        )
    data = report_data(result, scenario, record, figures, comparison, case)
    (directory / REPORT_HTML).write_text(html_report(data), encoding="utf-8")
    if rep.markdown:
        (directory / REPORT_MD).write_text(markdown_report(data), encoding="utf-8")
    seconds = round(time.perf_counter() - t0, 4)
    record["timings_s"] = {**result.timings_s, "write outputs": seconds}
    # what this run wrote, so that a later run may replace it all (io.outputs.check_output_dir)
    record["outputs"] = sorted({p.name for p in directory.iterdir()} | {RUN_JSON, RUN_LOG})
    write_json(directory / RUN_JSON, record)
    if case is None:  # once for the whole output: the cases' writes are part of it
        log.info("write outputs done in %.2f s", seconds)
    (directory / RUN_LOG).write_text("\n".join(result.log) + "\n", encoding="utf-8")
    return record


def write_case(
    result: RunResult, scenario: Scenario, staged: str, name: str, sets: dict
) -> RunResult:
    """A sensitivity case's outputs written by its own task into ``<staged>/<name>/``, as
    the base case would write them (:func:`_write_cases`), and the case without its
    stand-sized members (:func:`~yieldscape.results.without_stands`), with what its run.json
    holds in ``written``. On a machine that does not see ``staged`` (a cluster without a
    shared file system; its name is random) nothing is written: the whole case comes back."""
    if not Path(staged).is_dir():
        return result
    folder = Path(staged) / name
    shutil.rmtree(folder, ignore_errors=True)  # a task run again after its worker died
    folder.mkdir()
    return without_stands(result, write_outputs(result, scenario, folder, (name, sets)))


def _long_table_and_maps(
    result: RunResult, scenario: Scenario, gpkg: Path, side: Path
) -> Callable[[], None]:
    """The :data:`LONG_TABLE` moved from the helper's GeoPackage ``side`` into ``gpkg``,
    then the map layers; the file's sync started, and the function that waits for it."""
    with unsynced_gpkg(gpkg, sync=False):
        move_attribute_table(side, gpkg, LONG_TABLE)
        if scenario.report.map_layers:
            write_map_layers(result, scenario, gpkg)
    return sync_in_background(gpkg)


def _nothing() -> None:
    """Nothing to wait for."""


def _write_cases(
    result: RunResult, scenario: Scenario, directory: Path, record: dict
) -> pd.DataFrame | None:
    """The sensitivity cases' outputs, each in a folder of its own, and their comparison with
    the base case (a table and a figure); None without cases."""
    rep = scenario.report
    comparison = None
    if result.cases:
        runs = [(BASE_LABEL, record, result.wood_flow)]
        for (name, sets, scn), sub in zip(scenario.sensitivity, result.cases.values(), strict=True):
            sub_record = sub.written  # by the case's own task (pipeline.run_case)
            if sub_record is None:
                (directory / name).mkdir()
                sub_record = write_outputs(sub, scn, directory / name, (name, dict(sets)))
            runs.append((name, sub_record, sub.wood_flow))
        comparison = comparison_table(runs)
        comparison.to_csv(directory / COMPARISON_CSV, index=False)
        if rep.figures:
            (directory / FIGURES_DIR).mkdir(exist_ok=True)
            comparison_figure(directory / FIGURES_DIR / COMPARISON_PNG, runs)
    return comparison


def write_tables(
    result: RunResult,
    directory: Path,
    skip: set[str] | frozenset[str] = frozenset(),
    parquet: bool = False,
    native: bool = False,
) -> None:
    """The GeoPackage layers and tables, and the same tables as CSV; ``skip``: the layers
    and tables left to another writer (the stands layer to :class:`Ahead`, the
    :data:`LONG_TABLE` to :func:`shared_figures`); with ``parquet``, the layers as GeoParquet
    files (the harvests a layer of their own, each event with its stand's polygon; with
    ``native`` the geometry in GeoParquet 1.1's native encoding) and the tables as CSV only
    (``stand_ages``, which has none, as Parquet)."""
    gpkg = directory / GPKG_NAME
    if "stands" not in skip:
        write_stands_layer(result.stands, directory, parquet, native)
    if parquet:
        write_geoparquet(directory / HARVESTS_PARQUET, result.harvests, native)
        if result.write_harvestable_layer:
            write_geoparquet(
                directory / HARVESTABLE_PARQUET, harvestable_layer(result.inventory), native
            )
    else:
        write_harvests(result, gpkg)
        if result.write_harvestable_layer:
            write_gpkg_layer(gpkg, harvestable_layer(result.inventory), "harvestable")
    assert result.verdict is not None
    units = result.by_unit
    wood_flow = result.wood_flow
    if units.wood_flow is not None:  # the region's rows, then each unit's
        wood_flow = pd.concat([wood_flow, units.wood_flow], ignore_index=True)
    tables = [
        (wood_flow, "wood_flow", WOOD_FLOW_CSV),
        (units.units, "management_units", MANAGEMENT_UNITS_CSV),
        (units.partitions, "partitions", PARTITIONS_CSV),
        (units.constraints, "constraints", CONSTRAINTS_CSV),
        (result.products, "wood_flow_by_product", PRODUCTS_CSV),
        (result.inventory.netdown.table, "netdown", NETDOWN_CSV),
        (result.monte_carlo, "monte_carlo", MONTE_CARLO_CSV),
        (result.cover, "cover", COVER_CSV),
        (result.openings, "openings", OPENINGS_CSV),
        (result.indicators, "indicators", INDICATORS_CSV),
        (result.verdict.table(), "verdict", VERDICT_CSV),
        (result.age_classes, "age_classes", AGE_CLASSES_CSV),
        (result.harvest_breakdown, "harvest_by_zone_species", BREAKDOWN_CSV),
        (result.regeneration, "regeneration", REGENERATION_CSV),
        (result.analysis_units, "area_by_analysis_unit", UNITS_CSV),
        (result.stand_ages, "stand_ages", None),
    ]
    for table, layer, csv in tables:
        if table is None or layer in skip:
            continue
        if not parquet:
            write_gpkg_layer(gpkg, table, layer, spatial=False)
        elif layer == "stand_ages":
            table.to_parquet(directory / STAND_AGES_PARQUET, index=False, compression="zstd")
        if csv is not None:
            table.to_csv(directory / csv, index=False)


def write_harvests(result: RunResult, gpkg: Path) -> None:
    """The ``harvests`` layer as a table of the events (``harvest_events``, attributes only)
    and a view joining each event to its stand's polygon, registered as a feature table: the
    same columns and rows as a layer of its own, without a copy of a stand's polygon for each
    of its cuts. ``stand_id`` is unique and never null (inventory checks), so the join keeps
    every event once; CROSS JOIN makes SQLite walk the events in their order, looking each
    stand up in the index on ``stands(stand_id)``."""
    frame = result.harvests
    geom = frame.geometry.name
    # the columns as they are (drop() would copy them all into new blocks)
    events = pd.DataFrame({c: frame[c] for c in frame.columns if c != geom}, copy=False)
    write_gpkg_layer(gpkg, events, HARVEST_EVENTS, spatial=False)
    cols = ", ".join(
        ['e."fid" AS "fid"', 's."{geom}" AS "{geom}"']
        + [f'e."{c}" AS "{c}"' for c in frame.columns if c != geom]
    )
    select = (
        f'SELECT {cols} FROM "{HARVEST_EVENTS}" AS e CROSS JOIN "stands" AS s '
        'ON s."stand_id" = e."stand_id"'
    )
    add_feature_views(
        gpkg,
        [("harvests", select, "stands", "Stands cut, one row per stand and period with a cut")],
        indexes=[("stands", ("stand_id",))],
    )


def write_map_layers(result: RunResult, scenario: Scenario, gpkg: Path) -> None:
    """Layers a GIS user switches on one at a time: the harvest of each period and the stand
    ages at each report year, as views over ``harvests`` and ``stands`` + ``stand_ages``
    (registered as feature tables, so they cost no copy of the geometry).

    Both tables are written in period (year) order, so a view reads its period's rows as one
    range of fids, SQLite's primary key (:func:`~yieldscape.io.vector.fid_runs`), with no
    index to build (at 1M stands the two took 4.4 s); where the rows are not in runs, or the
    fids not their positions, an index on the period (year) column instead."""
    periods = scenario.scenario.periods
    width = len(str(periods))
    indexes = []
    events = _rows_of(gpkg, HARVEST_EVENTS, result.harvests["period"])
    if events is None:
        indexes.append((HARVEST_EVENTS, ("period",)))
    views = [
        (
            f"harvests_period_{p:0{width}d}",
            f'SELECT * FROM "harvests" WHERE {_where(events, "", "period", p)}',
            "harvests",
            f"Stands cut in period {p}",
        )
        for p in range(1, periods + 1)
    ]
    year_cols = ("year", "age_years", "mean_age_years", "renewed_share")
    geom = result.stands.geometry.name
    own = [c for c in result.stands.columns if c != geom and c not in year_cols]
    cols = ", ".join(
        ['s."fid" AS "fid"', 's."{geom}" AS "{geom}"']
        + [f's."{c}" AS "{c}"' for c in own]
        + ['s."age_years" AS "start_age_years"']
        + [f'a."{c}" AS "{c}"' for c in year_cols]
    )
    years = _rows_of(gpkg, LONG_TABLE, result.stand_ages["year"])
    if years is None:
        indexes.append((LONG_TABLE, ("year", "stand_id")))
    for year in scenario.report.age_class_years:
        views.append(
            (
                f"stands_age_{year}",
                f'SELECT {cols} FROM "stands" AS s JOIN "stand_ages" AS a '
                f'ON a."stand_id" = s."stand_id" WHERE {_where(years, "a.", "year", year)}',
                "stands",
                f"Stands with their age in {year}",
            )
        )
    add_feature_views(gpkg, views, indexes=indexes)


def _rows_of(gpkg: Path, table: str, column: pd.Series) -> dict | None:
    """Each value's fid range in ``table`` (written from ``column``'s frame, in its order),
    or None where a value's rows are not one run or the fids not the rows' positions."""
    runs = fid_runs(column.to_numpy())
    if runs is None or not fids_in_order(gpkg, table, len(column)):
        return None
    return runs


def _where(runs: dict | None, alias: str, column: str, value: int) -> str:
    """The filter of ``column`` = ``value``, led by the value's fid range where known (an
    empty range where the value has no rows)."""
    test = f'{alias}"{column}" = {value}'
    if runs is None:
        return test
    first, last = runs.get(value, (1, 0))
    return f'{alias}"fid" BETWEEN {first} AND {last} AND {test}'


def _stand_grid_in_metres(result: RunResult, cell_m: float):  # noqa: ANN202
    """Stand labels on a grid of ``cell_m`` metres in a metric CRS (the layer's own when
    projected), the grid's transform and that CRS."""
    geoms, wcrs = metric_geometries(result.inventory.stands)
    cell = cell_m / metres_per_unit(wcrs)
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    bounds = (
        np.floor(x0 / cell) * cell,
        np.floor(y0 / cell) * cell,
        np.ceil(x1 / cell) * cell,
        np.ceil(y1 / cell) * cell,
    )
    labels, transform = stand_grid(geoms, cell, bounds)
    return labels, transform, wcrs


def first_periods(result: RunResult) -> np.ndarray:
    """First harvest period per stand, 0 where never cut."""
    return result.stands["first_harvest_period"].fillna(0).to_numpy(dtype=np.int64)


def write_rasters(result: RunResult, scenario: Scenario, directory: Path) -> None:
    """GeoTIFFs at ``report.raster_cell_m``: the first harvest period of each cell's stand
    (0: not cut in the horizon) and its age at each report year (nodata outside stands)."""
    directory.mkdir()
    labels, transform, crs = _stand_grid_in_metres(result, scenario.report.raster_cell_m)
    first = np.r_[-1, first_periods(result)].astype(np.int16)
    write_geotiff(
        directory / "first_harvest_period.tif",
        first[labels],
        transform,
        crs,
        -1,
        "first harvest period (0: not cut in the horizon)",
    )
    ages = result.stand_ages
    for year in scenario.report.age_class_years:
        age = ages.loc[ages["year"] == year, "age_years"].to_numpy(dtype=np.float32)
        grid = np.r_[np.float32(-9999), age][labels]
        write_geotiff(
            directory / f"age_{year}.tif",
            grid,
            transform,
            crs,
            -9999.0,
            f"stand age in {year} (years; age of the stand's largest part)",
        )


class _Figures(dict):
    """The run's figures by key, each a PNG in ``directory`` with its title and caption."""

    def __init__(self, directory: Path) -> None:
        super().__init__()
        self.directory = directory

    def add(self, key: str, title: str, caption: str) -> Path:
        path = self.directory / f"{key}.png"
        self[key] = Figure(path, title, caption)
        return path


def write_figures(
    result: RunResult, scenario: Scenario, directory: Path, claim: Claim | None = None
) -> dict[str, Figure]:
    """The run's figures as PNG files; returns them by key with title and caption. With
    ``claim`` (job numbers shared with another process, :func:`shared_figures`), only the
    figures whose numbers it hands out, else all."""
    directory.mkdir(exist_ok=True)
    figs = _Figures(directory)
    jobs = figure_jobs(result, scenario)
    for i in iter(claim, None) if claim is not None else range(len(jobs)):
        jobs[i][1](result, scenario, figs)
    return in_report_order(dict(figs), jobs)


FigureJob = Callable[[RunResult, Scenario, "_Figures"], None]


def figure_jobs(result: RunResult, scenario: Scenario) -> list[tuple[str, FigureJob]]:
    """The run's figures in the report's order: each one's key and the job drawing it (the
    costly ones first, so that two processes sharing them end close together); not those
    drawn ahead (``result.figures_ahead``)."""
    jobs: list[tuple[str, FigureJob]] = [
        ("harvest_map", _harvest_map_figure),
        ("age_classes", _age_class_figure),
        ("harvest_forecast", _harvest_figure),
        ("growing_stock", _growing_stock_figure),
    ]
    if result.cover is not None:
        jobs.append(("cover_targets", _cover_figure))
    if result.monte_carlo is not None:
        jobs.append(("monte_carlo", _monte_carlo_figure))
    for code, summary in dominant_sites(result.curves, result.curve_summaries).items():
        jobs.append((f"curves_{code}", partial(_curve_figure, code=code, summary=summary)))
    return [job for job in jobs if job[0] not in result.figures_ahead]


REPORT_ORDER = ("harvest_forecast", "growing_stock", "age_classes", "cover_targets", "harvest_map")


def in_report_order(
    drawn: dict[str, Figure], jobs: list[tuple[str, FigureJob]]
) -> dict[str, Figure]:
    """``drawn`` in the report's order: :data:`REPORT_ORDER`, then as the jobs list them."""
    rank = {key: i for i, (key, _) in enumerate(jobs)}
    rank |= {key: n - len(REPORT_ORDER) for n, key in enumerate(REPORT_ORDER)}
    return {k: drawn[k] for k in sorted(drawn, key=rank.__getitem__)}


@contextmanager
def shared_figures(
    result: RunResult, scenario: Scenario, directory: Path, side: Path | None = None
) -> Iterator[Callable]:
    """The figures drawn in a second process beside the block (the GeoPackage writes) and
    here in ``finish()`` when this process is done first: ``finish()`` returns them by key
    in the report's order (the same files as :func:`write_figures` alone). With ``side``,
    the first job writes the :data:`LONG_TABLE` to that GeoPackage of its own (the second
    process takes it at once; :func:`~yieldscape.io.vector.move_attribute_table` then puts
    it in place): GDAL's row inserts of 5M rows at 1M stands, beside this process's."""
    jobs = figure_jobs(result, scenario)
    first = 0 if side is None else 1  # job numbers before the figures'

    def draw(claim: Claim) -> dict[str, Figure]:
        def figure() -> int | None:
            i = claim()
            if i is not None and i < first:
                assert side is not None and result.stand_ages is not None
                part = side.with_name(WRITING + side.name)
                with unsynced_gpkg(part, sync=False):  # a file to be moved and deleted
                    write_gpkg_layer(part, result.stand_ages, LONG_TABLE, spatial=False)
                os.replace(part, side)  # at its name once whole (see write_outputs)
                i = claim()
            return None if i is None else i - first

        return write_figures(result, scenario, directory, figure)

    with shared_jobs(first + len(jobs), draw, "drawing the figures") as done:

        def finish() -> dict[str, Figure]:
            return in_report_order({k: v for part in done() for k, v in part.items()}, jobs)

        yield finish


def _harvest_figure(result: RunResult, scenario: Scenario, figs: _Figures) -> None:
    """The harvest forecast."""
    wf, verdict = result.wood_flow, result.verdict
    assert verdict is not None
    f = scenario.flow
    show_range = f.policy == "even" and f.band > 0 and f.method == "rules"
    failing = next(
        (c.period for c in verdict.checks if c.name == "flow_policy_held" and not c.holds), None
    )
    harvest_figure(
        figs.add(
            "harvest_forecast",
            "Harvest forecast",
            "Harvest per year in each period (solid), the long-term sustained yield "
            "(harvestable area x MAI) at MAI culmination and at the minimum harvest ages, "
            "the range the flow band allows each period given the period before (shaded), "
            "and the harvest LP's harvest where it was solved: beside a rule-based run the "
            "bound of the same problem, whose lowest period bounds the level a schedule "
            "under the same rules holds in every period (its periods may differ within the "
            "band); in the optimised mode the LP's own schedule.",
        ),
        wf,
        result.long_term_sustained_yield,
        show_range,
        failing,
    )


def _growing_stock_figure(result: RunResult, scenario: Scenario, figs: _Figures) -> None:
    growing_stock_figure(
        figs.add(
            "growing_stock",
            "Growing stock",
            "Standing volume at each period boundary on the whole forest and on the "
            "harvestable land base, and the stock a regulated forest on the harvestable land "
            "base would hold if cut at the minimum harvest ages.",
        ),
        result.wood_flow,
        result.regulated_hlb_stock_m3,
    )


def _age_class_figure(result: RunResult, scenario: Scenario, figs: _Figures) -> None:
    age_class_figure(
        figs.add(
            "age_classes",
            "Age classes",
            f"Area by {scenario.report.age_class_width_years:g}-year age class at each "
            "report year; dark: harvestable land base, light: the rest of the forest.",
        ),
        result.age_classes,
    )


def _cover_figure(result: RunResult, scenario: Scenario, figs: _Figures) -> None:
    assert result.cover is not None
    cover_figure(
        figs.add(
            "cover_targets",
            "Cover targets",
            "Each target's share of its zone after each period's harvest (line) against "
            "the target (dashed); a cross marks a period that misses it.",
        ),
        result.cover,
        result.wood_flow["start_year"].to_numpy(),
    )


def _harvest_map_figure(result: RunResult, scenario: Scenario, figs: _Figures) -> None:
    """The map of when each stand is first cut."""
    wf = result.wood_flow
    labels, transform = _stand_grid_for_map(result)
    h, w = labels.shape
    extent = (
        transform.c,
        transform.c + w * transform.a,
        transform.f + h * transform.e,
        transform.f,
    )
    caption = (
        "The first period in which each stand is cut (projection.gpkg: style the stands "
        "layer by first_harvest_period, or switch on the harvests_period_* layers)."
        if scenario.output.format == "gpkg"
        else "The first period in which each stand is cut (stands.parquet: style it by "
        "first_harvest_period, or filter harvests.parquet by period)."
    )
    path = figs.add("harvest_map", "Where and when", caption)
    note = harvest_map_figure(
        path,
        labels,
        extent,
        first_periods(result),
        scenario.scenario.periods,
        wf["start_year"].to_numpy(),
        pyproj.CRS.from_user_input(result.inventory.stands.crs),
    )
    if note:
        figs["harvest_map"] = Figure(path, "Where and when", f"{caption} {note}")


def _monte_carlo_figure(result: RunResult, scenario: Scenario, figs: _Figures) -> None:
    """The disturbance replicates."""
    assert result.monte_carlo is not None
    monte_carlo_figure(
        figs.add(
            "monte_carlo",
            "Harvest and growing stock under random disturbance",
            "Over the replicates, each period's harvest (above) and growing stock at the "
            "period's end (below): the band from the 10th to the 90th percentile, the "
            "median, and the expected-value schedule's target and stock. Where every "
            "replicate meets every target the harvest band is a line, and the risk shows "
            "in the stock.",
        ),
        result.monte_carlo,
        result.wood_flow,
    )


def _curve_figure(
    result: RunResult, scenario: Scenario, figs: _Figures, code: str, summary: SiteSummary
) -> None:
    """A species' yield curve at the site holding the most area."""
    curve = scenario.species[code].yield_curve()
    age = figure_age(summary, scenario.growth.max_age_years)
    curve_figure(
        figs.add(
            f"curves_{code}",
            f"Yield curve of {code}",
            f"Volume, MAI and CAI at site index {summary.site_index:g} m (the site with "
            "the most area), with the rotation ages marked.",
        ),
        code,
        curve,
        summary,
        age,
    )


def _stand_grid_for_map(result: RunResult):  # noqa: ANN202
    """Labels for the map figure (in the layer's CRS): about MAP_PIXELS cells along the
    longer side."""
    geoms = result.inventory.stands.geometry.to_numpy()
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    return stand_grid(geoms, max(x1 - x0, y1 - y0) / MAP_PIXELS or 1.0)


def dominant_sites(
    table: pd.DataFrame, summaries: dict[str, list[SiteSummary]]
) -> dict[str, SiteSummary]:
    """Per species, the summary of the site index value holding the most area."""
    out = {}
    for code, sums in summaries.items():
        sites = table[table["species"] == code].reset_index(drop=True)
        out[code] = sums[int(sites["area_ha"].to_numpy().argmax())]
    return out


def figure_age(summary: SiteSummary, max_age: float) -> float:
    """Show a curve to about twice its latest marked age, within the search range."""
    marks = [summary.culmination.age_years, summary.min_harvest_age_years]
    if summary.fisher is not None:
        marks.append(summary.fisher.age_years)
    finite = [m for m in marks if np.isfinite(m)]
    return float(min(max_age, max(100.0, 2.0 * max(finite)))) if finite else max_age


def report_data(
    result: RunResult,
    scenario: Scenario,
    record: dict,
    figures: dict[str, Figure],
    comparison: pd.DataFrame | None,
    case: tuple[str, dict] | None = None,
) -> ReportData:
    assert result.verdict is not None and result.indicators is not None
    return ReportData(
        scenario=scenario,
        created_utc=record["created_utc"],
        yieldscape_version=record["yieldscape_version"],
        inventory=record["inventory"],
        verdict=result.verdict,
        wood_flow=result.wood_flow,
        indicators=result.indicators,
        netdown=result.inventory.netdown.table,
        rotations=rotation_summary(result.curves),
        curves=result.curves,
        figures=figures,
        binding=result.flow.binding,
        cover=result.cover,
        breakdown=result.harvest_breakdown,
        analysis_units=result.analysis_units,
        comparison=comparison,
        lp=result.lp,
        flow_details=dict(result.flow.details),
        case=case,
        warnings=result.warnings,
        by_unit=result.by_unit,
    )


def run_record(result: RunResult, scenario: Scenario) -> dict:
    """The provenance of a run: versions, the resolved scenario, input checksums, timings."""
    inputs = {}
    if scenario.source is not None:
        inputs[str(scenario.source)] = sha256_file(scenario.source)
    inputs[str(scenario.inventory.path)] = sha256_file(scenario.inventory.path)
    for sp in scenario.species.values():
        if sp.table_csv is not None:
            inputs[str(sp.table_csv)] = sha256_file(sp.table_csv)
    for path in [scenario.inventory.from_raster.site_index] + [
        p for st in scenario.landbase.steps for p in (st.layer, st.raster)
    ]:
        if path is not None:
            inputs[str(path)] = sha256_file(path)
    flow = result.flow
    return {
        "yieldscape_version": library_versions()["yieldscape"],
        "created_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "versions": library_versions(),
        "scenario": scenario.to_dict(),
        "inputs_sha256": inputs,
        "inventory": {
            "stands": result.inventory.report.stands,
            "area_ha": result.inventory.report.area_ha,
            "crs": result.inventory.report.crs,
            "area_method": result.inventory.report.area_method,
            "repaired_geometries": result.inventory.report.repaired_geometries,
            "harvestable_ha": float(result.inventory.netdown.harvestable_ha.sum()),
        },
        "flow": {
            "policy": flow.policy,
            "method": scenario.flow.method,
            "level_m3_per_period": flow.level_m3_per_period,
            "level_m3_per_year": flow.level_m3_per_year,
            "binding": flow.binding,
            "search_steps": flow.steps,
            **{k: v for k, v in flow.details.items()},
            "long_term_sustained_yield_m3_per_year": result.long_term_sustained_yield,
            "initial_growing_stock_m3": flow.simulation.initial_stock_m3,
            "ending_growing_stock_m3": flow.simulation.ending_stock_m3,
        },
        "verdict": result.verdict.to_dict() if result.verdict is not None else None,
        **units_record(result.by_unit),
        "warnings": list(result.warnings),
        "lp": result.lp,
        "timings_s": result.timings_s,
    }


def harvestable_layer(checked: CheckResult) -> gpd.GeoDataFrame:
    """The netted geometry of each stand's harvestable part (vector steps cut it; raster and
    percent steps only reduce ``harvestable_ha``)."""
    s = checked.stands
    keep = checked.netdown.harvestable_ha > 0
    frame = pd.DataFrame(
        {
            "stand_id": s["stand_id"].to_numpy()[keep],
            "species": s["species"].to_numpy()[keep],
            "gross_ha": checked.netdown.gross_ha[keep],
            "harvestable_ha": checked.netdown.harvestable_ha[keep],
        }
    )
    geom = checked.netdown.remaining_geometry[keep]
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geom, crs=s.crs).values, crs=s.crs)


def write_curves(
    out: Path, scenario: Scenario, table: pd.DataFrame, summaries: dict[str, list[SiteSummary]]
) -> list[Path]:
    """The curves report into ``out``: curves.csv and one figure per species at the site
    holding the most area. Each file is written to a temporary name and moved into place, so
    the report can sit beside a run's outputs without touching them. Returns the files."""
    replace_file(out / CURVES_CSV, lambda p: table.to_csv(p, index=False), out)
    files = [out / CURVES_CSV]
    for code, main in dominant_sites(table, summaries).items():
        path = out / FIGURES_DIR / f"curves_{code}.png"
        curve = scenario.species[code].yield_curve()
        age = figure_age(main, scenario.growth.max_age_years)
        replace_file(
            path, lambda p, c=code, cv=curve, m=main, a=age: curve_figure(p, c, cv, m, a), out
        )
        files.append(path)
    stocks = {c: s.yield_curve() for c, s in scenario.species.items()}
    stocks = {c: cv for c, cv in stocks.items() if isinstance(cv, StockGrowth)}
    if stocks:  # the four shapes side by side, the species on theirs
        path = out / FIGURES_DIR / STOCK_SHAPES_PNG
        replace_file(path, lambda p: stock_shapes_figure(p, stocks), out)
        files.append(path)
    return files


def write_comparison(
    out: Path, table: pd.DataFrame, runs: list[tuple[str, dict, pd.DataFrame]]
) -> None:
    """comparison.csv and comparison.png of ``yieldscape compare`` into ``out`` (each written
    to a temporary name first)."""
    replace_file(out / COMPARISON_CSV, lambda p: table.to_csv(p, index=False), out)
    replace_file(out / COMPARISON_PNG, lambda p: comparison_figure(p, runs), out)
