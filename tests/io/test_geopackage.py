"""The output GeoPackage against the OGC GeoPackage standard (OGC 12-128r18, version 1.3/1.4),
read back with pyogrio and inspected with the standard library's sqlite3."""

import sqlite3

import numpy as np
import pyogrio
import pytest
from pyproj import CRS

from foresight.cli.main import main


@pytest.fixture
def run_dir(small_case):
    tmp, _, scenario = small_case
    out = tmp / "out"
    assert main(["run", str(scenario), "--out", str(out), "-q"]) == 0
    return out


def test_geopackage_core_requirements(run_dir):
    gpkg = run_dir / "projection.gpkg"
    with sqlite3.connect(gpkg) as con:
        # Req 2: application_id is 0x47504B47 ("GPKG"); Req 2 (1.2+): user_version 10200+
        assert con.execute("PRAGMA application_id").fetchone()[0] == 0x47504B47
        assert con.execute("PRAGMA user_version").fetchone()[0] >= 10300
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
        # the feature tables and the map layers (views over them, OGC 12-128r18 Req. 14)
        views = {n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type='view'")}
        assert views == {f"harvests_period_{p:02d}" for p in range(1, 11)} | {
            f"stands_age_{y}" for y in (2030, 2050, 2080, 2110, 2130)
        }
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
    tables |= {"age_classes", "harvest_by_zone_species", "stand_ages"}
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
