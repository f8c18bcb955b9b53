"""Zonal statistics of stand polygons over a raster: rasterise once, then np.bincount.

Cell rule: a cell belongs to a stand when the cell's **centre** lies inside the polygon
(rasterio's default, ``all_touched=False``: GDAL's scanline rule, computed here in numpy by
:func:`burn_labels`); stands do not overlap, so one label raster holds them all. A stand too
small or thin to hold any cell centre is sampled at one interior point
(``shapely.point_on_surface``) instead. Cells that are nodata count for neither the mean nor
the fractions; a stand with no valid cell at all is reported as not covered.
"""

from __future__ import annotations

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
    live = np.flatnonzero(~(shapely.is_empty(geoms) | shapely.is_missing(geoms)))
    if _north_up(raster.transform):
        labels = burn_labels(geoms, raster.transform, (rows, cols))
    else:  # rotated or south-up: GDAL itself, one geometry at a time
        labels = np.zeros((rows, cols), dtype=np.int32)
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
    centre lies in, 0 outside every stand (:func:`burn_labels`, GDAL's rule). Returns the
    labels and the grid's transform."""
    x0, y0, x1, y1 = bounds if bounds is not None else shapely.total_bounds(geoms)
    width = max(1, int(np.ceil((x1 - x0) / cell)))
    height = max(1, int(np.ceil((y1 - y0) / cell)))
    transform = rasterio.transform.from_origin(x0, y1, cell, cell)
    return burn_labels(geoms, transform, (height, width)), transform


def burn_labels(
    geoms: np.ndarray, transform: rasterio.Affine, shape: tuple[int, int]
) -> np.ndarray:
    """Label raster of the polygons ``geoms`` on a north-up grid: 1 + the index of the polygon
    holding each cell's centre, 0 outside them all.

    The same cells as ``rasterio.features.rasterize(zip(geoms, 1 + index), all_touched=False)``
    (GDAL's scanline fill, ``alg/llrasterize.cpp``), computed for all polygons at once in
    numpy rather than one GDAL geometry (built through GeoJSON) per polygon. GDAL's rule, in
    pixel coordinates: on row ``j`` an edge counts when ``y1 <= j + 0.5 < y2`` (its ends in
    increasing y); the crossings of a polygon's rings with the row, each rounded to
    ``floor(x + 0.5)`` and sorted, pair into the spans ``[a, b)`` filled (even-odd over all its
    rings); an edge lying on the row centre fills its own span when it runs towards -x on a
    ring walked clockwise. Where polygons overlap, the later one wins, as GDAL burns them in
    order. ``tests/test_stand_grid.py`` holds it to GDAL cell for cell."""
    height, width = shape
    out = np.zeros(shape, dtype=np.int32)
    if not _north_up(transform):
        raise ValueError(f"burn_labels: a north-up grid is needed, not {transform!r}")
    keep = np.flatnonzero(~(shapely.is_empty(geoms) | shapely.is_missing(geoms)))
    if not len(keep) or not width or not height:
        return out
    spans = []
    for i in range(0, len(keep), _CHUNK):  # a chunk of polygons at a time: bounded memory
        part = keep[i : i + _CHUNK]
        x1, y1, x2, y2, owner = _pixel_edges(geoms[part], transform)
        label = (part + 1).astype(np.int32)
        spans.append(_crossing_spans(x1, y1, x2, y2, owner, label, height))
        spans.append(_flat_spans(x1, y1, x2, y2, owner, label, height))
    row, start, end, lab = (np.concatenate(column) for column in zip(*spans, strict=True))
    start, end = np.clip(start, 0, width), np.clip(end, 0, width)
    some = start < end
    row, start, end, lab = row[some], start[some], end[some], lab[some]
    order = np.lexsort((start, row))
    row, start, end, lab = row[order], start[order], end[order], lab[order]
    apart = (row[1:] != row[:-1]) | (start[1:] >= end[:-1])
    if apart.all():  # spans of a row disjoint: mark each start (+label) and end (-label)
        base = row * width
        np.add.at(out.ravel(), base + start, lab)
        inner = end < width
        np.add.at(out.ravel(), base[inner] + end[inner], -lab[inner])
        np.cumsum(out, axis=1, dtype=np.int32, out=out)
    else:  # overlapping spans: paint them, the later polygon (the higher label) on top
        length = end - start
        first = np.repeat(row * width + start - np.cumsum(length) + length, length)
        np.maximum.at(out.ravel(), first + np.arange(len(first)), np.repeat(lab, length))
    return out


_CHUNK = 100_000  # polygons whose edges are held at once (about 60 MB for squares)


def _north_up(transform: rasterio.Affine) -> bool:
    return transform.b == 0 and transform.d == 0 and transform.a > 0 and transform.e < 0


def _pixel_edges(
    polys: np.ndarray, transform: rasterio.Affine
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Every ring edge of ``polys`` in pixel coordinates (the inverse geotransform applied as
    GDAL applies it), each ring walked clockwise, and the index of its polygon."""
    xy, ring, owner = _rings(polys)
    # GDALInvGeoTransform for a north-up transform, then x' = g0 + x * g1, y' = g3 + y * g5
    g0, g1 = -transform.c / transform.a, 1.0 / transform.a
    g3, g5 = -transform.f / transform.e, 1.0 / transform.e
    px = g0 + xy[:, 0] * g1
    py = g3 + xy[:, 1] * g5
    same = ring[1:] == ring[:-1]  # consecutive vertices of one ring
    edge_ring = ring[1:][same]
    x1, y1, x2, y2 = px[:-1][same], py[:-1][same], px[1:][same], py[1:][same]
    # GDAL 3.10 fills an edge on a row centre as if every ring ran clockwise (in x, y): the
    # sign of the ring's area (shoelace, about its first vertex) tells which ones to turn
    first = np.flatnonzero(np.r_[True, ~same])
    ox, oy = xy[first, 0][edge_ring], xy[first, 1][edge_ring]
    x, y = xy[:, 0], xy[:, 1]
    cross = (x[:-1][same] - ox) * (y[1:][same] - oy) - (x[1:][same] - ox) * (y[:-1][same] - oy)
    ccw = (np.bincount(edge_ring, cross, minlength=len(first)) > 0)[edge_ring]
    x1, x2 = np.where(ccw, x2, x1), np.where(ccw, x1, x2)
    y1, y2 = np.where(ccw, y2, y1), np.where(ccw, y1, y2)
    return x1, y1, x2, y2, owner[edge_ring]


def _rings(polys: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The vertices of every ring of ``polys`` (each ring closed), the ring of each vertex
    (rings numbered in order) and the polygon of each ring. A polygon without holes is one
    ring: its coordinates are read as they are, with no shapely object made for it."""
    simple = (shapely.get_type_id(polys) == 3) & (shapely.get_num_interior_rings(polys) == 0)
    one = np.flatnonzero(simple)
    xy_one, of_one = shapely.get_coordinates(polys[one], return_index=True)
    rest = np.flatnonzero(~simple)
    parts, part_of = shapely.get_parts(polys[rest], return_index=True)
    rings, ring_of = shapely.get_rings(parts, return_index=True)
    xy_rest, of_rest = shapely.get_coordinates(rings, return_index=True)
    xy = np.concatenate([xy_one, xy_rest])
    ring = np.concatenate([of_one, of_rest + len(one)])
    owner = np.concatenate([one, rest[part_of[ring_of]]])
    return xy, ring, owner


def _crossing_spans(x1, y1, x2, y2, owner, label, height):  # noqa: ANN001, ANN202
    """The spans each polygon fills between its sorted row crossings."""
    up = y1 < y2  # orient every sloped edge towards +y
    lo_x, lo_y = np.where(up, x1, x2), np.where(up, y1, y2)
    hi_x, hi_y = np.where(up, x2, x1), np.where(up, y2, y1)
    sloped = lo_y < hi_y
    lo_x, lo_y, hi_x, hi_y, owner = (v[sloped] for v in (lo_x, lo_y, hi_x, hi_y, owner))
    # rows j with lo_y <= j + 0.5 < hi_y, from a range one wider each side, then exactly
    first = np.clip(np.floor(lo_y - 0.5), 0, height).astype(np.int64)
    last = np.clip(np.ceil(hi_y - 0.5) + 1, 0, height).astype(np.int64)
    count = np.maximum(last - first, 0)
    edge = np.repeat(np.arange(len(count)), count)
    row = np.arange(len(edge)) - np.repeat(np.cumsum(count) - count, count) + first[edge]
    dy = row + 0.5
    hit = (dy >= lo_y[edge]) & (dy < hi_y[edge])
    edge, row, dy = edge[hit], row[hit], dy[hit]
    x = (dy - lo_y[edge]) * (hi_x[edge] - lo_x[edge]) / (hi_y[edge] - lo_y[edge]) + lo_x[edge]
    col = np.floor(x + 0.5).astype(np.int64)
    who = owner[edge]
    order = np.lexsort((col, row, who))
    col, row, who = col[order], row[order], who[order]
    # each ring crosses a row an even number of times, so pairs never straddle two groups
    return row[0::2], col[0::2], col[1::2], label[who[0::2]]


def _flat_spans(x1, y1, x2, y2, owner, label, height):  # noqa: ANN001, ANN202
    """GDAL's extra spans: an edge lying exactly on a row centre, run towards -x."""
    j = y1 - 0.5
    on = (y1 == y2) & (x1 > x2) & (j == np.floor(j)) & (j >= 0) & (j < height)
    row = j[on].astype(np.int64)
    return (
        row,
        np.floor(x2[on] + 0.5).astype(np.int64),
        np.floor(x1[on] + 0.5).astype(np.int64),
        label[owner[on]],
    )
