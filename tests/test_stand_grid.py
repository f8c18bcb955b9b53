"""The stand label grid behind the map figure, the GeoTIFFs and the zonal statistics: the
cell-centre rule checked against shapely's point-in-polygon test cell by cell, and
``burn_labels`` against GDAL's own rasteriser (``rasterio.features.rasterize``,
``all_touched=False``) cell for cell, centres on edges and vertices included."""

import numpy as np
import pytest
import rasterio.features
import rasterio.transform
import shapely

import yieldscape.zonal as zonal


@pytest.fixture
def stands():
    # irregular stands: the Voronoi cells of random points, clipped to a 2 x 1.5 km box
    rng = np.random.default_rng(3)
    box = shapely.box(0, 0, 2000, 1500)
    pts = shapely.multipoints(rng.uniform([0, 0], [2000, 1500], (60, 2)))
    cells = shapely.get_parts(shapely.voronoi_polygons(pts, extend_to=box))
    return shapely.intersection(cells, box)


def gdal_labels(geoms, transform, shape):
    """The reference: GDAL burns 1 + index of each non-empty geometry, in order."""
    out = np.zeros(shape, dtype=np.int32)
    live = np.flatnonzero(~(shapely.is_empty(geoms) | shapely.is_missing(geoms)))
    shapes = zip(geoms[live], live + 1, strict=True)
    rasterio.features.rasterize(shapes, out=out, transform=transform, all_touched=False)
    return out


def test_each_cell_takes_the_stand_holding_its_centre(stands):
    labels, transform = zonal.stand_grid(stands, 37.0)
    h, w = labels.shape
    assert (w, h) == (55, 41)  # ceil(2000 / 37), ceil(1500 / 37)
    cols, rows = np.meshgrid(np.arange(w), np.arange(h))
    x = transform.c + (cols + 0.5) * transform.a
    y = transform.f + (rows + 0.5) * transform.e
    # brute force: the stand whose polygon properly contains the centre (none on an edge here)
    want = np.zeros((h, w), dtype=np.int32)
    for i, g in enumerate(stands):
        want[shapely.contains_xy(g, x, y)] = i + 1
    np.testing.assert_array_equal(labels, want)


@pytest.mark.parametrize("cell", [3.3, 37.0, 100.0])
@pytest.mark.parametrize("origin", [(0.0, 1500.0), (-13.7, 1504.6), (200.0, 1300.0)])
@pytest.mark.parametrize("chunk", [7, 100_000])  # polygons a chunk: several, one
def test_burn_labels_is_gdal_on_irregular_stands(stands, cell, origin, chunk, monkeypatch):
    monkeypatch.setattr(zonal, "_CHUNK", chunk)
    transform = rasterio.transform.from_origin(*origin, cell, cell)
    shape = (int(1600 / cell), int(2100 / cell))  # past the stands on two sides
    np.testing.assert_array_equal(
        zonal.burn_labels(stands, transform, shape), gdal_labels(stands, transform, shape)
    )


@pytest.mark.parametrize("ccw", [True, False])
@pytest.mark.parametrize("cell, x0", [(10.0, -5.0), (20.0, -10.0), (4.0, -2.0), (7.0, -3.5)])
def test_burn_labels_is_gdal_with_centres_on_shared_edges(ccw, cell, x0):
    # a 10 x 10 block of 20 m squares whose edges run through rows and columns of cell
    # centres: which square a centre on a shared edge goes to is GDAL's edge rule
    xs = np.repeat(np.arange(10) * 20.0, 10)
    ys = np.tile(np.arange(10) * 20.0, 10)
    squares = shapely.box(xs, ys, xs + 20, ys + 20, ccw=ccw)
    transform = rasterio.transform.from_origin(x0, 200 - x0, cell, cell)
    shape = (int(210 / cell) + 1,) * 2
    for order in (slice(None), slice(None, None, -1)):  # burn order decides shared rows
        geoms = squares[order]
        got = zonal.burn_labels(geoms, transform, shape)
        np.testing.assert_array_equal(got, gdal_labels(geoms, transform, shape))
    assert (got > 0).sum() > 0


def test_burn_labels_is_gdal_on_random_polygons_with_vertices_on_centres():
    # polygons (some with holes, some multi, some reversed, some overlapping) whose vertices
    # sit on a 5 m lattice, half the 10 m cell: many vertices and edges fall on cell centres
    rng = np.random.default_rng(0)
    for _ in range(60):
        geoms = []
        for _ in range(rng.integers(1, 10)):
            pts = rng.integers(-4, 44, (rng.integers(3, 9), 2)) * 5.0
            parts = shapely.get_parts(shapely.make_valid(shapely.Polygon(pts)))
            parts = [p for p in parts if p.geom_type == "Polygon"]
            if not parts:
                continue
            g = shapely.MultiPolygon(parts) if len(parts) > 1 else parts[0]
            if rng.random() < 0.3:
                g = shapely.difference(g, shapely.buffer(g, -15))  # a hole in it
            geoms.append(shapely.reverse(g) if rng.random() < 0.5 else g)
        geoms = np.array([*geoms, shapely.Polygon()], dtype=object)  # an empty one too
        transform = rasterio.transform.from_origin(
            rng.choice([0.0, -5.0, 3.3]), rng.choice([200.0, 205.0, 201.7]), 10.0, 10.0
        )
        shape = (int(rng.integers(5, 25)), int(rng.integers(5, 25)))
        np.testing.assert_array_equal(
            zonal.burn_labels(geoms, transform, shape), gdal_labels(geoms, transform, shape)
        )


def test_burn_labels_wants_a_north_up_grid(stands):
    with pytest.raises(ValueError, match="north-up"):
        zonal.burn_labels(stands, rasterio.transform.from_origin(0, 0, 1, -1), (3, 3))
