"""The output GeoPackage against the OGC GeoPackage standard, version 1.2 (OGC 12-128r15),
read back with pyogrio, inspected with the standard library's sqlite3, checked with GDAL's own
validator (validate_gpkg.py) and opened with an older GDAL (Debian 12's 3.6, the one QGIS 3.22
runs on there) where one is installed."""

import csv
import json
import os
import re
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from pyproj import CRS

from yieldscape.cli.main import main

from helpers import small_case_files


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    """A run of the small case (tests/conftest.py), made once: the tests only read it."""
    tmp = tmp_path_factory.mktemp("gpkg")
    _, scenario = small_case_files(tmp)
    out = tmp / "out"
    assert main(["run", str(scenario), "--out", str(out), "-q"]) == 0
    return out


def test_geopackage_core_requirements(run_dir):
    gpkg = run_dir / "projection.gpkg"
    with sqlite3.connect(gpkg) as con:
        # OGC 12-128r15 (GeoPackage 1.2) Req 2: application_id 0x47504B47 ("GPKG") and, for
        # version 1.2, user_version 10200 (0x000027D8)
        assert con.execute("PRAGMA application_id").fetchone()[0] == 0x47504B47
        assert con.execute("PRAGMA user_version").fetchone()[0] == 10200
        # Req 6: integrity check passes
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        # Req 10/11: gpkg_spatial_ref_sys holds the mandatory rows (-1, 0, 4326)
        srs = dict(
            con.execute(
                "SELECT srs_id, organization_coordsys_id FROM gpkg_spatial_ref_sys"
            ).fetchall()
        )
        assert {-1, 0, 4326} <= set(srs)
        # Req 13/14: gpkg_contents lists every table with its data_type
        contents = {
            row[0]: row[1:]
            for row in con.execute("SELECT table_name, data_type, srs_id FROM gpkg_contents")
        }
        assert contents["stands"][0] == "features"
        assert contents["harvests"][0] == "features"
        assert contents["wood_flow"][0] == "attributes"
        assert contents["wood_flow_by_product"][0] == "attributes"
        # the features keep the input CRS (EPSG:32633) through gpkg_spatial_ref_sys
        for layer in ("stands", "harvests"):
            srs_id = contents[layer][1]
            org, code = con.execute(
                "SELECT organization, organization_coordsys_id FROM gpkg_spatial_ref_sys "
                "WHERE srs_id = ?",
                (srs_id,),
            ).fetchone()
            assert (org.upper(), code) == ("EPSG", 32633)
        # Req 21/22: gpkg_geometry_columns names a geometry column of each feature table
        geom = {
            row[0]: row[1:]
            for row in con.execute(
                "SELECT table_name, column_name, geometry_type_name, srs_id "
                "FROM gpkg_geometry_columns"
            )
        }
        # the feature tables and the map layers (views over them: OGC 12-128r15 Req 14,
        # a gpkg_contents row names "a SQLite table or view")
        views = {n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type='view'")}
        assert views == {"harvests"} | {f"harvests_period_{p:02d}" for p in range(1, 11)} | {
            f"stands_age_{y}" for y in (2030, 2050, 2080, 2110, 2130)
        }
        # harvests is a view of the events table joined to the stands' polygons
        assert contents["harvest_events"][0] == "attributes"
        assert set(geom) == {"stands", "harvests"} | views
        for layer, (column, gtype, srs_id) in geom.items():
            assert gtype in {"POLYGON", "MULTIPOLYGON", "GEOMETRY"}
            assert srs_id == contents[layer][1]
            cols = [r[1] for r in con.execute(f'PRAGMA table_info("{layer}")')]
            assert column in cols
            assert contents[layer][0] == "features"
        # the attribute table has no geometry column and one row per period
        assert con.execute("SELECT COUNT(*) FROM wood_flow").fetchone()[0] == 10


def test_layers_read_back_with_pyogrio(run_dir):
    gpkg = run_dir / "projection.gpkg"
    layers = dict(pyogrio.list_layers(gpkg))
    tables = {"wood_flow", "wood_flow_by_product", "netdown", "indicators", "verdict"}
    tables |= {"age_classes", "harvest_by_zone_species", "stand_ages", "regeneration"}
    tables |= {"area_by_analysis_unit", "harvest_events", "constraints"}
    assert {name for name, kind in layers.items() if kind is None} == tables
    assert {"stands", "harvests", "harvests_period_01", "stands_age_2130"} <= set(layers)
    stands = pyogrio.read_dataframe(gpkg, layer="stands")
    assert CRS.from_user_input(stands.crs).to_epsg() == 32633
    for col in (
        "stand_id",
        "species",
        "site_index",
        "age_years",
        "zone",
        "area_ha",
        "first_harvest_period",
    ):
        assert col in stands.columns
    harvests = pyogrio.read_dataframe(gpkg, layer="harvests")
    for col in ("stand_id", "period", "start_year", "age_years", "area_ha", "volume_m3"):
        assert col in harvests.columns
    flow = pyogrio.read_dataframe(gpkg, layer="wood_flow")
    # wood_flow.harvest_m3 is the sum over the harvests layer, period by period
    per_period = harvests.groupby("period")["volume_m3"].sum()
    np.testing.assert_allclose(
        flow.set_index("period")["harvest_m3"].loc[per_period.index], per_period, rtol=1e-9
    )
    # first_harvest_period agrees with the earliest period in harvests
    first = harvests.groupby("stand_id")["period"].min()
    got = stands.set_index("stand_id")["first_harvest_period"]
    np.testing.assert_array_equal(got.loc[first.index].to_numpy(), first.to_numpy())
    assert got.drop(first.index).isna().all()


# the columns of the harvests layer (docs/outputs.md, "Layer harvests"), in order: a contract
HARVEST_COLUMNS = [
    "stand_id",
    "species",
    "analysis_unit",
    "zone",
    "treatment",
    "period",
    "start_year",
    "harvest_year",
    "age_years",
    "area_ha",
    "volume_m3",
    "volume_m3_ha",
    "partial",
]


def test_harvests_is_a_view_gdal_lists_with_the_stands_geometry(run_dir):
    gpkg = run_dir / "projection.gpkg"
    # GDAL lists it as a polygon layer, with the documented columns in order
    info = pyogrio.read_info(gpkg, layer="harvests")
    assert info["geometry_type"] in {"Polygon", "MultiPolygon", "Unknown"}
    assert list(info["fields"]) == HARVEST_COLUMNS
    assert pyogrio.read_info(gpkg, layer="harvest_events")["geometry_type"] is None
    harvests = pyogrio.read_dataframe(gpkg, layer="harvests", fid_as_index=True)
    events = pyogrio.read_dataframe(gpkg, layer="harvest_events", fid_as_index=True)
    # one row per event, the same attributes, and each row's polygon is its stand's
    assert len(harvests) == len(events) > 0
    assert harvests.index.equals(events.index)
    pd.testing.assert_frame_equal(pd.DataFrame(harvests.drop(columns="geometry")), events)
    stands = pyogrio.read_dataframe(gpkg, layer="stands").set_index("stand_id")
    want = stands.geometry.loc[harvests["stand_id"]].to_numpy()
    assert shapely.equals(harvests.geometry.to_numpy(), want).all()
    # the geometry is not copied: the file holds one polygon per stand
    with sqlite3.connect(gpkg) as con:
        kinds = dict(con.execute("SELECT name, type FROM sqlite_master").fetchall())
    assert kinds["harvests"] == "view" and kinds["harvest_events"] == "table"


def _run(small_case, name: str, *sets: str) -> Path:
    tmp, _, scenario = small_case
    args = [a for s in sets for a in ("--set", s)]
    assert main(["run", str(scenario), "--out", str(tmp / name), "-q", *args]) == 0
    return tmp / name


def column_types(gpkg: Path, table: str) -> dict[str, str]:
    """Declared SQLite column types (PRAGMA table_info), views included."""
    with sqlite3.connect(gpkg) as con:
        return {r[1]: r[2] for r in con.execute(f'PRAGMA table_info("{table}")')}


def field_types(gpkg: Path, layer: str) -> dict[str, str]:
    """The field types GDAL reports (through pyogrio)."""
    info = pyogrio.read_info(gpkg, layer=layer)
    return dict(zip(info["fields"], info["dtypes"], strict=True))


YEAR_COLUMNS = {  # every calendar-year and period column of the GeoPackage's tables
    "stands": ("first_harvest_period", "first_harvest_year"),
    "harvests": ("period", "start_year", "harvest_year"),
    "harvests_period_*": ("period", "start_year", "harvest_year"),
    "stands_age_*": ("first_harvest_year", "year"),
    "wood_flow": ("period", "start_year", "end_year", "harvest_year"),
    "stand_ages": ("year",),
    "age_classes": ("year",),
    "harvest_by_zone_species": ("period", "start_year"),
    "regeneration": ("period",),
    "area_by_analysis_unit": ("year",),
    "verdict": ("first_failing_period",),
}


def test_years_are_integers_also_with_stands_never_cut(small_case):
    # three periods: the young stands are never cut, so first_harvest_year has nulls
    out = _run(small_case, "short", "scenario.periods=3")
    gpkg = out / "projection.gpkg"
    layers = [name for name, _ in pyogrio.list_layers(gpkg)]
    for pattern, cols in YEAR_COLUMNS.items():
        table = next(n for n in layers if re.fullmatch(pattern.replace("*", r"\d+"), n))
        declared, gdal = column_types(gpkg, table), field_types(gpkg, table)
        for col in cols:
            assert declared[col] == "INTEGER", (table, col)
            assert gdal[col] == "int64", (table, col)
    with sqlite3.connect(gpkg) as con:
        kinds = dict(
            con.execute(
                "SELECT first_harvest_year IS NULL, COUNT(*) FROM stands GROUP BY 1"
            ).fetchall()
        )
        assert kinds[0] > 0 and kinds[1] > 0  # stands cut and stands never cut
        # stored values are integers, not reals in an INTEGER column
        assert {
            t for (t,) in con.execute("SELECT DISTINCT typeof(harvest_year) FROM harvests")
        } == {"integer"}
        assert {
            t for (t,) in con.execute("SELECT DISTINCT typeof(first_harvest_year) FROM stands")
        } == {"integer", "null"}
    # the CSVs carry the same years without a decimal point
    for name, cols in (
        ("wood_flow.csv", ("period", "start_year", "end_year", "harvest_year")),
        ("age_classes.csv", ("year",)),
        ("harvest_by_zone_species.csv", ("period", "start_year")),
    ):
        with open(out / name, newline="", encoding="utf-8") as f:
            rows = list(csv.DictReader(f))
        assert rows, name
        for row in rows:
            for col in cols:
                assert re.fullmatch(r"\d+", row[col]), (name, col, row[col])


def test_a_midpoint_of_an_odd_period_keeps_half_years(small_case):
    # 5-year periods harvested at their midpoint: 2032.5, 2037.5, ... (docs/outputs.md)
    out = _run(small_case, "odd", "scenario.period_years=5", "scenario.periods=3")
    gpkg = out / "projection.gpkg"
    assert column_types(gpkg, "wood_flow")["harvest_year"] == "REAL"
    assert column_types(gpkg, "wood_flow")["start_year"] == "INTEGER"
    assert column_types(gpkg, "stands")["first_harvest_year"] == "REAL"
    flow = pyogrio.read_dataframe(gpkg, layer="wood_flow")
    np.testing.assert_array_equal(flow["harvest_year"], [2032.5, 2037.5, 2042.5])


def gdal_python() -> str | None:
    """A Python with GDAL's own bindings and sample scripts (Debian's python3-gdal): this
    environment's, or the system's."""
    for exe in dict.fromkeys((sys.executable, "/usr/bin/python3")):
        if Path(exe).exists():
            probe = subprocess.run(
                [exe, "-c", "import osgeo.gdal, osgeo_utils.samples.validate_gpkg"],
                capture_output=True,
            )
            if probe.returncode == 0:
                return exe
    if os.environ.get("YIELDSCAPE_REQUIRE_GDAL_TOOLS"):
        pytest.fail("YIELDSCAPE_REQUIRE_GDAL_TOOLS is set but GDAL's Python tools are missing")
    return None


def test_gdal_validator_passes(run_dir):
    exe = gdal_python()
    if exe is None:
        pytest.skip("GDAL's Python tools are not installed (CI installs Debian's python3-gdal)")
    # validate_gpkg.py checks the file against the GeoPackage requirements, one by one;
    # -k reports every failure, --extra adds its checks beyond the letter of the standard
    done = subprocess.run(
        [
            exe,
            "-m",
            "osgeo_utils.samples.validate_gpkg",
            "-k",
            "--extra",
            "--warning-as-error",
            str(run_dir / "projection.gpkg"),
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0 and not done.stdout.strip(), done.stdout + done.stderr


OPEN_EVERY_LAYER = """
import json, sys
from osgeo import gdal
gdal.UseExceptions()
messages = []
gdal.PushErrorHandler(lambda cls, number, msg: messages.append(msg))
ds = gdal.OpenEx(sys.argv[1], gdal.OF_VECTOR)
counts = {}
for i in range(ds.GetLayerCount()):
    layer = ds.GetLayer(i)
    counts[layer.GetName()] = sum(1 for _ in layer)
print(json.dumps({"version": gdal.__version__, "counts": counts, "messages": messages}))
"""


def test_gdal_of_the_system_opens_every_layer_without_a_word(run_dir):
    exe = gdal_python()
    if exe is None:
        pytest.skip("GDAL's Python tools are not installed (CI installs Debian's python3-gdal)")
    gpkg = run_dir / "projection.gpkg"
    done = subprocess.run(
        [exe, "-c", OPEN_EVERY_LAYER, str(gpkg)],
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    )
    seen = json.loads(done.stdout)
    # an older GDAL (Debian 12 has 3.6) warns on every open of a GeoPackage 1.4 that it
    # "may only be partially supported"; 1.2 it reads without a word
    assert seen["messages"] == [], seen
    assert seen["counts"] == {
        name: pyogrio.read_info(gpkg, layer=name)["features"]
        for name, _ in pyogrio.list_layers(gpkg)
    }


def test_a_long_table_written_in_batches_is_the_table_pyogrio_writes_whole(tmp_path, monkeypatch):
    # the reference: pyogrio.write_dataframe writing the whole frame in one Arrow table
    import geopandas as gpd

    from yieldscape.io import vector

    frame = pd.DataFrame(
        {
            "stand_id": np.arange(10, dtype=np.int64),
            "species": pd.Series(list("abcdefghij"), dtype="str"),
            "year": pd.array([None] * 3 + [2027] * 7, dtype="Int64"),  # the first batch all NA
            "age_years": np.linspace(0, 90, 10),
            "partial": np.arange(10) % 3 == 0,
        }
    )
    stands = gpd.GeoDataFrame({"a": [1]}, geometry=[shapely.box(0, 0, 1, 1)], crs="EPSG:3006")
    files = {}
    for batch in (3, 10**6):
        monkeypatch.setattr(vector, "BATCH_ROWS", batch)
        path = files[batch] = tmp_path / f"{batch}.gpkg"
        vector.write_gpkg_layer(path, stands, "stands")
        vector.write_gpkg_layer(path, frame, "table", spatial=False)
    got, want = (
        pyogrio.read_dataframe(files[b], layer="table", fid_as_index=True) for b in (3, 10**6)
    )
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert (
        pyogrio.read_info(files[3], layer="table")["dtypes"].tolist()
        == pyogrio.read_info(files[10**6], layer="table")["dtypes"].tolist()
    )
    with sqlite3.connect(files[3]) as a, sqlite3.connect(files[10**6]) as b:
        query = "SELECT sql FROM sqlite_master WHERE name = 'table'"
        assert a.execute(query).fetchall() == b.execute(query).fetchall()
    assert got["year"].isna().sum() == 3


@pytest.mark.parametrize("multi_every", [0, 1, 3])  # polygons, multipolygons, both (promoted)
def test_a_long_layer_written_in_batches_is_the_layer_pyogrio_writes_whole(
    tmp_path, monkeypatch, multi_every
):
    # the reference: pyogrio.write_dataframe converting the whole GeoDataFrame at once
    import geopandas as gpd

    from yieldscape.io import vector

    xs = np.arange(10.0)
    geoms = shapely.box(xs, 0, xs + 1, 1)
    if multi_every:
        geoms[::multi_every] = shapely.multipolygons(np.atleast_2d(geoms[::multi_every]), axis=0)
    frame = gpd.GeoDataFrame(
        {"stand_id": np.arange(10), "species": pd.Series(list("abcdefghij"), dtype="str")},
        geometry=geoms,
        crs="EPSG:3006",
    )
    files = {}
    for batch in (3, 10**6):
        monkeypatch.setattr(vector, "BATCH_ROWS", batch)
        files[batch] = tmp_path / f"{batch}.gpkg"
        vector.write_gpkg_layer(files[batch], frame, "stands")
    got, want = (pyogrio.read_dataframe(files[b], fid_as_index=True) for b in (3, 10**6))
    assert (
        shapely.to_wkb(got.geometry.values).tolist()
        == shapely.to_wkb(want.geometry.values).tolist()
    )
    pd.testing.assert_frame_equal(
        pd.DataFrame(got.drop(columns="geometry")),
        pd.DataFrame(want.drop(columns="geometry")),
        check_exact=True,
    )
    meta = (
        "SELECT name, sql FROM sqlite_master ORDER BY name",
        "SELECT table_name, data_type, min_x, min_y, max_x, max_y, srs_id FROM gpkg_contents",
        "SELECT * FROM gpkg_geometry_columns",
        "SELECT srs_id, organization_coordsys_id FROM gpkg_spatial_ref_sys ORDER BY 1",
    )
    with sqlite3.connect(files[3]) as a, sqlite3.connect(files[10**6]) as b:
        for query in meta:
            assert a.execute(query).fetchall() == b.execute(query).fetchall()
    assert pyogrio.read_info(files[3])["geometry_type"] == (
        "Polygon" if not multi_every else "MultiPolygon"
    )


def test_a_table_moved_from_a_side_geopackage_is_the_table_gdal_writes_in_place(tmp_path):
    # the reference: GDAL (pyogrio) writing the table into the GeoPackage itself, after the
    # same layers; the moved table must list, read, count and be declared the same
    import geopandas as gpd

    from yieldscape.io import vector

    frame = pd.DataFrame(
        {
            "stand_id": np.arange(7, dtype=np.int64),
            "species": pd.Series(list("abcdefg"), dtype="str"),
            "year": pd.array([None, None] + [2027] * 5, dtype="Int64"),
            "age_years": [0.0, np.nan, 2.5, 3.0, 1e300, -0.0, 7.0],
            "partial": np.arange(7) % 3 == 0,
        }
    )
    stands = gpd.GeoDataFrame({"a": [1]}, geometry=[shapely.box(0, 0, 1, 1)], crs="EPSG:3006")
    small = pd.DataFrame({"period": [1, 2], "volume_m3": [10.0, 20.0]})
    direct, moved, side = tmp_path / "direct.gpkg", tmp_path / "moved.gpkg", tmp_path / "s.gpkg"
    for path in (direct, moved):
        vector.write_gpkg_layer(path, stands, "stands")
        vector.write_gpkg_layer(path, small, "small", spatial=False)
    vector.write_gpkg_layer(direct, frame, "table", spatial=False)
    vector.write_gpkg_layer(side, frame, "table", spatial=False)
    vector.move_attribute_table(side, moved, "table")
    assert not side.exists()
    assert pyogrio.list_layers(moved).tolist() == pyogrio.list_layers(direct).tolist()
    assert pyogrio.read_info(moved, layer="table")["features"] == 7
    got, want = (
        pyogrio.read_dataframe(p, layer="table", fid_as_index=True) for p in (moved, direct)
    )
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    queries = [
        "SELECT type, name, tbl_name, sql FROM sqlite_master ORDER BY type, name",
        "SELECT table_name, data_type, identifier, description, min_x, min_y, max_x, max_y, "
        "srs_id FROM gpkg_contents ORDER BY rowid",
        "SELECT * FROM gpkg_ogr_contents ORDER BY table_name",
        "SELECT * FROM sqlite_sequence ORDER BY name",
    ]
    with sqlite3.connect(moved) as a, sqlite3.connect(direct) as b:
        assert a.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        for query in queries:
            assert a.execute(query).fetchall() == b.execute(query).fetchall(), query
        # GDAL's feature count follows later inserts through the moved triggers
        for con in (a, b):
            con.execute('INSERT INTO "table" (stand_id) VALUES (99)')
        query = "SELECT feature_count FROM gpkg_ogr_contents WHERE table_name = 'table'"
        assert a.execute(query).fetchone() == b.execute(query).fetchone() == (8,)
