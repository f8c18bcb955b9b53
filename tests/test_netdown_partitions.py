"""The netdown partition by partition (a partitioned GeoParquet stand layer, read one file at
a time) gives the in-memory netdown, stand for stand, for every kind of step."""

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from yieldscape.config import NetdownStep
from yieldscape.io.geoparquet import iter_partitions
from yieldscape.io.readers import read_overlay, read_step_raster
from yieldscape.landbase import apply_netdown, netdown_by_partition

from helpers import write_raster

X0, Y0 = 500_000.0, 6_700_000.0
SIDE = 100.0  # 1-ha squares
N = 200_000  # stands: 200k builds and nets in about 15 s on the project's machine
PARTS = 4


def _region(tmp_path, n):
    """n 1-ha squares in a square block (vectorised shapely boxes), 3% of them rock; n / 700
    reserve discs over the block; a slope raster of 30 m cells over the western two
    thirds only, so some stands are outside it."""
    rng = np.random.default_rng(15)
    per_row = int(np.ceil(np.sqrt(n)))
    i = np.arange(n)
    x, y = X0 + (i % per_row) * SIDE, Y0 + (i // per_row) * SIDE
    stands = gpd.GeoDataFrame(
        {
            "ID": i + 1,
            "COVER": np.where(rng.random(n) < 0.03, "rock", "forest").astype(object),
            "area_ha": np.full(n, 1.0),
        },
        geometry=shapely.box(x, y, x + SIDE, y + SIDE),
        crs="EPSG:32633",
    )
    extent = per_row * SIDE
    k = max(1, n // 700)
    centre = rng.uniform([X0, Y0], [X0 + extent, Y0 + extent], (k, 2))
    reserves = gpd.GeoDataFrame(
        {"RID": np.arange(k)},
        geometry=shapely.buffer(shapely.points(centre), rng.uniform(50, 400, k)),
        crs="EPSG:32633",
    )
    reserves.to_parquet(tmp_path / "reserves.parquet")
    cells = int(extent * 2 / 3 / 30) + 1
    yy = np.linspace(0, 8 * np.pi, cells)
    slope = 30 + 25 * np.sin(yy)[:, None] * np.cos(1.3 * yy)[None, :]
    write_raster(tmp_path / "slope.tif", slope, x0=X0, y0=Y0 + extent, cell=30.0)
    steps = (
        NetdownStep(1, "where", "rock", where="COVER in ['rock']"),
        NetdownStep(2, "layer", "reserves", layer=tmp_path / "reserves.parquet", buffer_m=20.0),
        NetdownStep(3, "raster", "steep", raster=tmp_path / "slope.tif", above=40.0),
        NetdownStep(4, "percent", "roads", percent=3.0),
    )
    return stands, steps


def _fields(frame):
    return {"COVER": frame["COVER"]}


@pytest.mark.parametrize("n", [N])
def test_partitioned_netdown_equals_the_in_memory_one(tmp_path, n):
    stands, steps = _region(tmp_path, n)
    whole = apply_netdown(stands, steps, _fields(stands), read_overlay, read_step_raster)
    (tmp_path / "stands").mkdir()
    bounds = np.linspace(0, n, PARTS + 1).astype(int)
    for k in range(PARTS):
        part = stands.iloc[bounds[k] : bounds[k + 1]]
        part.to_parquet(tmp_path / "stands" / f"part-{k}.parquet")
    parts = netdown_by_partition(
        iter_partitions(tmp_path / "stands"), steps, _fields, read_overlay, read_step_raster
    )
    # each step removes something and some stands are outside the raster: the cases hold
    assert (whole.removed_ha.sum(axis=1) > 0).all()
    assert any("not covered by slope.tif" in note for note in whole.notes)
    np.testing.assert_array_equal(parts.gross_ha, whole.gross_ha)
    np.testing.assert_array_equal(parts.removed_ha, whole.removed_ha)
    np.testing.assert_array_equal(parts.harvestable_ha, whole.harvestable_ha)
    assert shapely.equals_exact(parts.remaining_geometry, whole.remaining_geometry, 0.0).all()
    pd.testing.assert_frame_equal(parts.table, whole.table)
    assert parts.notes == whole.notes and parts.warnings == whole.warnings


def test_a_partition_outside_the_raster_is_no_error(tmp_path):
    # the raster lies over the first partition only: the in-memory rule (an error only when
    # the raster misses every stand) holds for the partitions together
    stands, steps = _region(tmp_path, 400)
    halves = [stands.iloc[:40], stands.iloc[360:]]  # south rows, north rows
    got = netdown_by_partition(halves, steps, _fields, read_overlay, read_step_raster)
    assert got.removed_ha.shape == (4, 80)
    assert got.removed_ha[2, :40].sum() == 0 < got.removed_ha[2, 40:].sum()
    far = [stands.iloc[360:]]
    far[0] = far[0].set_geometry(far[0].geometry.translate(1e5, 0))
    with pytest.raises(ValueError, match="#3 'steep'.*the raster does not overlap the stands"):
        netdown_by_partition(far, steps, _fields, read_overlay, read_step_raster)
