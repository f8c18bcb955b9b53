"""Generate the sample region "Norrowmere" used by yieldscape's demo and tests.

Norrowmere is an invented region: its outline, stands, terrain, streams,
reserves and attributes are all made up by this script, and none of it
describes a real place or real data.

What it makes
-------------
Three files, written next to this script (or into the folder of ``--out``).

``norrowmere.gpkg``, three layers in EPSG:32633 (metres), centred near
x 500 000, y 6 700 000, inside an irregular region outline of 50 000 ha (a
smoothed random blob):

``stands`` -- 3 000 - 4 000 stands, the Voronoi cells of well-spread seed
  points clipped to the outline, each a valid single Polygon of strictly more
  than 1 ha and less than 80 ha; the stands form a clean coverage (no gaps or
  overlaps inside the outline, and neighbours share exactly the same vertices
  along common edges). Attribute fields are named differently from
  yieldscape's own names, so that a scenario's field mapping is exercised:

  ``STAND_NO`` int, unique 1..N, numbered in north-to-south rows, west to east;
  ``SPP``      species code: spruce / pine / fir / aspen (about 40/30/20/10 %
               of the area), in patches;
  ``SI_M``     site index, metres of height at base age 50, one decimal,
               species-specific; NULL for a random 3 % of the stands (the
               site-index raster below can fill them);
  ``AGE``      years; by area about 35 % 1-40, 8 % 41-90 and 57 % 91-220 (an
               age-class gap and a surplus of old forest); aspen at most 140;
  ``ZONE``     highland / valley / lakeshore, by position (a smooth "elevation"
               field), each at least 15 % of the area;
  ``HOLDING``  the management unit: "west" (the stands whose centroid lies in
               the western 55 % of the area) or "east" (the rest);
  ``COVER``    land cover: "forest", or the non-productive "wetland" (about 3 %
               of the area, on the flattest low ground of the terrain) and
               "rock" (about 2 %, on the steepest high ground), in patches.

``streams`` -- a dendritic network of 200 - 900 LineStrings traced down the
  terrain and clipped to the outline, meeting exactly at confluences:

  ``STREAM_ID``    int, unique 1..N, by class, then north to south;
  ``STREAM_CLASS`` int 1 (main river, at least 8 km2 upstream), 2 (stream,
                   1.5 km2) or 3 (small creek, 0.3 km2).

  Riparian buffers of 30 / 20 / 10 m on each side of classes 1 / 2 / 3 cover
  3 - 6 % of the region.

``reserves`` -- 5 - 10 irregular, non-overlapping Polygons inside the outline
  that cut across stand boundaries, together 5 - 8 % of the region:

  ``RESERVE_ID`` int, unique 1..N, north to south; ``NAME`` text "Reserve N".

``slope_pct.tif`` -- slope in percent (100 * rise / run) of the terrain,
  EPSG:32633, 25 m cells, float32, one decimal, DEFLATE, tiled 256 x 256;
  the extent is the outline plus at least 250 m; nodata -9999 in every cell
  that does not touch the outline. About 11 % of the region is steeper than
  40 %.

``site_index.tif`` -- an estimate of site index in metres (height at base age
  50) in a different CRS, EPSG:3035, on 50 m cells, float32, DEFLATE, tiled
  256 x 256, nodata -9999 in every cell that does not touch the outline: the
  stands' own SI_M (including those set to NULL in the layer) burnt in by
  the cell-centre rule, smoothed a little, plus smooth noise of about
  +/- 1 m, so the mean over a stand matches its SI_M closely (for 95 % of
  the stands within 1 m).

The terrain itself (a smooth random elevation surface of a few hundred
metres of relief, low along the lakeshore zone and rugged in the highland)
is internal: it shapes the streams, the slope raster and COVER, and is not
written.

Determinism
-----------
Everything random comes from numpy ``default_rng`` seeded from ``SEED``
(20261201). Each step draws from its own stream (``SEED`` plus a fixed stream
number), so adding a step later does not change what earlier steps make. Two
runs give identical attributes, geometries and raster arrays; with the same
GDAL the files are byte-identical too (the GeoPackage timestamp is fixed).

Usage::

    python sample_region/make_sample_region.py [--out PATH]
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import sys
from pathlib import Path
from typing import NamedTuple

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import rasterio
import shapely
from rasterio import features
from rasterio.transform import Affine, rowcol
from scipy import ndimage, sparse
from scipy.sparse import csgraph

SEED = 20261201

REGION_NAME = "Norrowmere"
CRS = "EPSG:32633"
CENTRE = (500_000.0, 6_700_000.0)
REGION_HA = 50_000.0
LAYER = "stands"
DEFAULT_OUT = Path(__file__).resolve().parent / "norrowmere.gpkg"
GPKG_TIMESTAMP = "2026-12-01T00:00:00.000Z"  # written as the layer's last change

M2_PER_HA = 10_000.0
MIN_STAND_HA = 1.0  # every stand strictly larger
MAX_STAND_HA = 80.0  # every stand strictly smaller
# The tessellation is refined until areas sit inside these slightly tighter
# bounds, so the strict limits above hold with room to spare.
MIN_TARGET_HA = 1.05
MAX_TARGET_HA = 78.0
TARGET_MEAN_HA = 14.0
N_STANDS_RANGE = (3_000, 4_000)

SPECIES_SHARES = {"aspen": 0.10, "fir": 0.20, "pine": 0.30, "spruce": 0.40}
# mean, sd, low clip, high clip of the site index (m at base age 50)
SITE_INDEX = {
    "spruce": (21.0, 3.5, 14.0, 30.0),
    "pine": (17.0, 3.0, 10.0, 26.0),
    "fir": (22.0, 4.0, 14.0, 32.0),
    "aspen": (19.0, 3.0, 12.0, 28.0),
}
# (label, area share, youngest, oldest)
AGE_CLASSES = (
    ("young", 0.35, 1, 40),
    ("middle", 0.08, 41, 90),
    ("old", 0.57, 91, 220),
)
ASPEN_MAX_AGE = 140
# from low to high ground, with area shares
ZONE_SHARES = (("lakeshore", 0.25), ("valley", 0.40), ("highland", 0.35))
MIN_ZONE_SHARE = 0.15
HOLDING_SHARES = {"west": 0.55, "east": 0.45}  # management units, west to east by area

# --- land cover and site-index gaps (stand layer)
COVER_SHARES = {"wetland": 0.03, "rock": 0.02}  # area shares; the rest is "forest"
SI_NULL_SHARE = 0.03  # share of stands whose SI_M is null

# --- terrain (internal) and the slope raster
TERRAIN_CELL_M = 25.0
GRID_MARGIN_M = 250.0  # around the outline, for both rasters
GRID_SNAP_M = 100.0  # the terrain grid's edges sit on multiples of this
TERRAIN_BASE_M = 300.0
TERRAIN_RELIEF_M = 50.0  # per unit of the zone relief
STEEP_SLOPE_PCT = 40.0
STEEP_TARGET_SHARE = 0.11  # of the region's cells steeper than STEEP_SLOPE_PCT
STEEP_SHARE_RANGE = (0.08, 0.15)
SLOPE_TIF = "slope_pct.tif"
NODATA = -9999.0

# --- streams
STREAMS_LAYER = "streams"
HYDRO_CELL_M = 50.0  # flow routing on 2 x 2 blocks of the terrain grid
OUTLET_EDGE_SHARE = 0.25  # the lowest quarter of the region's edge drains out
# a channel cell's class by its upstream area (km2): 1 main river .. 3 small creek
STREAM_CLASS_AREA_KM2 = {1: 8.0, 2: 1.5, 3: 0.3}
STREAM_JITTER_M = 15.0
RIPARIAN_M = {1: 30.0, 2: 20.0, 3: 10.0}  # buffer on each side, by STREAM_CLASS
RIPARIAN_SHARE_RANGE = (0.03, 0.06)
STREAM_SEGMENTS_RANGE = (200, 900)

# --- reserves
RESERVES_LAYER = "reserves"
RESERVE_COUNT_RANGE = (5, 10)
RESERVE_SHARE = 0.065
RESERVE_SHARE_RANGE = (0.05, 0.08)
RESERVE_EDGE_M = 2_500.0  # reserve centres at least this far inside the outline

# --- site-index raster
SITE_INDEX_TIF = "site_index.tif"
SITE_CRS = "EPSG:3035"
SITE_CELL_M = 50.0
SITE_SMOOTH_CELLS = 0.5  # Gaussian sigma
SITE_NOISE_SD_M = 0.35
SITE_NOISE_SCALE_M = 1_500.0  # Gaussian sigma of the noise

LAYER_TITLES = {LAYER: "Stands", STREAMS_LAYER: "Streams", RESERVES_LAYER: "Reserves"}

# One random stream per step; new steps take new numbers.
STREAM_OUTLINE = 1
STREAM_STANDS = 2
STREAM_ATTRIBUTES = 3
STREAM_TERRAIN = 4
STREAM_COVER = 5
STREAM_SITE_GAPS = 6
STREAM_STREAMS = 7
STREAM_RESERVES = 8
STREAM_SITE_RASTER = 9


def stream(number: int) -> np.random.Generator:
    """The random generator of one generation step, derived from SEED."""
    return np.random.default_rng([SEED, number])


# ---------------------------------------------------------------------------
# smooth random fields
# ---------------------------------------------------------------------------


def smooth_field(rng: np.random.Generator, wavelength_m: tuple[float, float], n_waves: int = 12):
    """A smooth random field of about zero mean and unit variance.

    A sum of ``n_waves`` plane waves with random directions, phases and
    wavelengths in ``wavelength_m``; returns ``f(x, y)`` working on arrays.
    """
    angle = rng.uniform(0.0, np.pi, n_waves)
    wavelength = rng.uniform(*wavelength_m, n_waves)
    phase = rng.uniform(0.0, 2.0 * np.pi, n_waves)
    kx = 2.0 * np.pi / wavelength * np.cos(angle)
    ky = 2.0 * np.pi / wavelength * np.sin(angle)
    amp = np.sqrt(2.0 / n_waves)

    def field(x, y):
        x = np.asarray(x, dtype=float)[..., None] - CENTRE[0]
        y = np.asarray(y, dtype=float)[..., None] - CENTRE[1]
        return amp * np.cos(x * kx + y * ky + phase).sum(axis=-1)

    return field


def classes_by_area(values, area, labels, shares):
    """Cut ``values`` into classes holding the given shares of the total area.

    The lowest values go to ``labels[0]``; a stand belongs to the class its
    area-weighted rank (the cumulative area at its middle) falls in.
    """
    order = np.argsort(values, kind="stable")
    cum = np.cumsum(area[order])
    mid = (cum - 0.5 * area[order]) / cum[-1]
    cuts = np.cumsum(shares)[:-1]
    out = np.empty(len(values), dtype=object)
    out[order] = np.asarray(labels, dtype=object)[np.searchsorted(cuts, mid, side="right")]
    return out


def rank_by_area(values, area):
    """The area-weighted rank of each value, in [0, 1]."""
    order = np.argsort(values, kind="stable")
    cum = np.cumsum(area[order])
    rank = np.empty(len(values))
    rank[order] = (cum - 0.5 * area[order]) / cum[-1]
    return rank


# ---------------------------------------------------------------------------
# outline and stands
# ---------------------------------------------------------------------------


def make_outline(rng: np.random.Generator, n_vertices: int = 1440) -> shapely.Polygon:
    """The region outline: a smoothed random blob of exactly REGION_HA.

    The radius is a smooth random function of the angle (low harmonics only),
    so the outline is irregular but never folds over itself.
    """
    theta = np.linspace(0.0, 2.0 * np.pi, n_vertices, endpoint=False)
    harmonics = np.arange(2, 10)
    amp = rng.uniform(0.5, 1.0, harmonics.size) * 0.28 / harmonics
    phase = rng.uniform(0.0, 2.0 * np.pi, harmonics.size)
    log_r = (amp * np.cos(np.outer(theta, harmonics) + phase)).sum(axis=1)
    r = np.exp(log_r)
    xy = np.column_stack([r * np.cos(theta), r * np.sin(theta)])
    area = shapely.area(shapely.polygons(xy))
    xy *= np.sqrt(REGION_HA * M2_PER_HA / area)
    xy += CENTRE
    outline = shapely.polygons(np.round(xy, 2))
    if not shapely.is_valid(outline):
        raise RuntimeError("region outline is not a valid polygon")
    return outline


def tessellate(seeds: np.ndarray, outline: shapely.Polygon) -> np.ndarray:
    """Voronoi cells of ``seeds`` (n x 2), clipped to ``outline``, in seed order."""
    cells = shapely.get_parts(
        shapely.voronoi_polygons(shapely.multipoints(seeds), extend_to=outline, ordered=True)
    )
    if len(cells) != len(seeds):
        raise RuntimeError("Voronoi tessellation lost seed points (duplicates?)")
    return shapely.intersection(cells, outline)


def sample_seeds(rng, outline, n, density):
    """``n`` random points inside ``outline``, denser where ``density`` is high."""
    xmin, ymin, xmax, ymax = shapely.bounds(outline)
    shapely.prepare(outline)
    out = np.empty((0, 2))
    while len(out) < n:
        xy = rng.uniform((xmin, ymin), (xmax, ymax), size=(4 * n, 2))
        keep = shapely.contains_xy(outline, xy[:, 0], xy[:, 1])
        d = density(xy[:, 0], xy[:, 1])
        keep &= rng.uniform(size=len(xy)) < d / d.max()
        out = np.vstack([out, xy[keep]])
    return out[:n]


def split_points(cells: np.ndarray) -> np.ndarray:
    """Two seed points per cell, a quarter of its length either side of the
    centroid along the long axis of its minimum rotated rectangle."""
    rect = shapely.get_coordinates(shapely.oriented_envelope(cells)).reshape(len(cells), 5, 2)
    e1 = rect[:, 1] - rect[:, 0]
    e2 = rect[:, 2] - rect[:, 1]
    long_axis = np.where((np.hypot(*e1.T) >= np.hypot(*e2.T))[:, None], e1, e2)
    centre = shapely.get_coordinates(shapely.centroid(cells))
    return np.vstack([centre + 0.25 * long_axis, centre - 0.25 * long_axis])


def merge_small_parts(parts: np.ndarray, min_m2: float) -> np.ndarray:
    """Merge every part smaller than ``min_m2`` into the neighbour it shares
    the longest edge with (a coverage union, so shared vertices stay exact)."""
    area = shapely.area(parts)
    small = np.flatnonzero(area < min_m2)
    if small.size == 0:
        return parts
    tree = shapely.STRtree(parts)
    i, j = tree.query(parts[small], predicate="intersects")
    i = small[i]
    pair_ok = (i != j) & (area[j] >= min_m2)
    i, j = i[pair_ok], j[pair_ok]
    shared = shapely.length(shapely.intersection(parts[i], parts[j]))
    best = pd.DataFrame({"i": i, "j": j, "shared": shared})
    best = best.sort_values(["i", "shared"], ascending=[True, False]).drop_duplicates("i")
    if len(best) != small.size:
        raise RuntimeError("a small stand part has no larger neighbour to merge into")
    group = np.arange(len(parts))
    group[best["i"].to_numpy()] = best["j"].to_numpy()
    merged = gpd.GeoDataFrame({"group": group}, geometry=parts).dissolve(
        by="group", method="coverage"
    )
    return merged.geometry.to_numpy()


def make_stands(rng: np.random.Generator, outline: shapely.Polygon) -> gpd.GeoDataFrame:
    """Stand polygons: a clipped Voronoi tessellation of well-spread seeds.

    Seeds are drawn with a smoothly varying density (so stand size varies
    across the region) and spread by two rounds of Lloyd relaxation (each seed
    moved to the centroid of its cell), which removes crowded clusters the
    way Poisson-disk thinning would. Then, until every cell is inside the
    target bounds, the seed of each too-small cell is dropped (its neighbours
    take the ground) and each too-large cell gets two seeds instead of one.
    The tessellation is recomputed from the seeds each round, so neighbouring
    stands always share exact vertices. Any cell the outline cuts into
    several parts is split into single Polygons; parts under the minimum are
    merged into a neighbour.
    """
    log_density = smooth_field(rng, (6_000.0, 18_000.0))
    n = int(round(REGION_HA / TARGET_MEAN_HA))
    seeds = sample_seeds(rng, outline, n, lambda x, y: np.exp(0.6 * log_density(x, y)))

    for _ in range(2):
        cells = tessellate(seeds, outline)
        seeds = shapely.get_coordinates(shapely.centroid(cells))

    for _ in range(50):
        cells = tessellate(seeds, outline)
        area_ha = shapely.area(cells) / M2_PER_HA
        small = area_ha < MIN_TARGET_HA
        large = area_ha > MAX_TARGET_HA
        if not (small.any() or large.any()):
            break
        seeds = np.vstack([seeds[~small & ~large], split_points(cells[large])])
    else:
        raise RuntimeError("stand sizes did not settle within the target bounds")

    parts = shapely.get_parts(cells)
    parts = parts[shapely.get_type_id(parts) == shapely.GeometryType.POLYGON]
    parts = merge_small_parts(parts, MIN_TARGET_HA * M2_PER_HA)
    return gpd.GeoDataFrame(geometry=gpd.GeoSeries(parts, crs=CRS)).reset_index(drop=True)


# ---------------------------------------------------------------------------
# attributes
# ---------------------------------------------------------------------------


def zone_relief(rng: np.random.Generator):
    """The broad shape of the land, in units of about 1 per 10 km of tilt.

    A tilt in a random direction plus hills; returns ``f(x, y)``. These are
    the first draws of the attribute stream: ``assign_attributes`` cuts the
    zones from it, and ``make_terrain`` replays them (from a fresh generator
    of the same stream) so the terrain's low ground is the lakeshore zone and
    its high ground the highland.
    """
    tilt = rng.uniform(0.0, 2.0 * np.pi)
    hills = smooth_field(rng, (8_000.0, 25_000.0))

    def relief(x, y):
        return (
            (x - CENTRE[0]) * np.cos(tilt) + (y - CENTRE[1]) * np.sin(tilt)
        ) / 10_000.0 + 0.8 * hills(x, y)

    return relief


def assign_attributes(rng: np.random.Generator, stands: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Add STAND_NO, SPP, SI_M, AGE and ZONE from smooth random fields
    evaluated at the stand centroids, plus a little per-stand noise."""
    centre = shapely.get_coordinates(shapely.centroid(stands.geometry.array))
    x, y = centre[:, 0], centre[:, 1]
    area = shapely.area(stands.geometry.array)
    n = len(stands)

    # Number in rows of 1 km from north to south, west to east within a row.
    row = np.floor((CENTRE[1] + 20_000.0 - y) / 1_000.0)
    order = np.lexsort((x, row))
    stands = stands.iloc[order].reset_index(drop=True)
    x, y, area = x[order], y[order], area[order]

    # Zones by a smooth "elevation": a broad tilt plus hills.
    elevation = zone_relief(rng)(x, y)
    zone_labels = [z for z, _ in ZONE_SHARES]
    zone = classes_by_area(elevation, area, zone_labels, [s for _, s in ZONE_SHARES])

    # Species: aspen patches first, then fir (favours low ground), then pine
    # (favours high ground) among the rest; spruce takes what remains.
    e = (elevation - elevation.mean()) / elevation.std()
    species = np.full(n, "spruce", dtype=object)
    left = np.ones(n, dtype=bool)
    taken = 0.0
    for name, lean in (("aspen", 0.0), ("fir", -0.5), ("pine", 0.6)):
        score = (
            smooth_field(rng, (3_000.0, 10_000.0))(x, y) + lean * e + 0.35 * rng.standard_normal(n)
        )
        share = SPECIES_SHARES[name] / (1.0 - taken)
        cls = classes_by_area(score[left], area[left], ["no", "yes"], [1.0 - share, share])
        idx = np.flatnonzero(left)[cls == "yes"]
        species[idx] = name
        left[idx] = False
        taken += SPECIES_SHARES[name]

    # Site index: one smooth fertility field shared by all species, plus noise.
    fertility = 0.8 * smooth_field(rng, (4_000.0, 15_000.0))(x, y) + 0.6 * rng.standard_normal(n)
    si = np.empty(n)
    for name, (mean, sd, lo, hi) in SITE_INDEX.items():
        m = species == name
        si[m] = np.clip(mean + sd * fertility[m], lo, hi)
    si = np.round(si, 1)

    # Age: patches of age classes from a smooth field; within a class the age
    # follows the same field (plus noise) so neighbouring stands are similar.
    age_score = smooth_field(rng, (2_500.0, 9_000.0))(x, y) + 0.3 * rng.standard_normal(n)
    age_class = classes_by_area(
        age_score, area, [c for c, *_ in AGE_CLASSES], [s for _, s, *_ in AGE_CLASSES]
    )
    within = np.clip(
        rank_by_area(smooth_field(rng, (2_000.0, 6_000.0))(x, y), area)
        + 0.12 * rng.standard_normal(n),
        0.0,
        1.0,
    )
    age = np.empty(n)
    for label, _, lo, hi in AGE_CLASSES:
        m = age_class == label
        top = np.where(species[m] == "aspen", min(hi, ASPEN_MAX_AGE), hi)
        # old stands crowd towards the young end of their class
        u = within[m] ** 1.6 if label == "old" else within[m]
        age[m] = np.round(lo + u * (top - lo))

    stands.insert(0, "STAND_NO", np.arange(1, n + 1, dtype=np.int32))
    stands.insert(1, "SPP", pd.array(species, dtype=object))
    stands.insert(2, "SI_M", si)
    stands.insert(3, "AGE", age.astype(np.int32))
    stands.insert(4, "ZONE", pd.array(zone, dtype=object))
    # Two management units, west and east, split by centroid x (no random draw, so the other
    # attributes do not depend on it).
    holding = classes_by_area(x, area, list(HOLDING_SHARES), list(HOLDING_SHARES.values()))
    stands.insert(5, "HOLDING", pd.array(holding, dtype=object))
    return stands


# ---------------------------------------------------------------------------
# terrain: the internal elevation surface and its slope
# ---------------------------------------------------------------------------


class Terrain(NamedTuple):
    """The elevation surface on the slope raster's grid (never written).

    ``elevation_m`` and ``slope_pct`` are (rows, cols) arrays on square cells
    of ``cell_m``; row 0 is the northern edge. ``inside`` marks the cells
    whose centre is inside the region outline.
    """

    transform: Affine
    cell_m: float
    elevation_m: np.ndarray
    slope_pct: np.ndarray
    inside: np.ndarray

    @property
    def shape(self) -> tuple[int, int]:
        return self.elevation_m.shape


def cell_centres(transform: Affine, shape) -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre coordinates of a north-up grid, each a (rows, cols) array."""
    rows, cols = shape
    x = transform.c + transform.a * (np.arange(cols) + 0.5)
    y = transform.f + transform.e * (np.arange(rows) + 0.5)
    return np.meshgrid(x, y)


def region_grid(outline, cell_m: float, margin_m: float, snap_m: float):
    """A north-up grid over ``outline`` plus ``margin_m``, its edges on
    multiples of ``snap_m``: returns (transform, (rows, cols))."""
    xmin, ymin, xmax, ymax = shapely.bounds(outline)
    x0 = np.floor((xmin - margin_m) / snap_m) * snap_m
    y0 = np.floor((ymin - margin_m) / snap_m) * snap_m
    x1 = np.ceil((xmax + margin_m) / snap_m) * snap_m
    y1 = np.ceil((ymax + margin_m) / snap_m) * snap_m
    shape = (int(round((y1 - y0) / cell_m)), int(round((x1 - x0) / cell_m)))
    return Affine(cell_m, 0.0, x0, 0.0, -cell_m, y1), shape


def slope_pct_of(elevation_m: np.ndarray, cell_m: float) -> np.ndarray:
    """Slope [%] of an elevation grid by central differences."""
    d_row, d_col = np.gradient(elevation_m, cell_m)
    return 100.0 * np.hypot(d_row, d_col)


def unit_noise(rng: np.random.Generator, shape, sigma_cells: float) -> np.ndarray:
    """Gaussian-filtered white noise scaled to unit standard deviation."""
    field = ndimage.gaussian_filter(rng.standard_normal(shape), sigma_cells, mode="reflect")
    return field / field.std()


def make_terrain(rng: np.random.Generator, outline: shapely.Polygon) -> Terrain:
    """A smooth synthetic elevation surface [m] on TERRAIN_CELL_M cells.

    The broad shape is the zone relief (``zone_relief``, replayed from the
    attribute stream), TERRAIN_RELIEF_M metres per unit. On top of it rise
    rugged hills from two octaves of smoothed noise (about 450 m and 170 m),
    faded in over the higher ground by a smooth envelope; their amplitude is
    found by bisection so that STEEP_TARGET_SHARE of the region's cells are
    steeper than STEEP_SLOPE_PCT. The relief is a few hundred metres.
    """
    transform, shape = region_grid(outline, TERRAIN_CELL_M, GRID_MARGIN_M, GRID_SNAP_M)
    x, y = cell_centres(transform, shape)
    inside = shapely.contains_xy(outline, x, y)

    base = zone_relief(stream(STREAM_ATTRIBUTES))(x, y)
    octaves = 0.55 * unit_noise(rng, shape, 450.0 / TERRAIN_CELL_M) + 0.45 * unit_noise(
        rng, shape, 170.0 / TERRAIN_CELL_M
    )
    envelope = 1.0 / (
        1.0
        + np.exp(
            -2.5 * (base - np.quantile(base[inside], 0.35))
            - 0.8 * smooth_field(rng, (6_000.0, 15_000.0))(x, y)
        )
    )
    rugged = envelope * 2.0 * np.tanh(octaves / 2.0)  # extremes squeezed, relief kept modest
    base_m = TERRAIN_BASE_M + TERRAIN_RELIEF_M * base

    # The slope grows with the amplitude of the hills: bisect it for the target.
    g_base = [g[inside] for g in np.gradient(base_m, TERRAIN_CELL_M)]
    g_rugged = [g[inside] for g in np.gradient(rugged, TERRAIN_CELL_M)]

    def steep_share(amplitude_m: float) -> float:
        slope = 100.0 * np.hypot(
            g_base[0] + amplitude_m * g_rugged[0], g_base[1] + amplitude_m * g_rugged[1]
        )
        return float((slope > STEEP_SLOPE_PCT).mean())

    lo, hi = 0.0, 1_000.0
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if steep_share(mid) < STEEP_TARGET_SHARE else (lo, mid)
    elevation = base_m + 0.5 * (lo + hi) * rugged
    return Terrain(
        transform, TERRAIN_CELL_M, elevation, slope_pct_of(elevation, TERRAIN_CELL_M), inside
    )


def zonal_means(terrain: Terrain, stands: gpd.GeoDataFrame, *grids: np.ndarray):
    """The mean of each grid over each stand (cell-centre rule); a stand that
    holds no cell centre takes the cell under its representative point."""
    n = len(stands)
    labels = features.rasterize(
        zip(stands.geometry.array, np.arange(1, n + 1), strict=True),
        out_shape=terrain.shape,
        transform=terrain.transform,
        fill=0,
        dtype="int32",
    ).ravel()
    count = np.bincount(labels, minlength=n + 1)[1:]
    point = shapely.get_coordinates(shapely.point_on_surface(stands.geometry.array))
    row, col = (np.asarray(i) for i in rowcol(terrain.transform, point[:, 0], point[:, 1]))
    out = []
    for grid in grids:
        total = np.bincount(labels, weights=grid.ravel(), minlength=n + 1)[1:]
        out.append(np.where(count > 0, total / np.maximum(count, 1), grid[row, col]))
    return out


# ---------------------------------------------------------------------------
# land cover and site-index gaps
# ---------------------------------------------------------------------------


def add_cover(rng: np.random.Generator, stands: gpd.GeoDataFrame, terrain: Terrain):
    """Add COVER: "wetland" on the flattest low ground of each neighbourhood,
    "rock" on the steepest high ground, "forest" elsewhere, in patches.

    Scores are stand means of the terrain (elevation, slope, slope averaged
    over a few hundred metres, height below the surroundings) plus a smooth
    random field and a little per-stand noise; wetland takes the top COVER_SHARES["wetland"] of
    the area by its score, rock then the top COVER_SHARES["rock"] of the
    area among the rest.
    """
    z = terrain.elevation_m
    local_low = ndimage.gaussian_filter(z, 1_000.0 / terrain.cell_m) - z
    rugged = ndimage.gaussian_filter(terrain.slope_pct, 300.0 / terrain.cell_m)
    z_mean, slope_mean, low_mean, rugged_mean = zonal_means(
        terrain, stands, z, terrain.slope_pct, local_low, rugged
    )
    centre = shapely.get_coordinates(shapely.centroid(stands.geometry.array))
    x, y = centre[:, 0], centre[:, 1]
    area = shapely.area(stands.geometry.array)
    n = len(stands)

    def std(v):
        return (v - v.mean()) / v.std()

    wet_score = (
        std(low_mean)
        - 0.8 * std(slope_mean)
        - 0.5 * std(z_mean)
        + 0.6 * smooth_field(rng, (3_000.0, 9_000.0))(x, y)
        + 0.2 * rng.standard_normal(n)
    )
    rock_score = (
        std(slope_mean)
        + std(rugged_mean)
        + 0.5 * std(z_mean)
        + 0.4 * smooth_field(rng, (3_000.0, 9_000.0))(x, y)
        + 0.2 * rng.standard_normal(n)
    )
    cover = np.full(n, "forest", dtype=object)
    wet = COVER_SHARES["wetland"]
    cover[classes_by_area(wet_score, area, ["no", "yes"], [1.0 - wet, wet]) == "yes"] = "wetland"
    left = np.flatnonzero(cover == "forest")
    rock = COVER_SHARES["rock"] * area.sum() / area[left].sum()
    is_rock = classes_by_area(rock_score[left], area[left], ["no", "yes"], [1.0 - rock, rock])
    cover[left[is_rock == "yes"]] = "rock"
    stands = stands.copy()
    stands.insert(stands.columns.get_loc("ZONE") + 1, "COVER", pd.array(cover, dtype=object))
    return stands


def drop_site_indices(rng: np.random.Generator, stands: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Set SI_M to null for a random SI_NULL_SHARE of the stands."""
    n = len(stands)
    gone = rng.choice(n, size=int(round(SI_NULL_SHARE * n)), replace=False)
    si = stands["SI_M"].to_numpy(dtype=float, copy=True)
    si[gone] = np.nan
    stands = stands.copy()
    stands["SI_M"] = si
    return stands


# ---------------------------------------------------------------------------
# streams
# ---------------------------------------------------------------------------


def drainage_tree(outline, terrain: Terrain):
    """Flow directions on HYDRO_CELL_M cells (2 x 2 blocks of the terrain).

    The cells inside the outline and a virtual outlet form a graph: edges
    join 8-neighbours, weighted by the higher elevation of the two (minus a
    tiny bonus for the steeper drop), and the lowest OUTLET_EDGE_SHARE of
    the edge cells join the outlet at their own elevation. The minimum
    spanning tree of that graph, rooted at the outlet, sends every cell to
    its lowest neighbour where there is one and carries closed hollows over
    their lowest rim, as filling them would. Returns the cell-centre
    coordinates, the downstream cell of each (the outlet is index ``n``),
    each cell's depth in the tree and its upstream area [km2].
    """
    block = int(round(HYDRO_CELL_M / terrain.cell_m))
    rows, cols = terrain.shape[0] // block, terrain.shape[1] // block
    z = terrain.elevation_m[: rows * block, : cols * block]
    z = z.reshape(rows, block, cols, block).mean(axis=(1, 3))
    x, y = cell_centres(terrain.transform @ Affine.scale(block), (rows, cols))
    inside = shapely.contains_xy(outline, x, y)
    n = int(inside.sum())
    index = np.full(z.shape, -1)
    index[inside] = np.arange(n)
    zn = z[inside] - z[inside].min() + 1.0  # positive: zero weights would be no edge

    src, dst, dist, edge = [], [], [], []
    for dr, dc in ((0, 1), (1, 0), (1, 1), (1, -1)):  # the four undirected directions
        a = index[: rows - dr, max(0, -dc) : cols - max(0, dc)]
        b = index[dr:, max(0, dc) : cols - max(0, -dc)]
        both = (a >= 0) & (b >= 0)
        src.append(a[both])
        dst.append(b[both])
        dist.append(np.full(int(both.sum()), HYDRO_CELL_M * np.hypot(dr, dc)))
        edge.append(a[(a >= 0) & (b < 0)])
        edge.append(b[(b >= 0) & (a < 0)])
    src, dst, dist = np.concatenate(src), np.concatenate(dst), np.concatenate(dist)
    edge = np.unique(np.concatenate(edge))
    weight = np.maximum(zn[src], zn[dst]) - 1e-3 * np.abs(zn[src] - zn[dst]) / dist
    outlets = edge[zn[edge] <= np.quantile(zn[edge], OUTLET_EDGE_SHARE)]
    src = np.concatenate([src, outlets])
    dst = np.concatenate([dst, np.full(outlets.size, n)])
    weight = np.concatenate([weight, zn[outlets]])

    graph = sparse.coo_matrix((weight, (src, dst)), shape=(n + 1, n + 1)).tocsr()
    tree = csgraph.minimum_spanning_tree(graph)
    _, downstream = csgraph.breadth_first_order(tree, n, directed=False, return_predecessors=True)
    depth = csgraph.dijkstra(tree, directed=False, indices=n, unweighted=True)
    if not np.isfinite(depth).all():
        raise RuntimeError("drainage tree does not reach every cell")
    depth = depth.astype(np.int64)

    # Upstream cells, summed level by level from the deepest (one pass per level).
    upstream = np.ones(n + 1)
    by_depth = np.argsort(depth, kind="stable")
    level_start = np.searchsorted(depth[by_depth], np.arange(depth.max() + 2))
    for level in range(depth.max(), 0, -1):
        cells = by_depth[level_start[level] : level_start[level + 1]]
        np.add.at(upstream, downstream[cells], upstream[cells])
    xy = np.column_stack([x[inside], y[inside]])
    return xy, downstream[:n], depth[:n], upstream[:n] * HYDRO_CELL_M**2 / 1e6


def make_streams(rng: np.random.Generator, outline, terrain: Terrain) -> gpd.GeoDataFrame:
    """The stream network: LineStrings with STREAM_ID and STREAM_CLASS.

    A cell is a channel where its upstream area reaches the class-3 threshold
    of STREAM_CLASS_AREA_KM2; its class is the highest whose threshold it
    reaches. A line runs from a channel head (or the point where its class
    changes) down the main stem, the upstream branch with the larger area,
    to where it joins a larger stream or leaves the region. Vertices are the
    cell centres, each moved by a small random offset (shared by every line
    through the cell, so lines still meet exactly); lines are clipped to the
    outline.
    """
    xy, down, depth, area_km2 = drainage_tree(outline, terrain)
    n = len(xy)
    xy = xy + rng.uniform(-STREAM_JITTER_M, STREAM_JITTER_M, xy.shape)
    thresholds = sorted(STREAM_CLASS_AREA_KM2.items())  # class 1 (largest area) first
    cls = np.select([area_km2 >= a for _, a in thresholds], [c for c, _ in thresholds], 0)
    chan = np.flatnonzero(cls > 0)
    below = down[chan]
    inner = below < n

    # The main upstream branch of every channel cell: its largest channel child.
    child, parent = chan[inner], below[inner]
    order = np.lexsort((area_km2[child], parent))
    last = np.r_[parent[order][1:] != parent[order][:-1], True]
    main_child = np.full(n, -1)
    main_child[parent[order][last]] = child[order][last]
    # Each cell points to the cell upstream on its own line, or to itself at
    # the top of a line; pointer jumping finds the top of every line.
    up = np.arange(n)
    has = chan[main_child[chan] >= 0]
    same = has[cls[main_child[has]] == cls[has]]
    up[same] = main_child[same]
    top = up.copy()
    while not np.array_equal(top[top], top):
        top = top[top]
    line = top[chan]

    # Every channel cell starts a piece that ends at the cell below it, or,
    # at an outlet, just past the nearest point of the outline.
    end = np.empty((chan.size, 2))
    end[inner] = xy[below[inner]]
    out_xy = xy[chan[~inner]]
    near = shapely.get_coordinates(
        shapely.shortest_line(shapely.points(out_xy), shapely.boundary(outline))
    )[1::2]
    end[~inner] = 2.0 * near - out_xy
    order = np.lexsort((-depth[chan], line))
    line_sorted = line[order]
    last = np.r_[line_sorted[1:] != line_sorted[:-1], True]
    v_line = np.concatenate([line_sorted, line_sorted[last]])
    v_rank = np.concatenate([np.arange(line_sorted.size), np.flatnonzero(last) + 0.5])
    v_xy = np.vstack([xy[chan[order]], end[order][last]])
    v_order = np.lexsort((v_rank, v_line))
    tops, v_index = np.unique(v_line[v_order], return_inverse=True)
    lines = shapely.linestrings(np.round(v_xy[v_order], 2), indices=v_index)

    parts, of = shapely.get_parts(shapely.intersection(lines, outline), return_index=True)
    keep = (shapely.get_type_id(parts) == shapely.GeometryType.LINESTRING) & (
        shapely.length(parts) >= 0.5 * HYDRO_CELL_M  # no slivers from the clipping
    )
    parts, line_cls = parts[keep], cls[tops][of[keep]]
    start_y = shapely.get_coordinates(shapely.get_point(parts, 0))[:, 1]
    order = np.lexsort((-start_y, line_cls))  # by class, then north to south
    return gpd.GeoDataFrame(
        {
            "STREAM_ID": np.arange(1, len(parts) + 1, dtype=np.int32),
            "STREAM_CLASS": line_cls[order].astype(np.int32),
        },
        geometry=gpd.GeoSeries(parts[order], crs=CRS),
    )


def riparian_zone(streams: gpd.GeoDataFrame, outline) -> shapely.Geometry:
    """The union of the RIPARIAN_M buffers of every stream, inside the outline."""
    by_class = np.zeros(max(RIPARIAN_M) + 1)
    by_class[list(RIPARIAN_M)] = list(RIPARIAN_M.values())
    width = by_class[streams["STREAM_CLASS"].to_numpy()]
    zone = shapely.union_all(shapely.buffer(streams.geometry.array, width))
    return shapely.intersection(zone, outline)


# ---------------------------------------------------------------------------
# reserves
# ---------------------------------------------------------------------------


def make_reserves(rng: np.random.Generator, outline) -> gpd.GeoDataFrame:
    """RESERVE_COUNT_RANGE irregular reserves, together RESERVE_SHARE of the area.

    Centres are spread by Lloyd relaxation inside the outline shrunk by
    RESERVE_EDGE_M; each reserve is a smooth random blob (like the outline,
    more irregular) scaled to its share of the total, then cut to its
    centre's Voronoi cell and to the outline, so reserves never overlap and
    stay inside. They ignore stand boundaries and so cut across stands.
    """
    k = int(rng.integers(RESERVE_COUNT_RANGE[0], RESERVE_COUNT_RANGE[1] + 1))
    core = shapely.buffer(outline, -RESERVE_EDGE_M)
    centres = sample_seeds(rng, core, k, lambda x, y: np.ones_like(x))
    for _ in range(6):
        centres = shapely.get_coordinates(shapely.centroid(tessellate(centres, core)))

    theta = np.linspace(0.0, 2.0 * np.pi, 360, endpoint=False)
    harmonics = np.arange(2, 8)
    amp = rng.uniform(0.5, 1.0, (k, harmonics.size)) * 0.4 / harmonics
    phase = rng.uniform(0.0, 2.0 * np.pi, (k, harmonics.size))
    angle = theta[None, :, None] * harmonics + phase[:, None, :]  # (k, 360, harmonics)
    r = np.exp((amp[:, None, :] * np.cos(angle)).sum(axis=-1))
    unit = np.stack([r * np.cos(theta), r * np.sin(theta)], axis=-1)  # (k, 360, 2)
    unit_area = shapely.area(shapely.polygons(unit))
    share = rng.dirichlet(np.full(k, 4.0))
    target_m2 = RESERVE_SHARE * shapely.area(outline) * share
    xy = unit * np.sqrt(target_m2 / unit_area)[:, None, None] + centres[:, None, :]
    blobs = shapely.polygons(np.round(xy, 2))
    own_cell = tessellate(centres, outline)
    reserves = shapely.intersection(shapely.intersection(blobs, own_cell), outline)

    order = np.lexsort((centres[:, 0], -centres[:, 1]))  # north to south
    ids = np.arange(1, k + 1, dtype=np.int32)
    return gpd.GeoDataFrame(
        {"RESERVE_ID": ids, "NAME": pd.array([f"Reserve {i}" for i in ids], dtype=object)},
        geometry=gpd.GeoSeries(reserves[order], crs=CRS),
    )


# ---------------------------------------------------------------------------
# rasters
# ---------------------------------------------------------------------------


class Raster(NamedTuple):
    """One band of float32 with NODATA outside the region."""

    array: np.ndarray
    transform: Affine
    crs: str
    units: str
    description: str


def slope_raster(terrain: Terrain, outline) -> Raster:
    """Slope [%] on the terrain grid; NODATA where a cell does not touch the region."""
    outside = features.geometry_mask(
        [outline], out_shape=terrain.shape, transform=terrain.transform, all_touched=True
    )
    array = np.where(outside, NODATA, np.round(terrain.slope_pct, 1)).astype(np.float32)
    return Raster(array, terrain.transform, CRS, "percent", "slope, 100 * rise / run")


def site_index_raster(
    rng: np.random.Generator, stands: gpd.GeoDataFrame, site_index_m: np.ndarray, outline
) -> Raster:
    """An estimate of site index [m] on SITE_CELL_M cells in SITE_CRS.

    The stands are reprojected and their full site index (before any was
    dropped) is burnt in by the cell-centre rule; cells between stands and
    the edge take their nearest burnt cell; then a light Gaussian smoothing
    and smooth noise of SITE_NOISE_SD_M. NODATA where a cell does not touch
    the region.
    """
    geoms = stands.geometry.to_crs(SITE_CRS).array
    outline_3035 = gpd.GeoSeries([outline], crs=CRS).to_crs(SITE_CRS).array[0]
    transform, shape = region_grid(outline_3035, SITE_CELL_M, GRID_MARGIN_M, SITE_CELL_M)
    burnt = features.rasterize(
        zip(geoms, site_index_m, strict=True),
        out_shape=shape,
        transform=transform,
        fill=np.nan,
        dtype="float64",
    )
    gap = np.isnan(burnt)
    nearest = ndimage.distance_transform_edt(gap, return_distances=False, return_indices=True)
    filled = burnt[tuple(nearest)]
    estimate = ndimage.gaussian_filter(filled, SITE_SMOOTH_CELLS, mode="nearest")
    estimate += SITE_NOISE_SD_M * unit_noise(rng, shape, SITE_NOISE_SCALE_M / SITE_CELL_M)
    outside = features.geometry_mask(
        [outline_3035], out_shape=shape, transform=transform, all_touched=True
    )
    array = np.where(outside, NODATA, np.round(estimate, 2)).astype(np.float32)
    return Raster(array, transform, SITE_CRS, "metre", "site index, height at base age 50")


# ---------------------------------------------------------------------------
# checks, summary, writing
# ---------------------------------------------------------------------------


def age_class_of(age) -> np.ndarray:
    return np.select([age <= 40, age <= 90], ["1-40", "41-90"], default="91+")


def area_shares(stands: gpd.GeoDataFrame, key) -> pd.Series:
    area = stands.geometry.area
    return area.groupby(np.asarray(key)).sum() / area.sum()


def check_stands(stands: gpd.GeoDataFrame, outline: shapely.Polygon) -> None:
    """Fail loudly if the stand layer breaks any of its promises."""
    problems = []
    geoms = stands.geometry.array
    area_ha = shapely.area(geoms) / M2_PER_HA
    n = len(stands)
    if not N_STANDS_RANGE[0] <= n <= N_STANDS_RANGE[1]:
        problems.append(f"{n} stands, expected {N_STANDS_RANGE[0]}-{N_STANDS_RANGE[1]}")
    if not ((area_ha > MIN_STAND_HA) & (area_ha < MAX_STAND_HA)).all():
        problems.append(
            f"stand areas {area_ha.min():.3f}-{area_ha.max():.3f} ha outside "
            f"({MIN_STAND_HA}, {MAX_STAND_HA})"
        )
    if not 12.0 <= area_ha.mean() <= 16.0:
        problems.append(f"mean stand area {area_ha.mean():.2f} ha outside 12-16")
    if not (shapely.get_type_id(geoms) == shapely.GeometryType.POLYGON).all():
        problems.append("not every stand is a single Polygon")
    if not shapely.is_valid(geoms).all():
        problems.append("invalid stand geometries")
    if not shapely.coverage_is_valid(geoms):
        problems.append("stands overlap or neighbours do not share exact vertices")
    union_ha = shapely.area(shapely.coverage_union_all(geoms)) / M2_PER_HA
    if abs(union_ha - area_ha.sum()) > 1e-6 * union_ha:
        problems.append("stand areas do not add up to the area of their union")
    if abs(union_ha - shapely.area(outline) / M2_PER_HA) > 1e-6 * union_ha:
        problems.append("stands do not cover the region outline")
    if not (stands["STAND_NO"].to_numpy() == np.arange(1, n + 1)).all():
        problems.append("STAND_NO is not 1..N")
    if set(stands["SPP"]) != set(SPECIES_SHARES):
        problems.append(f"species codes {sorted(set(stands['SPP']))}")
    for name, (_, _, lo, hi) in SITE_INDEX.items():
        si = stands.loc[stands["SPP"] == name, "SI_M"].dropna()
        if not si.between(lo, hi).all():
            problems.append(f"site index of {name} outside [{lo}, {hi}]")
    null_share = stands["SI_M"].isna().mean()
    if abs(null_share - SI_NULL_SHARE) > 0.002:
        problems.append(f"{null_share:.2%} of stands have no site index")
    if not stands["AGE"].between(1, 220).all():
        problems.append("ages outside 1-220")
    if (stands.loc[stands["SPP"] == "aspen", "AGE"] > ASPEN_MAX_AGE).any():
        problems.append(f"aspen older than {ASPEN_MAX_AGE}")
    age_share = area_shares(stands, age_class_of(stands["AGE"].to_numpy()))
    if not age_share.get("41-90", 0.0) < age_share.get("91+", 0.0):
        problems.append("no age-class gap: 41-90 holds at least as much area as 91+")
    zone_share = area_shares(stands, stands["ZONE"])
    if set(zone_share.index) != {z for z, _ in ZONE_SHARES} or (zone_share < MIN_ZONE_SHARE).any():
        problems.append(f"zone shares {zone_share.round(3).to_dict()}")
    cover_share = area_shares(stands, stands["COVER"])
    if set(cover_share.index) != {"forest", *COVER_SHARES} or any(
        abs(cover_share[c] - s) > 0.003 for c, s in COVER_SHARES.items()
    ):
        problems.append(f"cover shares {cover_share.round(4).to_dict()}")
    if problems:
        raise RuntimeError("sample region check failed: " + "; ".join(problems))


def check_extras(
    stands, site_index_m, streams, reserves, riparian, slope: Raster, site: Raster, outline
) -> None:
    """Fail loudly if the streams, reserves or rasters break their promises."""
    problems = []
    region_m2 = shapely.area(outline)
    lines = streams.geometry.array
    if not STREAM_SEGMENTS_RANGE[0] <= len(streams) <= STREAM_SEGMENTS_RANGE[1]:
        problems.append(f"{len(streams)} stream lines")
    if not (shapely.get_type_id(lines) == shapely.GeometryType.LINESTRING).all():
        problems.append("not every stream is a LineString")
    if set(streams["STREAM_CLASS"]) != set(RIPARIAN_M):
        problems.append(f"stream classes {sorted(set(streams['STREAM_CLASS']))}")
    if not shapely.covers(shapely.buffer(outline, 0.01), lines).all():
        problems.append("streams leave the outline")
    share = shapely.area(riparian) / region_m2
    if not RIPARIAN_SHARE_RANGE[0] <= share <= RIPARIAN_SHARE_RANGE[1]:
        problems.append(f"stream buffers cover {share:.2%} of the region")

    polys = reserves.geometry.array
    if not RESERVE_COUNT_RANGE[0] <= len(reserves) <= RESERVE_COUNT_RANGE[1]:
        problems.append(f"{len(reserves)} reserves")
    if not (shapely.get_type_id(polys) == shapely.GeometryType.POLYGON).all():
        problems.append("not every reserve is a single Polygon")
    if not shapely.is_valid(polys).all():
        problems.append("invalid reserve geometries")
    if not shapely.covers(outline, polys).all():
        problems.append("reserves leave the outline")
    total = shapely.area(polys).sum()
    if abs(shapely.area(shapely.union_all(polys)) - total) > 1e-6 * total:
        problems.append("reserves overlap")
    if not RESERVE_SHARE_RANGE[0] <= total / region_m2 <= RESERVE_SHARE_RANGE[1]:
        problems.append(f"reserves cover {total / region_m2:.2%} of the region")

    valid = slope.array != NODATA
    steep = (slope.array[valid] > STEEP_SLOPE_PCT).mean()
    if not STEEP_SHARE_RANGE[0] <= steep <= STEEP_SHARE_RANGE[1]:
        problems.append(f"{steep:.2%} of the slope raster is steeper than {STEEP_SLOPE_PCT} %")
    for raster in (slope, site):
        if not np.isfinite(raster.array).all() or (raster.array[raster.array != NODATA] < 0).any():
            problems.append(f"{raster.description}: values not finite or negative")
    labels = features.rasterize(
        zip(stands.geometry.to_crs(site.crs).array, np.arange(1, len(stands) + 1), strict=True),
        out_shape=site.array.shape,
        transform=site.transform,
        fill=0,
        dtype="int32",
    )
    ok = (labels > 0) & (site.array != NODATA)
    count = np.bincount(labels[ok], minlength=len(stands) + 1)[1:]
    total = np.bincount(labels[ok], weights=site.array[ok], minlength=len(stands) + 1)[1:]
    off = np.abs(total / np.maximum(count, 1) - site_index_m)[count > 0]
    if (count == 0).any() or np.quantile(off, 0.95) > 1.0 or np.median(off) > 0.5:
        problems.append(
            f"site-index raster: {(count == 0).sum()} stands without a cell, stand means off "
            f"SI_M by {np.median(off):.2f} m (median), {np.quantile(off, 0.95):.2f} m (95 %)"
        )
    if problems:
        raise RuntimeError("sample region check failed: " + "; ".join(problems))


def summary(stands, streams, reserves, riparian, terrain: Terrain, outline) -> str:
    area = stands.geometry.area
    region_m2 = shapely.area(outline)
    spp = area_shares(stands, stands["SPP"])
    age = area_shares(stands, age_class_of(stands["AGE"].to_numpy()))
    cover = area_shares(stands, stands["COVER"])
    spp_txt = " ".join(f"{s} {spp.get(s, 0.0):.1%}" for s in ("spruce", "pine", "fir", "aspen"))
    age_txt = " ".join(f"{a} {age.get(a, 0.0):.1%}" for a in ("1-40", "41-90", "91+"))
    z = terrain.elevation_m[terrain.inside]
    stream_km = shapely.length(streams.geometry.array).sum() / 1000.0
    steep = (terrain.slope_pct[terrain.inside] > STEEP_SLOPE_PCT).mean()
    return (
        f"{REGION_NAME}: {len(stands)} stands, {area.sum() / M2_PER_HA:,.1f} ha; "
        f"species {spp_txt}; age {age_txt}; "
        f"cover wetland {cover.get('wetland', 0.0):.1%} rock {cover.get('rock', 0.0):.1%}; "
        f"SI_M null in {stands['SI_M'].isna().mean():.1%} of stands; "
        f"streams {len(streams)} lines {stream_km:.0f} km, "
        f"buffers {shapely.area(riparian) / region_m2:.1%} of area; "
        f"reserves {len(reserves)}, {shapely.area(reserves.geometry.array).sum() / region_m2:.1%}; "
        f"slope > {STEEP_SLOPE_PCT:g} % on {steep:.1%}; relief {z.min():.0f}-{z.max():.0f} m"
    )


def temporary_sibling(path: Path) -> Path:
    return path.with_name(f".{path.stem}.{os.getpid()}.tmp{path.suffix}")


def write_gpkg(layers: dict[str, gpd.GeoDataFrame], path: Path) -> None:
    """Write the layers to one GeoPackage at ``path``, atomically: the file
    is written beside the target under a temporary name and then moved over it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = temporary_sibling(path)
    # A fixed GeoPackage timestamp keeps re-runs byte-identical.
    previous_date = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": GPKG_TIMESTAMP})
    try:
        tmp.unlink(missing_ok=True)
        for name, frame in layers.items():
            frame.to_file(
                tmp,
                driver="GPKG",
                layer=name,
                engine="pyogrio",
                # Arrow I/O is used where pyarrow is installed; the result is the same.
                use_arrow=importlib.util.find_spec("pyarrow") is not None,
                layer_options={
                    "DESCRIPTION": f"{LAYER_TITLES[name]} of {REGION_NAME}, an invented sample "
                    f"region made by make_sample_region.py with seed {SEED}",
                },
            )
        os.replace(tmp, path)
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": previous_date})
        for leftover in (tmp, *(tmp.with_name(tmp.name + s) for s in ("-wal", "-shm", "-journal"))):
            leftover.unlink(missing_ok=True)


def write_raster(raster: Raster, path: Path) -> None:
    """Write a one-band GeoTIFF (float32, DEFLATE, tiled) atomically."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = temporary_sibling(path)
    rows, cols = raster.array.shape
    try:
        with rasterio.open(
            tmp,
            "w",
            driver="GTiff",
            width=cols,
            height=rows,
            count=1,
            dtype="float32",
            crs=raster.crs,
            transform=raster.transform,
            nodata=NODATA,
            tiled=True,
            blockxsize=256,
            blockysize=256,
            compress="deflate",
            predictor=3,
        ) as dst:
            dst.write(raster.array, 1)
            dst.set_band_description(1, raster.description)
            dst.update_tags(1, UNITS=raster.units)
            dst.update_tags(
                REGION=f"{REGION_NAME}, an invented sample region made by "
                f"make_sample_region.py with seed {SEED}"
            )
        os.replace(tmp, path)
    finally:
        for leftover in (tmp, tmp.with_name(tmp.name + ".aux.xml")):
            leftover.unlink(missing_ok=True)


def parse_args(argv=None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--out",
        type=Path,
        default=DEFAULT_OUT,
        help=f"GeoPackage to write (default: {DEFAULT_OUT.name} next to this script); "
        "the rasters go into the same folder",
    )
    return parser.parse_args(argv)


def main(argv=None) -> gpd.GeoDataFrame:
    args = parse_args(argv)
    outline = make_outline(stream(STREAM_OUTLINE))
    stands = make_stands(stream(STREAM_STANDS), outline)
    stands = assign_attributes(stream(STREAM_ATTRIBUTES), stands)
    site_index_m = stands["SI_M"].to_numpy(copy=True)  # before any is dropped

    terrain = make_terrain(stream(STREAM_TERRAIN), outline)
    stands = add_cover(stream(STREAM_COVER), stands, terrain)
    stands = drop_site_indices(stream(STREAM_SITE_GAPS), stands)
    check_stands(stands, outline)
    streams = make_streams(stream(STREAM_STREAMS), outline, terrain)
    riparian = riparian_zone(streams, outline)
    reserves = make_reserves(stream(STREAM_RESERVES), outline)
    slope = slope_raster(terrain, outline)
    site = site_index_raster(stream(STREAM_SITE_RASTER), stands, site_index_m, outline)
    check_extras(stands, site_index_m, streams, reserves, riparian, slope, site, outline)

    # The sample data, one output per entry, each written into the folder of
    # --out. Further layers and rasters of the region are added to this list.
    folder = args.out.parent
    outputs = [
        lambda: write_gpkg(
            {LAYER: stands, STREAMS_LAYER: streams, RESERVES_LAYER: reserves}, args.out
        ),
        lambda: write_raster(slope, folder / SLOPE_TIF),
        lambda: write_raster(site, folder / SITE_INDEX_TIF),
    ]
    for make_output in outputs:
        make_output()

    print(summary(stands, streams, reserves, riparian, terrain, outline))
    return stands


if __name__ == "__main__":
    main(sys.argv[1:])
