"""Time the pipeline's stages on synthetic regions of 10k, 100k and 1M stands.

Each size runs in its own process (so peak memory is per size): it builds a grid of square
stands (1-30 ha, shared edges) with random species, site index and ages, writes it as a
GeoPackage, then times reading and checking, the projection and even-flow scheduling, building
the output tables, and writing the outputs. Prints one line per size and, with --markdown, a
table for docs/performance.md.

    python benchmarks/bench_pipeline.py                 # 10k, 100k, 1M
    python benchmarks/bench_pipeline.py --sizes 10000 100000
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SCENARIO = HERE.parent / "sample_region" / "scenario.toml"
SEED = 7


def build_region(n: int, path: Path) -> None:
    import geopandas as gpd
    import pyogrio
    import shapely

    rng = np.random.default_rng(SEED)
    side = 250.0  # 6.25 ha squares
    per_row = int(np.ceil(np.sqrt(n)))
    i = np.arange(n)
    x = 400_000 + (i % per_row) * side
    y = 6_500_000 + (i // per_row) * side
    species = rng.choice(["spruce", "pine", "fir", "aspen"], n, p=[0.4, 0.3, 0.2, 0.1])
    old = rng.random(n) < 0.57
    age = np.where(old, rng.integers(91, 220, n), rng.integers(1, 40, n))
    age = np.where(species == "aspen", np.minimum(age, 140), age)
    frame = gpd.GeoDataFrame(
        {
            "STAND_NO": i + 1,
            "SPP": species,
            "SI_M": np.round(rng.uniform(15, 25, n), 1),
            "AGE": age,
            "ZONE": rng.choice(["highland", "valley", "lakeshore"], n),
        },
        geometry=shapely.box(x, y, x + side, y + side),
        crs="EPSG:32633",
    )
    pyogrio.write_dataframe(frame, path, layer="stands", driver="GPKG", use_arrow=True)


def synthetic_scenario(gpkg: Path, n: int):
    """The sample scenario's species, curves and rules over a synthetic layer, no netdown."""
    import tomllib

    from foresight.config import parse_scenario

    raw = tomllib.loads(SCENARIO.read_text())
    raw["inventory"]["path"] = str(gpkg)
    raw["inventory"].pop("from_raster", None)  # the sample's rasters cover the sample only
    raw.pop("landbase", None)
    raw["harvest"]["max_area_ha_per_period"] = n * 6.25 * 0.18
    return parse_scenario(raw, base_dir=SCENARIO.parent, where=str(SCENARIO))


def one_size(n: int) -> dict:
    from foresight.pipeline import RunResult, check, write_outputs
    from foresight.projection import CurveSet, Periods, StandArrays
    from foresight.reporting import (
        harvests_layer,
        stands_layer,
        wood_flow_by_product,
        wood_flow_table,
    )
    from foresight.schedule import find_even_flow

    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        tmp = Path(tmp)
        gpkg = tmp / "region.gpkg"
        build_region(n, gpkg)
        scn = synthetic_scenario(gpkg, n)
        t = {}
        t0 = time.perf_counter()
        inv = check(scn)
        t["read_check_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        periods, curves = Periods.from_scenario(scn), CurveSet.from_scenario(scn)
        arrays = StandArrays.from_table(inv.stands, scn, curves)
        flow = find_even_flow(
            arrays,
            curves,
            periods,
            band=scn.flow.band,
            ending_stock=scn.flow.ending_stock,
            priority=scn.harvest.priority,
            max_area_ha=scn.harvest.max_area_ha_per_period,
        )
        t["project_schedule_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        result = RunResult(
            None,
            inv,
            flow,
            wood_flow_table(flow, periods),
            stands_layer(flow, inv.stands, arrays, curves, periods),
            harvests_layer(flow, inv.stands, periods),
            wood_flow_by_product(flow, arrays, curves, scn),
        )
        t["tables_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        out = tmp / "out"
        out.mkdir()
        write_outputs(result, scn, out)
        t["write_s"] = time.perf_counter() - t0
        t["total_s"] = sum(t.values())
        t["search_steps"] = flow.steps
        t["harvest_rows"] = len(result.harvests)
        t["peak_rss_gb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2
        t["stands"] = n
        t["periods"] = periods.count
        return t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 1_000_000])
    ap.add_argument("--one", type=int, help=argparse.SUPPRESS)  # child process
    ap.add_argument("--markdown", action="store_true")
    args = ap.parse_args()
    if args.one:
        print(json.dumps(one_size(args.one)))
        return
    rows = []
    for n in args.sizes:
        proc = subprocess.run(
            [sys.executable, __file__, "--one", str(n)], capture_output=True, text=True, check=True
        )
        row = json.loads(proc.stdout.strip().splitlines()[-1])
        rows.append(row)
        print(
            f"{n:>9,} stands x {row['periods']} periods: read+check {row['read_check_s']:.2f} s, "
            f"project+schedule {row['project_schedule_s']:.2f} s ({row['search_steps']} "
            f"search steps), tables {row['tables_s']:.2f} s, write {row['write_s']:.2f} s "
            f"({row['harvest_rows']:,} harvest rows), total {row['total_s']:.1f} s, "
            f"peak RSS {row['peak_rss_gb']:.2f} GB",
            flush=True,
        )
    if args.markdown:
        print(
            "\n| stands | read + check s | project + schedule s | tables s | write s | "
            "total s | peak RSS GB |"
        )
        print("|---:|---:|---:|---:|---:|---:|---:|")
        for r in rows:
            print(
                f"| {r['stands']:,} | {r['read_check_s']:.2f} | {r['project_schedule_s']:.2f} |"
                f" {r['tables_s']:.2f} | {r['write_s']:.2f} | {r['total_s']:.1f} |"
                f" {r['peak_rss_gb']:.2f} |"
            )


if __name__ == "__main__":
    main()
