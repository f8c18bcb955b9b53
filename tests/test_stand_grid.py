"""The stand label grid behind the map figure and the GeoTIFFs: both ways of building it follow
the cell-centre rule, checked against shapely's point-in-polygon test cell by cell."""

import numpy as np
import pytest
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


@pytest.mark.parametrize("tree_threshold", [0, 10**9])  # rasterise / STRtree
def test_each_cell_takes_the_stand_holding_its_centre(stands, tree_threshold, monkeypatch):
    monkeypatch.setattr(zonal, "_CELLS_PER_STAND_FOR_TREE", tree_threshold)
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
