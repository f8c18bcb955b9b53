"""Land base netdown: closed-form areas, netdown arithmetic, zonal statistics, CRS handling."""

import itertools
import math
import re

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import rasterio
import rasterio.warp
import shapely
from rasterio.transform import from_origin

import yieldscape
from yieldscape.cli.main import main
from yieldscape.io.rasters import RasterData
from yieldscape.zonal import zonal

from helpers import (
    scenario_dict,
    squares,
    stand_attrs,
    write_layer,
    write_raster,
    write_scenario,
)

X0, Y0 = 500_000.0, 6_700_000.0


def layer_case(tmp_path, geoms, steps, attrs=None, extra_layers=()):
    n = len(geoms)
    attrs = attrs or stand_attrs(n, ages=80)
    attrs.setdefault("COVER", np.array(["forest"] * n, dtype=object))
    gpkg = write_layer(tmp_path / "stands.gpkg", geoms, attrs)
    for name, frame in extra_layers:
        pyogrio.write_dataframe(frame, gpkg, layer=name, append=True)
    raw = scenario_dict(gpkg)
    raw["landbase"] = {"steps": steps}
    return yieldscape.load_scenario(write_scenario(tmp_path / "s.toml", raw))


def lines(geoms, **attrs):
    return gpd.GeoDataFrame(attrs, geometry=list(geoms), crs="EPSG:32633")


def test_stream_buffer_removes_two_w_l(tmp_path):
    # Closed form: a straight stream of length L crossing a rectangle, buffer w each side,
    # removes 2 w L; where it ends inside, a half disc pi w^2 / 2 is added (end cap, here
    # approximated by GEOS with 8 segments a quarter: area factor (32 / 2pi) sin(2pi/32)).
    stand = shapely.box(X0, Y0, X0 + 400, Y0 + 200)  # 8 ha
    w = 15.0
    crossing = shapely.LineString([(X0 - 50, Y0 + 100), (X0 + 450, Y0 + 100)])
    scn = layer_case(
        tmp_path,
        [stand],
        [{"label": "streams", "layer": "stands.gpkg", "layer_name": "streams", "buffer_m": w}],
        extra_layers=[("streams", lines([crossing], CLASS=[1]))],
    )
    res = yieldscape.check(scn)
    assert res.netdown.removed_ha[0, 0] == pytest.approx(2 * w * 400 / 1e4, rel=1e-9)
    # a stream that stops 100 m inside the stand: 2 w 100 plus one end cap
    half = shapely.LineString([(X0 - 50, Y0 + 100), (X0 + 100, Y0 + 100)])
    (tmp_path / "b").mkdir()
    scn = layer_case(
        tmp_path / "b",
        [stand],
        [{"label": "streams", "layer": "stands.gpkg", "layer_name": "streams", "buffer_m": w}],
        extra_layers=[("streams", lines([half], CLASS=[1]))],
    )
    cap = math.pi * w**2 / 2 * (32 / (2 * math.pi)) * math.sin(2 * math.pi / 32)
    got = yieldscape.check(scn).netdown.removed_ha[0, 0]
    assert got == pytest.approx((2 * w * 100 + cap) / 1e4, rel=1e-6)


def test_reserve_inside_removes_its_area_and_buffer_by_class(tmp_path):
    stands = list(squares(4, side_m=200.0, per_row=2))  # four 4-ha squares
    reserve = shapely.box(X0 + 50, Y0 + 50, X0 + 150, Y0 + 130)  # 0.8 ha inside stand 1
    streams = lines(
        [
            shapely.LineString([(X0 + 200, Y0 - 10), (X0 + 200, Y0 + 410)]),
            shapely.LineString([(X0 - 10, Y0 + 300), (X0 + 410, Y0 + 300)]),
        ],
        KIND=["big", "small"],
    )
    scn = layer_case(
        tmp_path,
        stands,
        [
            {"label": "reserves", "layer": "stands.gpkg", "layer_name": "reserves"},
            {
                "label": "riparian",
                "layer": "stands.gpkg",
                "layer_name": "streams",
                "buffer_by": {"field": "KIND", "widths_m": {"big": 20.0, "small": 5.0}},
            },
        ],
        extra_layers=[("reserves", lines([reserve], RID=[1])), ("streams", streams)],
    )
    res = yieldscape.check(scn)
    assert res.netdown.removed_ha[0].tolist() == pytest.approx([0.8, 0, 0, 0])
    # riparian: the big stream (20 m each side, 400 m long) along the shared edge splits
    # 2 x 20 x 400 m2 between the stands; the small one crosses the upper stands (5 m, 400 m)
    # minus the square where both buffers overlap (40 m x 10 m), counted once.
    total = (2 * 20 * 400 + 2 * 5 * 400 - 40 * 10) / 1e4
    assert res.netdown.removed_ha[1].sum() == pytest.approx(total, rel=1e-9)


def _mixed_case(tmp_path, order):
    stands = list(squares(6, side_m=200.0, per_row=3))
    attrs = stand_attrs(6, ages=80)
    attrs["COVER"] = np.array(
        ["forest", "rock", "forest", "forest", "forest", "forest"], dtype=object
    )
    reserve = shapely.box(X0 + 420, Y0 + 20, X0 + 580, Y0 + 180)  # inside stand 3 only
    slope = np.zeros((100, 100))
    slope[60:80, 0:10] = 50  # steep: x 0..100, y 200..400, half of stand 4
    write_raster(tmp_path / "slope.tif", slope)
    steps = {
        "rule": {"label": "non-productive", "where": "COVER == 'rock'"},
        "reserve": {"label": "reserves", "layer": "stands.gpkg", "layer_name": "reserves"},
        "slope": {"label": "steep", "raster": "slope.tif", "above": 40},
    }
    scn = layer_case(
        tmp_path,
        stands,
        [steps[k] for k in order],
        attrs=attrs,
        extra_layers=[("reserves", lines([reserve], RID=[1]))],
    )
    return yieldscape.check(scn)


@pytest.mark.parametrize("order", list(itertools.permutations(["rule", "reserve", "slope"])))
def test_gross_is_removals_plus_harvestable_in_any_order(tmp_path, order):
    # Netdown arithmetic: gross = sum of removals + harvestable per stand and in total; the
    # order changes attribution but not the harvestable area when steps do not overlap.
    res = _mixed_case(tmp_path, order)
    nd = res.netdown
    np.testing.assert_allclose(
        nd.gross_ha, nd.removed_ha.sum(axis=0) + nd.harvestable_ha, rtol=1e-12
    )
    table = nd.table
    assert table["remaining_ha"].iloc[-1] == pytest.approx(nd.harvestable_ha.sum())
    assert table["removed_ha"].iloc[:-1].sum() + nd.harvestable_ha.sum() == pytest.approx(
        nd.gross_ha.sum()
    )
    np.testing.assert_allclose(nd.harvestable_ha, [4, 0, 4 - 2.56, 2, 4, 4], atol=1e-9)


def test_zonal_mean_matches_point_sampling():
    # Independent check of the cell-centre rule: test every cell centre with shapely.
    rng = np.random.default_rng(2)
    values = rng.uniform(0, 100, (60, 80))
    values[5:9, 10:30] = np.nan  # nodata
    transform = from_origin(X0, Y0 + 600, 10.0, 10.0)
    raster = RasterData(None, values, transform, None, (0, 0, 0, 0))
    polys = [
        shapely.Polygon(
            [(X0 + 33, Y0 + 520), (X0 + 420, Y0 + 590), (X0 + 380, Y0 + 300), (X0 + 90, Y0 + 260)]
        ),
        shapely.box(X0 + 500, Y0 + 20, X0 + 790, Y0 + 240).buffer(-20),
        shapely.box(X0 + 701, Y0 + 401, X0 + 703, Y0 + 403),
    ]  # no cell centre inside
    z = zonal(np.array(polys, dtype=object), raster, threshold=50.0)
    cols, rows = np.meshgrid(np.arange(80), np.arange(60))
    cx, cy = X0 + 5 + 10 * cols, Y0 + 600 - 5 - 10 * rows
    for i, poly in enumerate(polys[:2]):
        inside = shapely.contains_xy(poly, cx, cy) & np.isfinite(values)
        assert z.cells[i] == inside.sum()
        assert z.mean[i] == pytest.approx(values[inside].mean())
        assert z.fraction_above()[i] == pytest.approx((values[inside] > 50).mean())
    # the tiny stand holds no cell centre: sampled at an interior point
    assert z.sampled[2] and z.cells[2] == 1
    r, c = int((600 - 402) // 10), int(702 // 10)
    assert z.mean[2] == pytest.approx(values[r, c])


def test_raster_in_another_crs_matches_a_prewarped_raster(tmp_path):
    # A raster in EPSG:3035 used directly (yieldscape reprojects the stands) gives the values
    # of the same raster warped to the stands' CRS beforehand with rasterio.warp.
    stands = list(squares(9, side_m=300.0, per_row=3))
    src_crs, dst_crs = "EPSG:3035", "EPSG:32633"
    left, bottom, right, top = rasterio.warp.transform_bounds(
        dst_crs, src_crs, X0 - 500, Y0 - 500, X0 + 1400, Y0 + 1400
    )
    cell = 20.0
    w, h = int((right - left) / cell), int((top - bottom) / cell)
    yy, xx = np.mgrid[0:h, 0:w]
    smooth = 20 + 5 * np.sin(xx / 15.0) + 4 * np.cos(yy / 11.0)
    write_raster(tmp_path / "si_3035.tif", smooth, x0=left, y0=top, cell=cell, crs=src_crs)
    dst = np.full((110, 110), np.nan, dtype="float32")
    dst_transform = from_origin(X0 - 100, Y0 + 1000, 10.0, 10.0)
    with rasterio.open(tmp_path / "si_3035.tif") as src:
        rasterio.warp.reproject(
            rasterio.band(src, 1),
            dst,
            dst_transform=dst_transform,
            dst_crs=dst_crs,
            resampling=rasterio.warp.Resampling.bilinear,
            dst_nodata=np.nan,
        )
    write_raster(tmp_path / "si_32633.tif", dst, x0=X0 - 100, y0=Y0 + 1000, cell=10.0)

    def site_values(name):
        attrs = stand_attrs(9, ages=80)
        attrs["SI"] = np.full(9, np.nan)
        gpkg = write_layer(tmp_path / "st.gpkg", stands, attrs)
        raw = scenario_dict(gpkg)
        raw["inventory"]["from_raster"] = {"site_index": name}
        scn = yieldscape.load_scenario(write_scenario(tmp_path / f"{name}.toml", raw))
        return yieldscape.check(scn).stands["site_index"].to_numpy()

    direct, warped = site_values("si_3035.tif"), site_values("si_32633.tif")
    # within what one cell of the smooth field changes (|grad| * cell)
    assert np.all(np.abs(direct - warped) < 0.5)


def test_harvested_area_never_exceeds_harvestable(tmp_path):
    stands = list(squares(12, side_m=200.0, per_row=4))
    attrs = stand_attrs(12, ages=np.arange(12) * 10 + 40)
    streams = lines([shapely.LineString([(X0 + 300, Y0 - 10), (X0 + 300, Y0 + 610)])], K=[1])
    scn = layer_case(
        tmp_path,
        stands,
        [
            {"label": "riparian", "layer": "stands.gpkg", "layer_name": "streams", "buffer_m": 30},
            {"label": "roads", "percent": 4.0},
        ],
        attrs=attrs,
        extra_layers=[("streams", streams)],
    )
    res = yieldscape.run(scn, None)
    h = res.harvests.groupby(["stand_id", "period"])["area_ha"].sum().reset_index()
    limit = res.stands.set_index("stand_id")["harvestable_ha"]
    assert (h["area_ha"].to_numpy() <= limit.loc[h["stand_id"]].to_numpy() * (1 + 1e-9)).all()
    # the excluded area still grows: growing stock counts the gross area
    assert res.stands["harvestable_ha"].sum() < res.stands["gross_ha"].sum()


@pytest.mark.parametrize(
    ("step", "pattern"),
    [
        ({"layer": "nowhere.gpkg"}, r"#1 'bad': .*nowhere.gpkg: overlay layer file not found"),
        ({"layer": "stands.gpkg", "layer_name": "roads"}, r"#1 'bad': .*no layer 'roads'"),
        (
            {"layer": "stands.gpkg", "layer_name": "streams"},
            r"#1 'bad': the layer has lines or points; give a buffer_m",
        ),
        (
            {
                "layer": "stands.gpkg",
                "layer_name": "streams",
                "buffer_by": {"field": "CLASS", "widths_m": {"1": 10}},
            },
            r"#1 'bad': buffer_by has no width for class '2'",
        ),
        (
            {"layer": "stands.gpkg", "layer_name": "streams", "buffer_m": -5},
            r"#1 'bad'\] buffer_m = -5: must be >= 0",
        ),
        ({"where": "COLOUR == 'red'"}, r"#1 'bad': where = .* names field 'COLOUR'"),
        ({"where": "AGE >> 3"}, r"#1 'bad': where = 'AGE >> 3': 'AGE >> 3' is not allowed"),
        ({"where": "AGE >"}, r"#1 'bad': where = 'AGE >' does not parse"),
        ({"raster": "nocrs.tif", "above": 1}, r"nocrs.tif: .*the raster has no CRS"),
        ({"raster": "far.tif", "above": 1}, r"far.tif: the raster does not overlap the stands"),
        ({"percent": 5, "raster": "far.tif"}, r"needs exactly one of where, layer, raster"),
    ],
)
def test_bad_netdown_steps_exit_2(tmp_path, capsys, step, pattern):
    write_raster(tmp_path / "nocrs.tif", np.ones((10, 10)), crs=None)
    write_raster(tmp_path / "far.tif", np.ones((10, 10)), x0=X0 + 1e6)
    streams = lines(
        [
            shapely.LineString([(X0, Y0), (X0 + 50, Y0 + 50)]),
            shapely.LineString([(X0 + 50, Y0), (X0, Y0 + 50)]),
        ],
        CLASS=[1, 2],
    )
    gpkg = write_layer(tmp_path / "stands.gpkg", list(squares(4)), stand_attrs(4, ages=80))
    pyogrio.write_dataframe(streams, gpkg, layer="streams", append=True)
    raw = scenario_dict(gpkg)
    raw["landbase"] = {"steps": [{"label": "bad", **step}]}
    path = write_scenario(tmp_path / "s.toml", raw)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert re.search(pattern, err), err
    assert "Traceback" not in err and not (tmp_path / "out").exists()


def test_partial_raster_cover_is_a_warning(tmp_path, caplog):
    values = np.full((10, 20), 50.0)  # covers the first two of four 1-ha squares
    write_raster(tmp_path / "slope.tif", values, x0=X0, y0=Y0 + 100)
    gpkg = write_layer(tmp_path / "stands.gpkg", list(squares(4)), stand_attrs(4, ages=80))
    raw = scenario_dict(gpkg)
    raw["landbase"] = {"steps": [{"label": "steep", "raster": "slope.tif", "above": 40}]}
    scn = yieldscape.load_scenario(write_scenario(tmp_path / "s.toml", raw))
    with caplog.at_level("WARNING", logger="yieldscape"):
        res = yieldscape.check(scn)
    assert "2 stands are not covered by slope.tif" in caplog.text
    np.testing.assert_allclose(res.netdown.harvestable_ha, [0, 0, 1, 1])


def test_site_index_raster_fills_gaps_or_wins(tmp_path):
    values = np.full((10, 40), 25.0)
    write_raster(tmp_path / "si.tif", values, x0=X0, y0=Y0 + 100)
    attrs = stand_attrs(4, ages=80)
    attrs["SI"] = np.array([18.0, np.nan, 20.0, np.nan])
    gpkg = write_layer(tmp_path / "stands.gpkg", list(squares(4)), attrs)
    raw = scenario_dict(gpkg)
    raw["inventory"]["from_raster"] = {"site_index": "si.tif"}
    scn = yieldscape.load_scenario(write_scenario(tmp_path / "a.toml", raw))
    stands = yieldscape.check(scn).stands
    assert stands["site_index"].tolist() == [18.0, 25.0, 20.0, 25.0]
    assert stands["site_index_source"].tolist() == ["layer", "raster", "layer", "raster"]
    raw["inventory"]["raster_wins"] = True
    scn = yieldscape.load_scenario(write_scenario(tmp_path / "b.toml", raw))
    assert yieldscape.check(scn).stands["site_index"].tolist() == [25.0] * 4


def test_stand_wholly_inside_a_reserve_leaves_nothing(tmp_path, caplog):
    stands = list(squares(2, side_m=100.0))
    write_raster(tmp_path / "slope.tif", np.zeros((20, 40)), x0=X0 - 50, y0=Y0 + 150)
    reserve = shapely.box(X0 - 10, Y0 - 10, X0 + 100, Y0 + 110)  # covers stand 1 entirely
    scn = layer_case(
        tmp_path,
        stands,
        [
            {"label": "reserves", "layer": "stands.gpkg", "layer_name": "reserves"},
            {"label": "steep", "raster": "slope.tif", "above": 40},
        ],
        extra_layers=[("reserves", lines([reserve], RID=[1]))],
    )
    with caplog.at_level("WARNING", logger="yieldscape"):
        res = yieldscape.check(scn)
    assert res.netdown.harvestable_ha.tolist() == [0.0, 1.0]
    assert "not covered" not in caplog.text
