"""Time the adjacency graph and a spatial rule-based run.

python benchmarks/bench_adjacency.py                  # graph at 100k and 1M Voronoi stands
python benchmarks/bench_adjacency.py --spatial 100000 # also a spatial run of that many stands
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np
import shapely

from yieldscape.adjacency import build_adjacency
from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, find_even_flow
from yieldscape.schedule.spatial import SpatialRules


def voronoi_stands(n: int, seed: int = 3) -> np.ndarray:
    """An irregular tessellation of n stands of about 12 ha (Voronoi cells of random seeds)."""
    rng = np.random.default_rng(seed)
    side = np.sqrt(n * 12e4)
    pts = shapely.multipoints(rng.uniform(0, side, (n, 2)))
    box = shapely.box(0, 0, side, side)
    cells = shapely.get_parts(shapely.voronoi_polygons(pts, extend_to=box))
    return shapely.intersection(cells, box)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100_000, 1_000_000])
    ap.add_argument("--spatial", type=int, default=0, help="stands for a spatial run")
    args = ap.parse_args()
    for n in args.sizes:
        geoms = voronoi_stands(n)
        t0 = time.perf_counter()
        adj = build_adjacency(geoms, "edge")
        t = time.perf_counter() - t0
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2
        print(
            f"adjacency of {len(geoms):,} stands: {adj.pairs:,} edge pairs in {t:.1f} s "
            f"(peak RSS so far {peak:.1f} GB)",
            flush=True,
        )
    if args.spatial:
        n = args.spatial
        geoms = voronoi_stands(n)
        adj = build_adjacency(geoms, "edge")
        rng = np.random.default_rng(5)
        ages = np.where(
            rng.random(len(geoms)) < 0.57,
            rng.uniform(91, 220, len(geoms)),
            rng.uniform(1, 40, len(geoms)),
        )
        m = len(geoms)
        stands = StandArrays(
            np.zeros(m, np.int32),
            np.full(m, 20.0),
            ages,
            shapely.area(geoms) / 1e4,
            np.full(m, 60.0),
            np.zeros(m),
            np.arange(m),
        )
        curves = CurveSet(["spruce"], [ChapmanRichards(620.0, 0.028, 3.0)])
        t0 = time.perf_counter()
        flow = find_even_flow(
            stands,
            curves,
            Periods(2027, 10, 20),
            HarvestRules(spatial=SpatialRules(adj, 20.0, 40.0)),
            band=0.1,
            ending_stock=1.0,
        )
        print(
            f"spatial run (green-up 20 y, openings <= 40 ha) of {m:,} stands x 20 periods: "
            f"{time.perf_counter() - t0:.1f} s, {flow.steps} trials, level "
            f"{flow.level_m3_per_year:,.0f} m3/year",
            flush=True,
        )


if __name__ == "__main__":
    main()
