"""Inventory reading: areas in hectares, CRS handling, geometry repair."""

import numpy as np
import pyproj
import pytest
import shapely

import yieldscape
from yieldscape.errors import InventoryError

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario


def _polygons_lonlat():
    # Small irregular polygons at three latitudes (independent of any projection we use).
    rng = np.random.default_rng(7)
    polys = []
    for lat in (5.0, 45.0, 64.0):
        for _ in range(3):
            lon0 = rng.uniform(-10, 30)
            theta = np.sort(rng.uniform(0, 2 * np.pi, 9))
            r = rng.uniform(0.002, 0.01, 9)
            polys.append(shapely.Polygon(np.c_[lon0 + r * np.cos(theta), lat + r * np.sin(theta)]))
    return polys


def test_geographic_areas_match_pyproj_geod(tmp_path):
    # Independent reference: pyproj.Geod.geometry_area_perimeter (Karney's geodesic area on
    # WGS84). The stand layer is in EPSG:4326.
    polys = _polygons_lonlat()
    n = len(polys)
    layer = write_layer(tmp_path / "ll.gpkg", polys, stand_attrs(n, ages=80), crs="EPSG:4326")
    scn = yieldscape.load_scenario(write_scenario(tmp_path / "s.toml", scenario_dict(layer)))
    inv = yieldscape.check(scn)
    geod = pyproj.Geod(ellps="WGS84")
    ref = np.array([abs(geod.geometry_area_perimeter(p)[0]) / 1e4 for p in polys])
    np.testing.assert_allclose(inv.stands["area_ha"], ref, rtol=1e-5)
    assert "equal-area" in inv.report.area_method


def test_projected_feet_crs_converted_to_hectares(tmp_path):
    # EPSG:2227 (US survey feet): a square of 330 ft sides; 1 US ft = 1200/3937 m (NIST).
    side = 330.0
    geom = [shapely.box(6e6, 2e6, 6e6 + side, 2e6 + side)]
    layer = write_layer(tmp_path / "ft.gpkg", geom, stand_attrs(1, ages=50), crs="EPSG:2227")
    scn = yieldscape.load_scenario(write_scenario(tmp_path / "s.toml", scenario_dict(layer)))
    area = yieldscape.check(scn).stands["area_ha"].iloc[0]
    assert area == pytest.approx((side * 1200 / 3937) ** 2 / 1e4, rel=1e-9)


def test_layer_without_crs_needs_one_stated(tmp_path):
    layer = write_layer(tmp_path / "nocrs.gpkg", squares(3), stand_attrs(3, ages=50), crs=None)
    raw = scenario_dict(layer)
    with pytest.raises(InventoryError, match="has no CRS; state it with inventory.crs"):
        yieldscape.check(yieldscape.load_scenario(write_scenario(tmp_path / "a.toml", raw)))
    raw["inventory"]["crs"] = "EPSG:32633"
    inv = yieldscape.check(yieldscape.load_scenario(write_scenario(tmp_path / "b.toml", raw)))
    np.testing.assert_allclose(inv.stands["area_ha"], 1.0)


def test_invalid_geometry_repaired_and_reported_or_rejected_when_strict(tmp_path):
    geoms = list(squares(3))
    # a self-touching "bow-tie" polygon is invalid; make_valid splits it into two triangles
    x, y = 500_000.0, 6_701_000.0
    geoms[1] = shapely.Polygon([(x, y), (x + 100, y + 100), (x + 100, y), (x, y + 100)])
    layer = write_layer(tmp_path / "bad.gpkg", geoms, stand_attrs(3, ages=50))
    scn = yieldscape.load_scenario(write_scenario(tmp_path / "s.toml", scenario_dict(layer)))
    inv = yieldscape.check(scn)
    assert inv.report.repaired_geometries == 1
    assert inv.stands.geometry.is_valid.all()
    assert inv.stands["area_ha"].iloc[1] == pytest.approx(0.5)  # two 0.25 ha triangles
    with pytest.raises(InventoryError, match=r"invalid geometry \(--strict\).*row 2 \(stand 2\)"):
        yieldscape.check(scn, strict=True)


@pytest.mark.parametrize(
    "driver,suffix", [("ESRI Shapefile", ".shp"), ("GeoJSON", ".geojson"), ("FlatGeobuf", ".fgb")]
)
def test_other_vector_formats(tmp_path, driver, suffix):
    layer = write_layer(
        tmp_path / f"stands{suffix}",
        squares(4),
        stand_attrs(4, ages=70),
        driver=driver,
        layer="stands",
    )
    raw = scenario_dict(layer)
    del raw["inventory"]["layer"]  # one layer per file: no name needed
    inv = yieldscape.check(yieldscape.load_scenario(write_scenario(tmp_path / "s.toml", raw)))
    assert inv.report.stands == 4
    np.testing.assert_allclose(inv.stands["area_ha"], 1.0)
