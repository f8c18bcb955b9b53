"""Generate the sample region "Norrowmere" used by foresight's demo and tests.

Norrowmere is an invented region: its outline, stands and attributes are all
made up by this script, and none of it describes a real place or real data.

What it makes
-------------
``norrowmere.gpkg`` (next to this script unless ``--out`` is given) with one
layer, ``stands``, in EPSG:32633 (metres), centred near x 500 000, y 6 700 000:

* an irregular region outline of 50 000 ha (a smoothed random blob);
* 3 000 - 4 000 stands, the Voronoi cells of well-spread seed points clipped to
  the outline, each a valid single Polygon of strictly more than 1 ha and less
  than 80 ha; the stands form a clean coverage (no gaps or overlaps inside the
  outline, and neighbours share exactly the same vertices along common edges);
* attribute fields named differently from foresight's own names, so that a
  scenario's field mapping is exercised:

  ``STAND_NO`` int, unique 1..N, numbered in north-to-south rows, west to east;
  ``SPP``      species code: spruce / pine / fir / aspen (about 40/30/20/10 %
               of the area), in patches;
  ``SI_M``     site index, metres of height at base age 50, one decimal,
               species-specific;
  ``AGE``      years; by area about 35 % 1-40, 8 % 41-90 and 57 % 91-220 (an
               age-class gap and a surplus of old forest); aspen at most 140;
  ``ZONE``     highland / valley / lakeshore, by position (a smooth "elevation"
               field), each at least 15 % of the area.

Determinism
-----------
Everything random comes from numpy ``default_rng`` seeded from ``SEED``
(20261201). Each step draws from its own stream (``SEED`` plus a fixed stream
number), so adding a step later does not change what earlier steps make. Two
runs give identical attributes and geometries; with the same GDAL the file
is byte-identical too (its timestamp is fixed).

Usage::

    python sample_region/make_sample_region.py [--out PATH]
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely

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

# One random stream per step; new steps take new numbers.
STREAM_OUTLINE = 1
STREAM_STANDS = 2
STREAM_ATTRIBUTES = 3


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
    return stands


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
        si = stands.loc[stands["SPP"] == name, "SI_M"]
        if not si.between(lo, hi).all():
            problems.append(f"site index of {name} outside [{lo}, {hi}]")
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
    if problems:
        raise RuntimeError("sample region check failed: " + "; ".join(problems))


def summary(stands: gpd.GeoDataFrame) -> str:
    area = stands.geometry.area
    spp = area_shares(stands, stands["SPP"])
    age = area_shares(stands, age_class_of(stands["AGE"].to_numpy()))
    spp_txt = " ".join(f"{s} {spp.get(s, 0.0):.1%}" for s in ("spruce", "pine", "fir", "aspen"))
    age_txt = " ".join(f"{a} {age.get(a, 0.0):.1%}" for a in ("1-40", "41-90", "91+"))
    return (
        f"{REGION_NAME}: {len(stands)} stands, {area.sum() / M2_PER_HA:,.1f} ha; "
        f"species {spp_txt}; age {age_txt}"
    )


def write(stands: gpd.GeoDataFrame, path: Path) -> None:
    """Write the stands layer to a GeoPackage at ``path``, atomically: the file
    is written beside the target under a temporary name and then moved over it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.stem}.{os.getpid()}.tmp{path.suffix}")
    # A fixed GeoPackage timestamp keeps re-runs byte-identical.
    previous_date = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": GPKG_TIMESTAMP})
    try:
        stands.to_file(
            tmp,
            driver="GPKG",
            layer=LAYER,
            engine="pyogrio",
            # Arrow I/O is used where pyarrow is installed; the result is the same.
            use_arrow=importlib.util.find_spec("pyarrow") is not None,
            layer_options={
                "DESCRIPTION": f"Stands of {REGION_NAME}, an invented sample region "
                f"made by make_sample_region.py with seed {SEED}",
            },
        )
        os.replace(tmp, path)
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": previous_date})
        for leftover in (tmp, *(tmp.with_name(tmp.name + s) for s in ("-wal", "-shm", "-journal"))):
            leftover.unlink(missing_ok=True)


def parse_args(argv=None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--out",
        type=Path,
        default=DEFAULT_OUT,
        help=f"GeoPackage to write (default: {DEFAULT_OUT.name} next to this script)",
    )
    return parser.parse_args(argv)


def main(argv=None) -> gpd.GeoDataFrame:
    args = parse_args(argv)
    outline = make_outline(stream(STREAM_OUTLINE))
    stands = make_stands(stream(STREAM_STANDS), outline)
    stands = assign_attributes(stream(STREAM_ATTRIBUTES), stands)
    check_stands(stands, outline)

    # The sample data, one output per entry, each written into the folder of
    # --out. Further layers and rasters of the region are added to this list.
    outputs = [
        lambda: write(stands, args.out),
    ]
    for make_output in outputs:
        make_output()

    print(summary(stands))
    return stands


if __name__ == "__main__":
    main(sys.argv[1:])
