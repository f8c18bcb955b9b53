"""`yieldscape run` and `yieldscape check` as a user runs them: each behaviour on the smallest
forest that shows it, and the committed sample region once, for what is about the sample."""

import contextlib
import io
import json
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio.warp
import shapely

from yieldscape.cli.main import main

from helpers import (
    assert_outputs_documented,
    regional_wood_flow,
    scenario_dict,
    squares,
    stand_attrs,
    write_layer,
    write_raster,
    write_scenario,
)

ROOT = Path(__file__).resolve().parents[2]
SCENARIO = ROOT / "sample_region" / "scenario.toml"
BASE_ONLY = ["--set", "sensitivity=[]"]  # the sample without its cases (tests/cli/test_compare.py)
WOOD_FLOW_COLUMNS = [
    "period",
    "start_year",
    "end_year",
    "harvest_m3",
    "harvest_ha",
    "growing_stock_start_m3",
    "growing_stock_end_m3",
    "mean_harvest_age_years",
]
X0, Y0 = 500_000.0, 6_700_000.0


# -- the committed sample region, run once ---------------------------------------------------


def run_command(args):
    """The command as a user runs it, its terminal output kept: (stdout, stderr)."""
    stdout, stderr = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(args)
    assert code == 0, stderr.getvalue()
    return stdout.getvalue(), stderr.getvalue()


@pytest.fixture(scope="module")
def sample_run(tmp_path_factory):
    """The README's quick start on the committed sample, base case only: (out, stdout, stderr)."""
    out = tmp_path_factory.mktemp("sample") / "results"
    return out, *run_command(["run", str(SCENARIO), "--out", str(out), *BASE_ONLY])


def assert_says_harvestable_stock(out, stdout):
    """stdout gives the stock on the harvestable land base beside the whole forest's, as
    wood_flow.csv has it."""
    wf = regional_wood_flow(out / "wood_flow.csv")
    hlb0, hlb1 = wf["hlb_growing_stock_start_m3"].iloc[0], wf["hlb_growing_stock_end_m3"].iloc[-1]
    change = f"{100 * (hlb1 / hlb0 - 1):+.0f}%"
    assert (
        f"on the harvestable land base {hlb0:,.0f} m3 at start, {hlb1:,.0f} m3 at the end "
        f"({change})" in stdout
    )


def test_the_sample_runs_and_says_what_it_found(sample_run):
    out, stdout, stderr = sample_run
    # the sample has spatial rules, cover targets, rasters and a Markdown report
    assert sorted(p.name for p in out.iterdir()) == [
        "age_classes.csv",
        "area_by_analysis_unit.csv",
        "constraints.csv",
        "cover.csv",
        "figures",
        "harvest_by_zone_species.csv",
        "indicators.csv",
        "management_units.csv",
        "netdown.csv",
        "openings.csv",
        "partitions.csv",
        "projection.gpkg",
        "rasters",
        "regeneration.csv",
        "report.html",
        "report.md",
        "run.json",
        "run.log",
        "verdict.csv",
        "wood_flow.csv",
        "wood_flow_by_product.csv",
    ]
    assert "even flow: " in stdout and "limited by" in stdout
    assert "verdict: Sustainable" in stdout
    assert "planning estimates" in stdout
    assert_says_harvestable_stock(out, stdout)
    assert "project and schedule" in stderr  # progress per stage on stderr
    # the log file holds the stages with their times, whatever the terminal showed
    log = (out / "run.log").read_text(encoding="utf-8")
    for line in ("read and check inventory done in", "project and schedule done in", "verdict:"):
        assert line in log
    # no CSV field is a negative zero (a solver's -0.0 for an idle row or column)
    for csv in sorted(out.glob("*.csv")):
        text = csv.read_text(encoding="utf-8")
        assert not re.search(r"(^|,)-0(\.0*)?(e[+-]?\d+)?(,|$)", text, re.M), csv.name


def test_sample_keeps_its_spatial_rules_and_cover_targets(sample_run):
    out, stdout, _ = sample_run
    assert "no rule is broken" in stdout and "the schedule's lowest period is" in stdout
    openings = pd.read_csv(out / "openings.csv")
    assert openings["area_ha"].max() <= 60 + 1e-6  # harvest.max_opening_ha of the sample
    cover = pd.read_csv(out / "cover.csv")
    assert cover["met"].all() and set(cover["zone"]) == {"*", "valley"}
    # the kept schedule meets every requirement, read from the written outputs: the level in
    # every period and the ending growing stock (flow.ending_stock = 1)
    wf = regional_wood_flow(out / "wood_flow.csv")
    rec = json.loads((out / "run.json").read_text())
    level = rec["flow"]["level_m3_per_period"]
    assert (wf["harvest_m3"] >= level * (1 - 1e-9)).all()
    assert wf["growing_stock_end_m3"].iloc[-1] >= wf["growing_stock_start_m3"].iloc[0] * (1 - 1e-9)
    # the bound of the same problem is at least the schedule's smallest harvest, and the
    # schedule is within 2% of it but for the measured cost of the spatial rules (issue target)
    lp = rec["lp"]
    assert lp["status"] == "Optimal" and lp["objective_name"] == "max-level"
    assert lp["level_m3_per_period"] >= wf["harvest_m3"].min() * (1 - 1e-9)
    assert (wf["lp_bound_m3"] >= lp["level_m3_per_period"] * (1 - 1e-6)).all()
    assert lp["gap_explained"]["rest_m3_per_period"] <= 0.02 * lp["level_m3_per_period"]
    assert lp["gap_of_schedule_to_lp"] >= 0.0  # (issue 13's 2% target: the test below)
    # the stands larger than the maximum opening, which no schedule cuts, from the written
    # stands layer: in no harvest, and their area in run.json and in the report's sentences
    f = rec["flow"]
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands", read_geometry=False)
    cut = pyogrio.read_dataframe(out / "projection.gpkg", layer="harvest_events")
    big = stands["harvestable_ha"] > 60 * (1 + 1e-9)
    assert big.sum() > 0
    assert f["never_cut_harvestable_ha"] == pytest.approx(stands["harvestable_ha"][big].sum())
    clear = cut[cut["treatment"] == "clearcut"]
    assert not clear["stand_id"].isin(stands["stand_id"][big]).any()
    assert "larger than the maximum opening" in (out / "report.html").read_text()
    # the best of the orders is kept (the LP-guided level: the better of its two orders)
    assert level == max(f["priority_order_level_m3_per_period"], f["lp_guided_level_m3_per_period"])
    assert f["lp_guided_level_m3_per_period"] >= f["lp_guided_ending_order_level_m3_per_period"]
    # the sample's LP-guided order wins, and the report's scenario table says so
    assert f["lp_guided_level_m3_per_period"] > f["priority_order_level_m3_per_period"]
    assert "LP-guided order, which held the higher level" in (out / "report.html").read_text()


def test_the_single_flow_sample_is_within_two_percent_of_its_bound():
    # Issue 13, item 2, on the sample as one regional flow (no units, no partition: issue 14
    # gave the sample two units with flows of their own and a partition, whose rule-based
    # search takes the units' cuts in turn): the kept schedule within 2% of the bound.
    import dataclasses

    import yieldscape

    scn = yieldscape.load_scenario(
        SCENARIO, overrides=["sensitivity=[]", "units=[]", "partitions=[]"]
    )
    fields = dataclasses.replace(scn.inventory.fields, unit=None)
    scn = dataclasses.replace(scn, inventory=dataclasses.replace(scn.inventory, fields=fields))
    result = yieldscape.run(scn, None)
    assert result.flow.units == ()
    assert 0.0 <= result.lp["gap_of_schedule_to_lp"] <= 0.02


def test_the_sample_has_a_realistic_netdown(sample_run):
    out, _, _ = sample_run
    nd = pd.read_csv(out / "netdown.csv")
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands", read_geometry=False)
    share = nd["remaining_ha"].iloc[-1] / stands["gross_ha"].sum()
    assert 0.6 < share < 0.85  # a realistic netdown for the sample (common practice: 10-80%)
    assert (stands["site_index_source"] == "raster").sum() > 0  # gaps filled from the raster


# -- a small forest with every option switched on -------------------------------------------


def small_forest(d: Path) -> Path:
    """Forty 1-ha stands with what the sample has, in small, and every output option switched
    on: two curve families and a yield table, products, a site-index raster in another CRS that
    fills two gaps, every kind of netdown step (the overlays in the stand layer's own file),
    green-up and openings, two cover targets, disturbance replicates, economics, GeoTIFFs, the
    harvestable layer and a Markdown report. Returns the scenario's path."""
    n = 40
    i = np.arange(n)
    species = np.where(i % 2 == 0, "spruce", "aspen").astype(object)
    ages = (i * 53) % 190 + 5.0  # 5 to 194 years, scattered over the grid
    ages[species == "aspen"] = np.minimum(ages[species == "aspen"], 140)
    site = np.where(species == "spruce", 21.0, 18.0)
    site[[8, 22]] = np.nan  # filled from the raster
    attrs = stand_attrs(n, ages=ages, species=species, site=site)
    attrs["ZONE"] = np.array(["valley"] * 16 + ["highland"] * 24, dtype=object)
    attrs["COVER"] = np.array(["forest"] * n, dtype=object)
    attrs["COVER"][[5, 6]] = "wetland"
    attrs["COVER"][30] = "rock"
    gpkg = write_layer(d / "forest.gpkg", squares(n, per_row=8), attrs)  # 8 x 5 stands
    # a reserve across the corner of four stands, a river and a creek
    reserve = shapely.box(X0 + 450, Y0 + 150, X0 + 550, Y0 + 250)
    write_layer(gpkg, [reserve], {"RESERVE_ID": np.array([1], np.int32)}, layer="reserves")
    rivers = [
        shapely.LineString([(X0, Y0 + 310), (X0 + 800, Y0 + 290)]),
        shapely.LineString([(X0 + 150, Y0), (X0 + 150, Y0 + 300)]),
    ]
    write_layer(gpkg, rivers, {"STREAM_CLASS": np.array([1, 3], np.int32)}, layer="streams")
    slope = np.zeros((28, 40))
    slope[:6, 34:] = 55.0  # the north-east corner is steep
    write_raster(d / "slope_pct.tif", slope, x0=X0 - 100, y0=Y0 + 600, cell=25.0)
    left, bottom, right, top = rasterio.warp.transform_bounds(
        "EPSG:32633", "EPSG:3035", X0 - 200, Y0 - 200, X0 + 1000, Y0 + 700
    )
    shape = (int((top - bottom) / 50) + 1, int((right - left) / 50) + 1)
    write_raster(d / "site_index.tif", np.full(shape, 19.5), left, top, 50.0, "EPSG:3035")
    table = [(10, 8), (20, 40), (40, 140), (60, 228), (80, 278), (100, 296), (120, 290), (160, 270)]
    (d / "aspen.csv").write_text(
        "age_years,volume_m3_ha\n" + "".join(f"{a},{v}\n" for a, v in table), encoding="utf-8"
    )
    raw = scenario_dict(
        gpkg,
        scenario={"name": "small forest, every option", "start_year": 2027, "periods": 20},
        harvest={
            "priority": "oldest",
            "max_area_ha_per_period": 12.0,
            "greenup_years": 20,
            "max_opening_ha": 3.0,
            "adjacency": "edge",
        },
        flow={"policy": "even", "band": 0.1, "ending_stock": 1.0},
    )
    raw["inventory"]["path"] = "forest.gpkg"
    raw["inventory"]["from_raster"] = {"site_index": "site_index.tif"}
    raw["species"] = {
        "spruce": {
            "curve": "chapman-richards",
            "a": 620.0,
            "k": 0.028,
            "c": 3.0,
            "site_index_ref_m": 21.0,
            "site_exponent_k": 0.3,
            "min_harvest_age": 60,
            "min_harvest_mai_share": 0.95,
            "regen_delay_years": 2,
            "site_index_min_m": 12.0,
            "site_index_max_m": 32.0,
            "price_per_m3": 28.0,
            "regen_cost_per_ha": 900.0,
            "products": {
                "ages": [40, 70, 100, 140],
                "sawlog": [0.10, 0.45, 0.65, 0.70],
                "pulp": [0.90, 0.55, 0.35, 0.30],
            },
        },
        "aspen": {
            "curve": "table",
            "table_csv": "aspen.csv",
            "min_harvest_age": 50,
            "min_harvest_volume_m3_ha": 150,
            "price_per_m3": 12.0,
        },
    }
    raw["cover"] = [
        {"zone": "*", "older_than_years": 140, "min_share": 0.15},
        {"zone": "valley", "younger_than_years": 20, "max_share": 0.30},
    ]
    raw["economics"] = {"discount_rate": 0.03, "compounding": "continuous"}
    raw["disturbance"] = {"annual_rate": 0.002, "replicates": 5, "seed": 7}
    widths = {"1": 30, "2": 20, "3": 10}
    raw["landbase"] = {
        "write_harvestable_layer": True,
        "steps": [
            {"label": "non-productive", "where": "COVER in ['wetland', 'rock']"},
            {"label": "reserves", "layer": "forest.gpkg", "layer_name": "reserves"},
            {"label": "steep terrain", "raster": "slope_pct.tif", "above": 40},
            {
                "label": "riparian reserves",
                "layer": "forest.gpkg",
                "layer_name": "streams",
                "buffer_by": {"field": "STREAM_CLASS", "widths_m": widths},
            },
            {"label": "future roads and landings", "percent": 3},
        ],
    }
    raw["report"] = {"age_class_width_years": 20, "raster_cell_m": 25, "markdown": True}
    return write_scenario(d / "scenario.toml", raw)


@pytest.fixture(scope="module")
def forest_run(tmp_path_factory):
    """The small forest run once through the command: (out, stdout, stderr)."""
    out = tmp_path_factory.mktemp("forest") / "results"
    return out, *run_command(["run", str(small_forest(out.parent)), "--out", str(out)])


def test_a_run_writes_the_outputs_its_options_ask_for(forest_run):
    out, stdout, stderr = forest_run
    # spatial rules, cover targets, disturbance replicates, rasters and a Markdown report
    assert sorted(p.name for p in out.iterdir()) == [
        "age_classes.csv",
        "area_by_analysis_unit.csv",
        "constraints.csv",
        "cover.csv",
        "figures",
        "harvest_by_zone_species.csv",
        "indicators.csv",
        "monte_carlo.csv",
        "netdown.csv",
        "openings.csv",
        "projection.gpkg",
        "rasters",
        "regeneration.csv",
        "report.html",
        "report.md",
        "run.json",
        "run.log",
        "verdict.csv",
        "wood_flow.csv",
        "wood_flow_by_product.csv",
    ]
    assert "even flow: " in stdout and "limited by" in stdout
    assert "verdict: Sustainable" in stdout
    assert "planning estimates" in stdout
    assert_says_harvestable_stock(out, stdout)
    assert "project and schedule" in stderr  # progress per stage on stderr
    # the log file holds the stages with their times, whatever the terminal showed
    log = (out / "run.log").read_text(encoding="utf-8")
    for line in ("read and check inventory done in", "project and schedule done in", "verdict:"):
        assert line in log


def test_wood_flow_csv_contract_and_policy(forest_run):
    out, _, _ = forest_run
    wf = pd.read_csv(out / "wood_flow.csv")
    for col in WOOD_FLOW_COLUMNS:
        assert col in wf.columns
    scn_periods = 20
    assert wf["period"].tolist() == list(range(1, scn_periods + 1))
    h = wf["harvest_m3"].to_numpy()
    assert h.min() > 0
    # the band of the scenario (flow.band = 0.1, as the sample's) is never broken
    assert np.all(np.abs(np.diff(h)) <= 0.1 * h[:-1] * (1 + 1e-9))
    # ending stock requirement of the scenario (flow.ending_stock = 1.0, as the sample's)
    assert wf["growing_stock_end_m3"].iloc[-1] >= wf["growing_stock_start_m3"].iloc[0] * (1 - 1e-9)
    # consecutive periods chain: end of one is the start of the next
    np.testing.assert_allclose(
        wf["growing_stock_end_m3"].iloc[:-1], wf["growing_stock_start_m3"].iloc[1:], rtol=1e-9
    )


def test_run_json_records_provenance(forest_run):
    out, _, _ = forest_run
    rec = json.loads((out / "run.json").read_text())
    assert rec["yieldscape_version"]
    assert rec["scenario"]["scenario"]["name"] == "small forest, every option"
    assert rec["scenario"]["species"]["aspen"]["curve"] == "table"
    # scenario, stand layer (also the overlay layers' file), the aspen CSV, two rasters
    assert len(rec["inputs_sha256"]) == 5
    assert all(len(v) == 64 for v in rec["inputs_sha256"].values())
    assert set(rec["timings_s"]) >= {"read and check inventory", "project and schedule"}
    assert rec["flow"]["level_m3_per_year"] > 0 and rec["flow"]["binding"]
    ltsy = rec["flow"]["long_term_sustained_yield_m3_per_year"]
    # maximum MAI bounds MAI at any age, so the culmination figure is the larger one
    assert ltsy["at_culmination"] >= ltsy["at_min_harvest_age"] > 0
    # the long-run harvest stays below harvestable area x maximum MAI (practice notes)
    assert rec["flow"]["level_m3_per_year"] <= ltsy["at_culmination"]


def test_stands_layer_covers_the_input_layer(forest_run):
    out, _, _ = forest_run
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands", read_geometry=False)
    src = pyogrio.read_dataframe(out.parent / "forest.gpkg", layer="stands", read_geometry=False)
    assert len(stands) == len(src)
    assert set(stands["stand_id"]) == set(src["ID"])
    # no harvest event takes more than the stand's area
    limit = stands["area_ha"] * stands["harvest_count"] * (1 + 1e-9)
    assert (stands["harvested_area_ha"] <= limit).all()
    assert (stands["harvest_count"] > 0).sum() == stands["first_harvest_period"].notna().sum()


def test_docs_describe_every_output_column(forest_run):
    # The run has every optional output but a case's (tests/cli/test_compare.py checks the
    # comparison's columns, tests/reporting/test_report.py every figure's name and size;
    # tests/cli/test_units_run.py those of units and partitions).
    out, _, _ = forest_run
    assert_outputs_documented(out, out.parent / "forest.gpkg")


def test_products_add_up_to_the_harvest(forest_run):
    # The product split moves volume between products, never makes or loses it.
    out, _, _ = forest_run
    wf = pd.read_csv(out / "wood_flow.csv").set_index("period")
    prod = pd.read_csv(out / "wood_flow_by_product.csv")
    np.testing.assert_allclose(
        prod.groupby("period")["volume_m3"].sum(), wf["harvest_m3"], rtol=1e-9
    )
    assert {"sawlog", "pulp", "unsplit"} <= set(prod["product"])
    # spruce shares from the scenario (the sample's): sawlog 0.10 at 40 years ... 0.70 at 140
    spruce = prod[prod["species"] == "spruce"].pivot(
        index="period", columns="product", values="volume_m3"
    )
    share = spruce["sawlog"] / spruce.sum(axis=1)
    assert ((share >= 0.10 - 1e-9) & (share <= 0.70 + 1e-9)).all()


def test_netdown_is_consistent_with_the_stands(forest_run):
    # Netdown arithmetic read back from the written files: the table's removals are the sums
    # of the stands' removal columns, gross = removals + harvestable for every stand, and no
    # stand is cut beyond its harvestable area in any period.
    out, _, _ = forest_run
    nd = pd.read_csv(out / "netdown.csv")
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands", read_geometry=False)
    steps = nd[nd["kind"] != "harvestable"]
    assert steps["kind"].tolist() == ["where", "layer", "raster", "layer", "percent"]
    assert (steps["removed_ha"] > 0).all()  # each step takes some land in this forest
    for row in steps.itertuples():
        assert stands[f"removed_step{int(row.step)}_ha"].sum() == pytest.approx(row.removed_ha)
    removed = stands[[f"removed_step{int(s)}_ha" for s in steps["step"]]].sum(axis=1)
    np.testing.assert_allclose(stands["gross_ha"], removed + stands["harvestable_ha"], rtol=1e-9)
    harvests = pyogrio.read_dataframe(
        out / "projection.gpkg", layer="harvests", read_geometry=False
    )
    cut = harvests.groupby(["stand_id", "period"])["area_ha"].sum().reset_index()
    limit = stands.set_index("stand_id")["harvestable_ha"].loc[cut["stand_id"]].to_numpy()
    assert (cut["area_ha"].to_numpy() <= limit * (1 + 1e-9)).all()
    # the two gaps filled from the raster
    assert stands.loc[stands["site_index_source"] == "raster", "stand_id"].tolist() == [9, 23]


def test_spatial_rules_hold_in_the_written_outputs(forest_run):
    # ARM with green-up: the openings rebuilt here from the written harvests layer (not from
    # internal state) never exceed the maximum opening.
    out, _, _ = forest_run
    gpkg = out / "projection.gpkg"
    openings = pyogrio.read_dataframe(gpkg, layer="openings")
    assert openings["area_ha"].max() <= 3 + 1e-6
    harvests = pyogrio.read_dataframe(gpkg, layer="harvests")
    harvests = harvests[harvests["treatment"] == "clearcut"]  # a thinning opens nothing
    stands = pyogrio.read_dataframe(gpkg, layer="stands")
    from yieldscape.adjacency import build_adjacency

    adj = build_adjacency(stands.geometry.to_numpy(), "edge")
    pos = {sid: i for i, sid in enumerate(stands["stand_id"])}
    idx = harvests["stand_id"].map(pos).to_numpy()
    largest = 0.0
    for p in range(1, 21):
        win = (harvests["period"] <= p) & (harvests["period"] > p - 2)  # 20 years, 10-y periods
        area = np.bincount(idx[win], harvests["area_ha"][win], adj.n)
        lab = adj.components(area > 0)
        if (lab >= 0).any():
            largest = max(largest, np.bincount(lab[lab >= 0], area[lab >= 0]).max())
    assert largest <= 3 + 1e-6
    assert largest > 1  # neighbours are cut within one green-up: the rule has work to do
    rec = json.loads((out / "run.json").read_text())["flow"]
    assert rec["spatial_cost_m3_per_period"] >= -1e-6


# -- more small forests ------------------------------------------------------------------------


def test_rerun_replaces_previous_output_and_set_changes_result(small_case, capsys):
    # With spatial rules, so that the second run reuses the adjacency graph the first cached.
    tmp_path, layer, _ = small_case
    raw = scenario_dict(
        layer,
        flow={"ending_stock": 1.0},
        harvest={"greenup_years": 20, "max_opening_ha": 3.0},
    )
    scenario = str(write_scenario(tmp_path / "spatial.toml", raw))
    out = tmp_path / "res"
    assert main(["run", scenario, "--out", str(out), "-q"]) == 0
    first = json.loads((out / "run.json").read_text())["flow"]["level_m3_per_year"]
    capsys.readouterr()
    assert main(["run", scenario, "--out", str(out), "--set", "flow.ending_stock=0.6"]) == 0
    assert "(cached)" in capsys.readouterr().err
    second = json.loads((out / "run.json").read_text())
    assert second["scenario"]["flow"]["ending_stock"] == 0.6
    assert second["flow"]["level_m3_per_year"] > first  # a looser ending stock allows more
    # no temporary leftovers
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "res",
        "scenario.toml",
        "spatial.toml",
        "stands.gpkg",
    ]


def test_check_prints_summary(small_case, capsys):
    _, _, scenario = small_case
    assert main(["check", str(scenario)]) == 0
    text = capsys.readouterr().out
    assert "checks passed" in text and "area by species" in text and "area by age class" in text


def test_version_names_libraries(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    text = capsys.readouterr().out
    for lib in ("yieldscape", "GDAL", "GEOS", "PROJ", "highspy"):
        assert lib in text


def test_optimised_mode_maps_the_lp_onto_stands(small_case):
    tmp_path, _, scenario = small_case
    out = tmp_path / "opt"
    args = ["--set", "flow.method=optimize", "--set", "flow.band=0"]
    assert main(["run", str(scenario), "--out", str(out), "-q", *args]) == 0
    rec = json.loads((out / "run.json").read_text())
    assert rec["flow"]["policy"] == "optimize" and rec["lp"]["status"] == "Optimal"
    wf = pd.read_csv(out / "wood_flow.csv")
    assert len(wf) == 10
    # strict even flow in the LP; the stand schedule follows it up to the reported gap
    np.testing.assert_allclose(wf["lp_bound_m3"], wf["lp_bound_m3"].iloc[0], rtol=1e-6)
    gap = rec["lp"]["gap_of_schedule_to_lp"]
    assert -1e-9 <= gap < 0.05
    assert wf["harvest_m3"].sum() == pytest.approx(wf["lp_bound_m3"].sum() * (1 - gap))
    assert (wf["harvest_m3"] <= wf["lp_bound_m3"] * (1 + 1e-9)).all()


def gpkg_catalogue(path):
    """What a GeoPackage holds, without its timestamps: gpkg_contents (in order), the
    geometry columns and every table, view, index and trigger with its SQL."""
    import sqlite3

    with contextlib.closing(sqlite3.connect(path)) as con:
        contents = con.execute(
            "SELECT table_name, data_type, identifier, srs_id, min_x, min_y, max_x, max_y "
            "FROM gpkg_contents ORDER BY rowid"
        ).fetchall()
        columns = con.execute("SELECT * FROM gpkg_geometry_columns ORDER BY rowid").fetchall()
        schema = con.execute("SELECT type, name, sql FROM sqlite_master ORDER BY name").fetchall()
    return contents, columns, schema


def record_callers(monkeypatch, folder, name):
    """``yieldscape.publish.<name>`` leaving a file named after each process that calls it
    in ``folder`` (made here), holding the paths it was given; the folder."""
    from yieldscape import publish

    folder.mkdir()
    real = getattr(publish, name)

    def recorded(*args):
        paths = " ".join(str(a) for a in args if isinstance(a, Path))
        (folder / str(os.getpid())).write_text(paths)
        return real(*args)

    monkeypatch.setattr(publish, name, recorded)
    return folder


def test_the_stands_layer_is_written_by_a_helper_beside_the_tables(tmp_path, monkeypatch):
    # a helper process forked once the stands layer is built writes it while the run builds
    # its other tables; the file is the one the run writes itself where nothing is forked
    from yieldscape import sharedwork

    if not sharedwork.FORK:
        pytest.skip("the helper is forked on Linux only")
    layer = write_layer(tmp_path / "stands.gpkg", squares(20), stand_attrs(20, np.arange(20) * 5))
    scenario = write_scenario(tmp_path / "scenario.toml", scenario_dict(layer))
    writers = record_callers(monkeypatch, tmp_path / "writers", "write_stands_layer")
    assert main(["run", str(scenario), "--out", str(tmp_path / "ahead"), "-q"]) == 0
    (pid,) = (int(p.name) for p in writers.iterdir())
    assert pid != os.getpid()
    assert ".partial" in (writers / str(pid)).read_text()  # into the staged output
    monkeypatch.setattr(sharedwork, "FORK", False)
    assert main(["run", str(scenario), "--out", str(tmp_path / "here"), "-q"]) == 0
    assert {p.name for p in writers.iterdir()} == {str(pid), str(os.getpid())}  # by the run
    ahead, here = tmp_path / "ahead" / "projection.gpkg", tmp_path / "here" / "projection.gpkg"
    assert gpkg_catalogue(ahead) == gpkg_catalogue(here)
    for name in pyogrio.list_layers(here)[:, 0]:
        pd.testing.assert_frame_equal(
            pyogrio.read_dataframe(ahead, layer=name), pyogrio.read_dataframe(here, layer=name)
        )
    assert pyogrio.read_info(ahead, layer="stands")["features"] == 20


def test_the_curve_figures_are_drawn_by_a_helper_beside_the_search(tmp_path, monkeypatch):
    # forked once the stands are read and netted down; the same figures, in the same place
    # of the report, as where the run draws them all in its write stage (nothing forked)
    from yieldscape import sharedwork

    if not sharedwork.FORK:
        pytest.skip("the helper is forked on Linux only")
    layer = write_layer(tmp_path / "stands.gpkg", squares(20), stand_attrs(20, np.arange(20) * 5))
    raw = scenario_dict(layer, report={"figures": True})
    raw["disturbance"] = {"annual_rate": 0.005, "replicates": 3, "seed": 1}  # one more figure
    scenario = write_scenario(tmp_path / "scenario.toml", raw)
    drawers = record_callers(monkeypatch, tmp_path / "drawers", "curve_figures")
    assert main(["run", str(scenario), "--out", str(tmp_path / "ahead"), "-q"]) == 0
    (pid,) = (int(p.name) for p in drawers.iterdir())
    assert pid != os.getpid()
    assert ".partial" in (drawers / str(pid)).read_text()  # into the staged output
    monkeypatch.setattr(sharedwork, "FORK", False)
    assert main(["run", str(scenario), "--out", str(tmp_path / "here"), "-q"]) == 0
    assert [p.name for p in drawers.iterdir()] == [str(pid)]  # the run drew them itself
    ahead, here = tmp_path / "ahead" / "figures", tmp_path / "here" / "figures"
    names = sorted(p.name for p in here.iterdir())
    assert "curves_pine.png" in names
    assert sorted(p.name for p in ahead.iterdir()) == names
    assert (ahead / "curves_pine.png").read_bytes() == (here / "curves_pine.png").read_bytes()

    def captions(out):
        text = (out / "report.html").read_text(encoding="utf-8")
        return re.findall(r"<figcaption><strong>([^<]*)</strong>", text)

    assert captions(tmp_path / "here")[-2:] == [
        "Harvest and growing stock under random disturbance.",
        "Yield curve of pine.",
    ]
    assert captions(tmp_path / "ahead") == captions(tmp_path / "here")
