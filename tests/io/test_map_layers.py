"""The per-period and per-year map layers of projection.gpkg and the GeoTIFF export, read back
through GDAL (pyogrio, rasterio) as a GIS would read them."""

import os
import sqlite3
from contextlib import closing
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
import shapely
from pyproj import CRS

from yieldscape.cli.main import main
from yieldscape.io.vector import fid_runs, fids_in_order, sync_in_background

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

CELL_M = 10.0


@pytest.fixture(scope="module")
def out(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("maps")
    n = 30
    layer = write_layer(tmp / "s.gpkg", squares(n), stand_attrs(n, ages=np.arange(n) * 6.0))
    raw = scenario_dict(
        layer,
        flow={"ending_stock": 0.5},
        report={"raster_cell_m": CELL_M, "age_class_years": [2030, 2080, 2130]},
    )
    scn = write_scenario(tmp / "scn.toml", raw)
    out = tmp / "out"
    assert main(["run", str(scn), "--out", str(out), "-q"]) == 0
    return out


def test_each_period_is_a_layer_holding_that_periods_harvest(out):
    gpkg = out / "projection.gpkg"
    harvests = pyogrio.read_dataframe(gpkg, layer="harvests")
    assert harvests["period"].nunique() > 3
    for p in range(1, 11):
        view = pyogrio.read_dataframe(gpkg, layer=f"harvests_period_{p:02d}")
        want = harvests[harvests["period"] == p].reset_index(drop=True)
        assert len(view) == len(want)
        pd.testing.assert_frame_equal(
            pd.DataFrame(view.drop(columns="geometry")), pd.DataFrame(want.drop(columns="geometry"))
        )
        assert shapely.equals(view.geometry.values, want.geometry.values).all()
        assert CRS.from_user_input(view.crs).to_epsg() == 32633


def test_each_report_year_is_a_layer_of_stand_ages(out):
    gpkg = out / "projection.gpkg"
    stands = pyogrio.read_dataframe(gpkg, layer="stands")
    ages = pyogrio.read_dataframe(gpkg, layer="stand_ages")
    for year in (2030, 2080, 2130):
        view = pyogrio.read_dataframe(gpkg, layer=f"stands_age_{year}").set_index("stand_id")
        assert len(view) == len(stands)
        want = ages[ages["year"] == year].set_index("stand_id")
        np.testing.assert_allclose(view.loc[want.index, "age_years"], want["age_years"])
        assert (view["year"] == year).all()
    # in the start year every stand is its input age
    start = pyogrio.read_dataframe(gpkg, layer="stands_age_2030").set_index("stand_id")
    np.testing.assert_allclose(
        start["age_years"], stands.set_index("stand_id").loc[start.index, "age_years"]
    )


def sample_at(src, points) -> np.ndarray:
    """The band's value at each point, read by rasterio."""
    xy = zip(shapely.get_x(points), shapely.get_y(points), strict=True)
    return np.array([v[0] for v in src.sample(xy)])


def test_geotiffs_carry_each_stands_value_at_its_cells(out):
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands")
    ages = pyogrio.read_dataframe(out / "projection.gpkg", layer="stand_ages")
    inside = shapely.point_on_surface(stands.geometry.values)
    first = stands["first_harvest_period"].fillna(0).to_numpy()
    with rasterio.open(out / "rasters" / "first_harvest_period.tif") as src:
        assert CRS.from_user_input(src.crs.to_wkt()).to_epsg() == 32633
        assert src.res == (CELL_M, CELL_M)
        assert src.nodata == -1
        # 30 stands of 100 m in rows of 10: a 1000 m x 300 m block
        assert (src.width, src.height) == (100, 30)
        got = sample_at(src, inside)
        np.testing.assert_array_equal(got, first)
        band = src.read(1)
        assert set(np.unique(band)) <= set(np.unique(first)) | {-1}
    with rasterio.open(out / "rasters" / "age_2080.tif") as src:
        assert src.nodata == -9999
        got = sample_at(src, inside)
        want = ages[ages["year"] == 2080].set_index("stand_id").loc[stands["stand_id"], "age_years"]
        np.testing.assert_allclose(got, want.to_numpy(), rtol=1e-6)
        assert "2080" in src.descriptions[0]


def query_plan(gpkg, layer) -> str:
    """SQLite's plan for reading the whole view ``layer`` (EXPLAIN QUERY PLAN)."""
    with closing(sqlite3.connect(gpkg)) as con:
        return " | ".join(r[-1] for r in con.execute(f'EXPLAIN QUERY PLAN SELECT * FROM "{layer}"'))


def test_each_view_reads_its_rows_as_a_range_of_the_primary_key_without_an_index(out):
    # the tables are written in period (year) order: a view reads one fid range (SQLite's
    # documented plan text for a rowid range: "USING INTEGER PRIMARY KEY (rowid>? AND rowid<?)")
    gpkg = out / "projection.gpkg"
    with closing(sqlite3.connect(gpkg)) as con:
        indexed = {
            r[0] for r in con.execute("SELECT tbl_name FROM sqlite_master WHERE type='index'")
        }
    assert "stand_ages" not in indexed and "harvest_events" not in indexed
    assert "stands" in indexed  # the join's lookup of each row's stand
    for layer in ("harvests_period_03", "stands_age_2080"):
        plan = query_plan(gpkg, layer)
        assert "USING INTEGER PRIMARY KEY (rowid>? AND rowid<?)" in plan, plan


def test_fid_runs_are_the_rows_of_each_value_numbered_from_one():
    runs = fid_runs(np.array([1, 1, 1, 2, 4, 4]))
    assert runs == {1: (1, 3), 2: (4, 4), 4: (5, 6)}
    assert fid_runs(np.array([], dtype=np.int64)) == {}
    assert fid_runs(np.array([1, 2, 1])) is None  # 1 in two runs: a range would take the 2


def test_fids_in_order_sees_a_missing_row(tmp_path):
    gpkg = tmp_path / "t.gpkg"
    pyogrio.write_dataframe(pd.DataFrame({"period": [1, 1, 2, 3]}), gpkg, layer="t")
    assert fids_in_order(gpkg, "t", 4)
    assert not fids_in_order(gpkg, "t", 5)
    with closing(sqlite3.connect(gpkg)) as con, con:
        con.execute('DELETE FROM "t" WHERE "fid" = 2')  # GDAL's trigger lowers its count
    assert not fids_in_order(gpkg, "t", 4)
    assert not fids_in_order(gpkg, "t", 3)  # 3 rows, fids 1, 3, 4


def test_a_run_syncs_its_geopackage_once_after_its_last_write(tmp_path, monkeypatch):
    # the staged output is moved into place only after the GeoPackage is on disk whole
    # (io.vector.unsynced_gpkg): synced in threads, the layers while the long table is moved
    # in, then the whole file after its last write
    synced = []
    real = os.fsync

    def fsync(fd):
        path = Path(os.readlink(f"/proc/self/fd/{fd}"))
        synced.append((path.name, path.stat().st_size))
        real(fd)

    monkeypatch.setattr("yieldscape.io.vector.os.fsync", fsync)
    n = 12
    layer = write_layer(tmp_path / "s.gpkg", squares(n), stand_attrs(n, ages=np.arange(n) * 15.0))
    scn = write_scenario(tmp_path / "scn.toml", scenario_dict(layer))
    out = tmp_path / "out"
    assert main(["run", str(scn), "--out", str(out), "-q"]) == 0
    gpkg = out / "projection.gpkg"
    assert {name for name, _ in synced} == {"projection.gpkg"}
    assert len(synced) <= 2
    assert max(size for _, size in synced) == gpkg.stat().st_size
    with closing(sqlite3.connect(gpkg)) as con:  # the long table and the views are in it
        names = {r[0] for r in con.execute("SELECT table_name FROM gpkg_contents")}
    assert {"stand_ages", "harvests_period_01", "stands_age_2030"} <= names


def test_the_background_sync_raises_its_error_when_waited_for(tmp_path, monkeypatch):
    path = tmp_path / "x.gpkg"
    path.write_bytes(b"x")

    def fails(fd):
        raise OSError(5, "Input/output error")

    monkeypatch.setattr("yieldscape.io.vector.os.fsync", fails)
    wait = sync_in_background(path)
    with pytest.raises(OSError, match="Input/output"):
        wait()
