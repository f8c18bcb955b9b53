"""Time the adjacency graph.

python benchmarks/bench_adjacency.py                  # graph at 100k and 1M Voronoi stands

The spatial rule-based run against the aspatial one: benchmarks/bench_spatial.py.
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np
import shapely

from yieldscape.adjacency import build_adjacency


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


if __name__ == "__main__":
    main()
