"""`yieldscape run` and `yieldscape check` on the committed sample region, as a user runs them."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest

from yieldscape.cli.main import main

ROOT = Path(__file__).resolve().parents[2]
SCENARIO = ROOT / "sample_region" / "scenario.toml"
BASE_ONLY = ["--set", "sensitivity=[]"]  # the sample without its cases (tested on their own)
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


@pytest.fixture(scope="module")
def sample_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("sample") / "results"
    proc = subprocess.run(
        [sys.executable, "-m", "yieldscape.cli.main", "run", str(SCENARIO), "--out", str(out)],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 0, proc.stderr
    return out, proc


def test_sample_run_writes_its_outputs(sample_run):
    out, proc = sample_run
    # the sample has spatial rules, cover targets, rasters, a Markdown report and two cases
    assert sorted(p.name for p in out.iterdir()) == [
        "age_classes.csv",
        "area_by_analysis_unit.csv",
        "comparison.csv",
        "cover.csv",
        "figures",
        "harvest_by_zone_species.csv",
        "indicators.csv",
        "lower-ending-stock",
        "netdown.csv",
        "openings-40ha",
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
    assert "even flow: " in proc.stdout and "limited by" in proc.stdout
    assert "verdict: Sustainable" in proc.stdout
    assert "sensitivity case 'openings-40ha':" in proc.stdout
    assert "planning estimates" in proc.stdout
    assert "project and schedule" in proc.stderr  # progress per stage on stderr
    assert "sensitivity case 'openings-40ha' (2 of 2)" in proc.stderr
    # the log file holds the stages with their times, whatever the terminal showed
    log = (out / "run.log").read_text(encoding="utf-8")
    for line in ("read and check inventory done in", "project and schedule done in", "verdict:"):
        assert line in log
    assert (out / "openings-40ha" / "run.log").is_file()


def test_wood_flow_csv_contract_and_policy(sample_run):
    out, _ = sample_run
    wf = pd.read_csv(out / "wood_flow.csv")
    for col in WOOD_FLOW_COLUMNS:
        assert col in wf.columns
    scn_periods = 20
    assert wf["period"].tolist() == list(range(1, scn_periods + 1))
    h = wf["harvest_m3"].to_numpy()
    assert h.min() > 0
    # the band of the sample scenario (flow.band = 0.1) is never broken
    assert np.all(np.abs(np.diff(h)) <= 0.1 * h[:-1] * (1 + 1e-9))
    # ending stock requirement of the sample (flow.ending_stock = 1.0)
    assert wf["growing_stock_end_m3"].iloc[-1] >= wf["growing_stock_start_m3"].iloc[0] * (1 - 1e-9)
    # consecutive periods chain: end of one is the start of the next
    np.testing.assert_allclose(
        wf["growing_stock_end_m3"].iloc[:-1], wf["growing_stock_start_m3"].iloc[1:], rtol=1e-9
    )


def test_run_json_records_provenance(sample_run):
    out, _ = sample_run
    rec = json.loads((out / "run.json").read_text())
    assert rec["yieldscape_version"]
    assert rec["scenario"]["scenario"]["name"] == "Norrowmere base case"
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


def test_stands_layer_covers_the_sample(sample_run):
    out, _ = sample_run
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands", read_geometry=False)
    src = pyogrio.read_dataframe(
        SCENARIO.parent / "norrowmere.gpkg", layer="stands", read_geometry=False
    )
    assert len(stands) == len(src)
    assert set(stands["stand_id"]) == set(src["STAND_NO"])
    # no harvest event takes more than the stand's area
    limit = stands["area_ha"] * stands["harvest_count"] * (1 + 1e-9)
    assert (stands["harvested_area_ha"] <= limit).all()
    assert (stands["harvest_count"] > 0).sum() == stands["first_harvest_period"].notna().sum()


def test_rerun_replaces_previous_output_and_set_changes_result(tmp_path, capsys):
    out = tmp_path / "res"
    assert main(["run", str(SCENARIO), "--out", str(out), "-q", *BASE_ONLY]) == 0
    first = json.loads((out / "run.json").read_text())["flow"]["level_m3_per_year"]
    assert (
        main(
            [
                "run",
                str(SCENARIO),
                "--out",
                str(out),
                "-q",
                *BASE_ONLY,
                "--set",
                "flow.ending_stock=0.6",
            ]
        )
        == 0
    )
    second = json.loads((out / "run.json").read_text())
    assert second["scenario"]["flow"]["ending_stock"] == 0.6
    assert second["flow"]["level_m3_per_year"] > first  # a looser ending stock allows more
    assert [p.name for p in tmp_path.iterdir()] == ["res"]  # no temporary leftovers


def test_check_prints_summary(capsys):
    assert main(["check", str(SCENARIO)]) == 0
    text = capsys.readouterr().out
    assert "checks passed" in text and "area by species" in text and "area by age class" in text


def test_version_names_libraries(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    text = capsys.readouterr().out
    for lib in ("yieldscape", "GDAL", "GEOS", "PROJ", "highspy"):
        assert lib in text


def test_docs_describe_every_output_column(sample_run):
    out, _ = sample_run
    text = (ROOT / "docs" / "outputs.md").read_text(encoding="utf-8")
    import re

    inputs = set(pyogrio.read_info(SCENARIO.parent / "norrowmere.gpkg", layer="stands")["fields"])
    gpkg = out / "projection.gpkg"
    for layer, _ in pyogrio.list_layers(gpkg):
        name = re.sub(r"_\d+$", "_<NN>", re.sub(r"_age_\d{4}$", "_age_<YEAR>", layer))
        assert re.search(rf"`{re.escape(name)}`", text), f"layer {layer}"
        cols = pyogrio.read_info(gpkg, layer=layer)["fields"]
        cols = [c for c in cols if c not in inputs]  # the layer's own attributes, carried
        for col in cols:
            col = re.sub(r"^removed_step\d+_ha$", "removed_step<N>_ha", col)
            assert re.search(rf"^\| `{re.escape(col)}` \|", text, re.M), f"{layer}.{col}"
    for csv in out.glob("*.csv"):
        assert f"`{csv.name}`" in text, csv.name
        for col in pd.read_csv(csv).columns:
            assert re.search(rf"^\| `{col}` \|", text, re.M), f"{csv.name} {col}"
    for key in json.loads((out / "run.json").read_text()):
        assert re.search(rf"^\| `{key}` \|", text, re.M), f"run.json {key}"
    for png in (out / "figures").glob("*.png"):
        name = re.sub(r"^curves_\w+\.png$", "curves_<species>.png", png.name)
        assert f"| `{name}` |" in text, png.name
    for tif in (out / "rasters").glob("*.tif"):
        name = re.sub(r"^age_\d{4}\.tif$", "age_<YEAR>.tif", tif.name)
        assert f"| `{name}` |" in text, tif.name


def test_compare_on_the_sample_cases_names_each_case_change(sample_run, tmp_path):
    out, _ = sample_run
    cmp = tmp_path / "cmp"
    runs = [str(out), str(out / "lower-ending-stock"), str(out / "openings-40ha")]
    assert main(["compare", *runs, "--out", str(cmp), "-q"]) == 0
    table = pd.read_csv(cmp / "comparison.csv")
    assert table["differences"].iloc[1:].tolist() == [
        "flow.ending_stock: 1.0 -> 0.8",
        "harvest.max_opening_ha: 60.0 -> 40.0",
    ]
    # a lower ending stock never lowers the level, smaller openings never raise it
    base = table["level_m3_per_year"].iloc[0]
    assert table["level_m3_per_year"].iloc[1] >= base >= table["level_m3_per_year"].iloc[2]
    # the run's own comparison (written with the base) says the same
    own = pd.read_csv(out / "comparison.csv")
    assert own["run"].tolist() == ["base", "lower-ending-stock", "openings-40ha"]
    assert own["differences"].iloc[1:].tolist() == table["differences"].iloc[1:].tolist()
    np.testing.assert_allclose(own["level_m3_per_year"], table["level_m3_per_year"])


def test_products_add_up_to_the_harvest(sample_run):
    # The product split moves volume between products, never makes or loses it.
    out, _ = sample_run
    wf = pd.read_csv(out / "wood_flow.csv").set_index("period")
    prod = pd.read_csv(out / "wood_flow_by_product.csv")
    np.testing.assert_allclose(
        prod.groupby("period")["volume_m3"].sum(), wf["harvest_m3"], rtol=1e-9
    )
    assert {"sawlog", "pulp", "unsplit"} <= set(prod["product"])
    # spruce shares from the sample scenario: sawlog 0.45 at 70 years ... 0.70 at 140
    spruce = prod[prod["species"] == "spruce"].pivot(
        index="period", columns="product", values="volume_m3"
    )
    share = spruce["sawlog"] / spruce.sum(axis=1)
    assert ((share >= 0.10 - 1e-9) & (share <= 0.70 + 1e-9)).all()


def test_sample_netdown_is_consistent_with_the_stands(sample_run):
    # Netdown arithmetic read back from the written files: the table's removals are the sums
    # of the stands' removal columns, gross = removals + harvestable for every stand, and no
    # stand is cut beyond its harvestable area in any period.
    out, _ = sample_run
    nd = pd.read_csv(out / "netdown.csv")
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands", read_geometry=False)
    steps = nd[nd["kind"] != "harvestable"]
    for row in steps.itertuples():
        assert stands[f"removed_step{int(row.step)}_ha"].sum() == pytest.approx(row.removed_ha)
    removed = stands[[f"removed_step{int(s)}_ha" for s in steps["step"]]].sum(axis=1)
    np.testing.assert_allclose(stands["gross_ha"], removed + stands["harvestable_ha"], rtol=1e-9)
    share = nd["remaining_ha"].iloc[-1] / stands["gross_ha"].sum()
    assert 0.6 < share < 0.85  # a realistic netdown for the sample (common practice: 10-80%)
    harvests = pyogrio.read_dataframe(
        out / "projection.gpkg", layer="harvests", read_geometry=False
    )
    cut = harvests.groupby(["stand_id", "period"])["area_ha"].sum().reset_index()
    limit = stands.set_index("stand_id")["harvestable_ha"].loc[cut["stand_id"]].to_numpy()
    assert (cut["area_ha"].to_numpy() <= limit * (1 + 1e-9)).all()
    assert (stands["site_index_source"] == "raster").sum() > 0  # gaps filled from the raster


def test_spatial_rules_hold_in_the_written_outputs(tmp_path, capsys):
    # ARM with green-up: the openings rebuilt here from the written harvests layer (not from
    # internal state) never exceed the maximum opening; the second run reuses the cached graph.
    out = tmp_path / "spatial"
    args = [
        "run",
        str(SCENARIO),
        "--out",
        str(out),
        "-q",
        "--set",
        "harvest.greenup_years=20",
        "--set",
        "harvest.max_opening_ha=40",
        "--set",
        "scenario.periods=8",
        *BASE_ONLY,
    ]
    assert main(args) == 0
    gpkg = out / "projection.gpkg"
    openings = pyogrio.read_dataframe(gpkg, layer="openings")
    assert openings["area_ha"].max() <= 40 + 1e-6
    harvests = pyogrio.read_dataframe(gpkg, layer="harvests")
    stands = pyogrio.read_dataframe(gpkg, layer="stands")
    from yieldscape.adjacency import build_adjacency

    adj = build_adjacency(stands.geometry.to_numpy(), "edge")
    pos = {sid: i for i, sid in enumerate(stands["stand_id"])}
    idx = harvests["stand_id"].map(pos).to_numpy()
    for p in range(1, 9):
        win = (harvests["period"] <= p) & (harvests["period"] > p - 2)  # 20 years, 10-y periods
        area = np.bincount(idx[win], harvests["area_ha"][win], adj.n)
        lab = adj.components(area > 0)
        if (lab >= 0).any():
            assert np.bincount(lab[lab >= 0], area[lab >= 0]).max() <= 40 + 1e-6
    rec = json.loads((out / "run.json").read_text())["flow"]
    assert rec["spatial_cost_m3_per_period"] >= -1e-6
    capsys.readouterr()
    assert main([a for a in args if a != "-q"]) == 0
    assert "(cached)" in capsys.readouterr().err


def test_optimised_mode_maps_the_lp_onto_stands(tmp_path):
    out = tmp_path / "opt"
    assert (
        main(
            [
                "run",
                str(SCENARIO),
                "--out",
                str(out),
                "-q",
                *BASE_ONLY,
                "--set",
                "flow.method=optimize",
                "--set",
                "flow.band=0",
                "--set",
                "scenario.periods=10",
            ]
        )
        == 0
    )
    rec = json.loads((out / "run.json").read_text())
    assert rec["flow"]["policy"] == "optimize" and rec["lp"]["status"] == "Optimal"
    wf = pd.read_csv(out / "wood_flow.csv")
    # strict even flow in the LP; the stand schedule follows it up to the reported gap
    np.testing.assert_allclose(wf["lp_bound_m3"], wf["lp_bound_m3"].iloc[0], rtol=1e-6)
    gap = rec["lp"]["gap_of_schedule_to_lp"]
    assert -1e-9 <= gap < 0.05
    assert wf["harvest_m3"].sum() == pytest.approx(wf["lp_bound_m3"].sum() * (1 - gap))
    assert (wf["harvest_m3"] <= wf["lp_bound_m3"] * (1 + 1e-9)).all()


def test_sample_keeps_its_spatial_rules_and_cover_targets(sample_run):
    out, proc = sample_run
    assert "no rule is broken" in proc.stdout and "the schedule is" in proc.stdout
    openings = pd.read_csv(out / "openings.csv")
    assert openings["area_ha"].max() <= 60 + 1e-6  # harvest.max_opening_ha of the sample
    cover = pd.read_csv(out / "cover.csv")
    assert cover["met"].all() and set(cover["zone"]) == {"*", "valley"}
    rec = json.loads((out / "run.json").read_text())
    assert rec["lp"]["status"] == "Optimal"
    assert rec["lp"]["total_harvest_m3"] >= pd.read_csv(out / "wood_flow.csv")[
        "harvest_m3"
    ].sum() * (1 - 1e-9)  # the LP bounds the rule-based schedule
