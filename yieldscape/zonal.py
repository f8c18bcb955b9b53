"""Zonal statistics of stand polygons over a raster: rasterise once, then np.bincount.

Cell rule: a cell belongs to a stand when the cell's **centre** lies inside the polygon
(rasterio's default, ``all_touched=False``); stands do not overlap, so one label raster holds
them all. A stand too small or thin to hold any cell centre is sampled at one interior point
(``shapely.point_on_surface``) instead. Cells that are nodata count for neither the mean nor
the fractions; a stand with no valid cell at all is reported as not covered.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np
import rasterio.features
import rasterio.transform
import shapely

from yieldscape.io.rasters import RasterData


@dataclass(frozen=True)
class Zonal:
    """Per stand: valid cells, their mean, and the cells above a threshold (if asked)."""

    cells: np.ndarray  # valid cells (or 1 for a point-sampled stand with a valid value)
    mean: np.ndarray  # NaN where no valid cell
    above: np.ndarray | None  # cells above the threshold
    sampled: np.ndarray  # True where the stand was point-sampled

    @property
    def covered(self) -> np.ndarray:
        return self.cells > 0

    def fraction_above(self) -> np.ndarray:
        assert self.above is not None
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.cells > 0, self.above / np.maximum(self.cells, 1), 0.0)


def zonal(geoms: np.ndarray, raster: RasterData, threshold: float | None = None) -> Zonal:
    """Statistics of ``raster`` within each polygon (geometries in the raster's CRS)."""
    n = len(geoms)
    rows, cols = raster.values.shape
    labels = np.zeros((rows, cols), dtype=np.int32)
    live = np.flatnonzero(~(shapely.is_empty(geoms) | shapely.is_missing(geoms)))
    if len(live):
        rasterio.features.rasterize(
            zip(geoms[live], live + 1, strict=True),
            out=labels,
            transform=raster.transform,
            all_touched=False,
        )
    vals = raster.values.ravel()
    lab = labels.ravel()
    ok = (lab > 0) & np.isfinite(vals)
    cells = np.bincount(lab[ok] - 1, minlength=n).astype(np.float64)
    total = np.bincount(lab[ok] - 1, vals[ok], minlength=n)
    above = (
        np.bincount(lab[ok] - 1, (vals[ok] > threshold).astype(np.float64), minlength=n)
        if threshold is not None
        else None
    )
    hit = np.bincount(lab[lab > 0] - 1, minlength=n) > 0  # any cell centre, valid or not
    sampled = np.zeros(n, dtype=bool)
    tiny = live[~hit[live]]
    if len(tiny):  # no cell centre inside: sample one interior point
        pts = shapely.point_on_surface(geoms[tiny])
        r, c = rasterio.transform.rowcol(raster.transform, shapely.get_x(pts), shapely.get_y(pts))
        r, c = np.asarray(r), np.asarray(c)
        inside = (r >= 0) & (r < rows) & (c >= 0) & (c < cols)
        v = np.full(len(tiny), np.nan)
        v[inside] = raster.values[r[inside], c[inside]]
        good = np.isfinite(v)
        idx = tiny[good]
        cells[idx] = 1.0
        total[idx] = v[good]
        sampled[idx] = True
        if above is not None:
            above[idx] = (v[good] > threshold).astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cells > 0, total / np.maximum(cells, 1), np.nan)
    return Zonal(cells, mean, above, sampled)


def stand_grid(
    geoms: np.ndarray, cell: float, bounds: tuple[float, float, float, float] | None = None
) -> tuple[np.ndarray, rasterio.Affine]:
    """Label raster of the stands on a north-up grid of square ``cell`` (in CRS units) over
    ``bounds`` (default: the stands' bounds): each cell holds 1 + the index of the stand its
    centre lies in, 0 outside every stand. Returns the labels and the grid's transform.

    Two ways to the same cell-centre rule, whichever is cheaper: with few cells per stand
    (a map figure) the cell centres are looked up in an STRtree of the stands, a cost in
    cells; otherwise GDAL rasterises the stands (rasterio), a cost mostly in stands, which
    reach it as GeoJSON (``shapely.to_geojson``, vectorised) rather than one
    ``__geo_interface__`` call each. A centre on a shared edge may go to either stand.
    """
    x0, y0, x1, y1 = bounds if bounds is not None else shapely.total_bounds(geoms)
    width = max(1, int(np.ceil((x1 - x0) / cell)))
    height = max(1, int(np.ceil((y1 - y0) / cell)))
    transform = rasterio.transform.from_origin(x0, y1, cell, cell)
    labels = np.zeros((height, width), dtype=np.int32)
    live = np.flatnonzero(~(shapely.is_empty(geoms) | shapely.is_missing(geoms)))
    if not len(live):
        return labels, transform
    if width * height <= _CELLS_PER_STAND_FOR_TREE * len(live):
        xs = x0 + (np.arange(width) + 0.5) * cell
        ys = y1 - (np.arange(height) + 0.5) * cell
        centres = shapely.points(np.tile(xs, height), np.repeat(ys, width))
        cell_i, stand_i = shapely.STRtree(geoms[live]).query(centres, predicate="intersects")
        labels.ravel()[cell_i] = live[stand_i] + 1
    else:
        shapes = (json.loads(g) for g in shapely.to_geojson(geoms[live]))
        rasterio.features.rasterize(
            zip(shapes, live + 1, strict=True),
            out=labels,
            transform=transform,
            all_touched=False,
        )
    return labels, transform


_CELLS_PER_STAND_FOR_TREE = 8
