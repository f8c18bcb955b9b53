"""Time the spatial rule-based search against the aspatial one on the same stands.

python benchmarks/bench_spatial.py                 # 100k Voronoi stands, 3 rounds
python benchmarks/bench_spatial.py --sizes 100000 1000000 --rounds 3

Three variants of one stand table, each through ``find_even_flow`` as the pipeline calls it:
aspatial; green-up 20 years with the unit restriction (no two neighbours open); green-up 20
years with openings of at most 40 ha. Medians of the rounds, run side by side (variants
interleaved within each round), and the ratio of each spatial variant to the aspatial one.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import shapely
from bench_adjacency import voronoi_stands

from yieldscape.adjacency import build_adjacency
from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, find_even_flow
from yieldscape.schedule.spatial import SpatialRules

VARIANTS = ("aspatial", "unit", "openings")


def stand_table(n: int) -> tuple[StandArrays, object]:
    """n Voronoi stands of about 12 ha (57% old, the rest young) and their edge adjacency."""
    geoms = voronoi_stands(n)
    adj = build_adjacency(geoms, "edge")
    rng = np.random.default_rng(5)
    m = len(geoms)
    ages = np.where(rng.random(m) < 0.57, rng.uniform(91, 220, m), rng.uniform(1, 40, m))
    stands = StandArrays(
        np.zeros(m, np.int32),
        np.full(m, 20.0),
        ages,
        shapely.area(geoms) / 1e4,
        np.full(m, 60.0),
        np.zeros(m),
        np.arange(m),
    )
    return stands, adj


def rules_of(variant: str, adj) -> HarvestRules:
    if variant == "aspatial":
        return HarvestRules()
    return HarvestRules(spatial=SpatialRules(adj, 20.0, 0.0 if variant == "unit" else 40.0))


def one_size(n: int, rounds: int) -> dict:
    """Median seconds of each variant's search and the spatial/aspatial ratios."""
    stands, adj = stand_table(n)
    curves = CurveSet(["spruce"], [ChapmanRichards(620.0, 0.028, 3.0)])
    periods = Periods(2027, 10, 20)
    times: dict[str, list[float]] = {v: [] for v in VARIANTS}
    levels = {}
    for _ in range(rounds):
        for v in VARIANTS:
            t0 = time.process_time()
            flow = find_even_flow(stands, curves, periods, rules_of(v, adj), 0.1, 1.0)
            times[v].append(time.process_time() - t0)
            levels[v] = flow.level_m3_per_year
    row: dict = {"stands": len(stands.area_ha)}
    for v in VARIANTS:
        row[f"{v}_s"] = statistics.median(times[v])
        row[f"{v}_level"] = levels[v]
    for v in VARIANTS[1:]:
        row[f"{v}_ratio"] = row[f"{v}_s"] / row["aspatial_s"]
    return row


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100_000])
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args()
    print("| stands | aspatial s | unit s | openings s | unit/aspatial | openings/aspatial |")
    print("|---|---|---|---|---|---|")
    for n in args.sizes:
        r = one_size(n, args.rounds)
        print(
            f"| {r['stands']:,} | {r['aspatial_s']:.2f} | {r['unit_s']:.2f} | "
            f"{r['openings_s']:.2f} | {r['unit_ratio']:.2f} | {r['openings_ratio']:.2f} |",
            flush=True,
        )


if __name__ == "__main__":
    main()
